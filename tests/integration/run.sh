#!/bin/sh
# SPDX-License-Identifier: ISC
# Runs every tests/integration/t_*.sh with the build directory as $1.
set -u
build=${1:-build}
pass=0; fail=0
for t in tests/integration/t_*.sh; do
	[ -e "$t" ] || continue
	if sh "$t" "$build"; then pass=$((pass + 1)); echo "PASS $t"
	else fail=$((fail + 1)); echo "FAIL $t"; fi
done
echo "integration: $pass passed, $fail failed"
[ "$fail" -eq 0 ]
