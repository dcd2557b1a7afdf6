#!/bin/sh
# SPDX-License-Identifier: ISC
# Run one libFuzzer target for a bounded time and print one summary line:
#   fuzz TARGET: N executions in S s (E exec/s), cov C, ft F, corpus K
# Usage: tests/fuzz/run.sh BUILD TARGET SECONDS
# The seeds in tests/fuzz/TARGET/ are read, never written: new inputs go
# to BUILD/fuzz-corpus/TARGET/, crashes to BUILD/fuzz-crash-TARGET-*.
# A crash fails the run: minimise it (BUILD/fuzz_TARGET -minimize_crash=1
# FILE), fix the bug, and add the input as a regression test.
set -u
build=$1
t=$2
secs=$3
bin=$build/fuzz_$t
seeds=tests/fuzz/$t
corpus=$build/fuzz-corpus/$t
log=$build/fuzz-$t.log
dict=
[ -f "tests/fuzz/$t.dict" ] && dict=-dict=tests/fuzz/$t.dict
mkdir -p "$corpus"
# ASan's leak checker runs at exit; the UBSan part aborts on the first
# report (-fno-sanitize-recover), which libFuzzer treats as a crash.
"$bin" -max_total_time="$secs" -timeout=10 -rss_limit_mb=1024 \
    -print_final_stats=1 -artifact_prefix="$build/fuzz-crash-$t-" \
    $dict "$corpus" "$seeds" >"$log" 2>&1
rc=$?
execs=$(sed -n 's/^stat::number_of_executed_units: *//p' "$log")
rate=$(sed -n 's/^stat::average_exec_per_sec: *//p' "$log")
last=$(grep -E '^#[0-9]+' "$log" | tail -n 1)
cov=$(echo "$last" | sed -n 's/.* cov: \([0-9]*\).*/\1/p')
ft=$(echo "$last" | sed -n 's/.* ft: \([0-9]*\).*/\1/p')
corp=$(echo "$last" | sed -n 's/.* corp: \([0-9]*\).*/\1/p')
echo "fuzz $t: ${execs:-?} executions in $secs s (${rate:-?} exec/s), cov ${cov:-?}, ft ${ft:-?}, corpus ${corp:-?}"
if [ $rc -ne 0 ]; then
	echo "fuzz $t: FAILED (exit $rc); log $log:"
	grep -E 'ERROR|SUMMARY|runtime error|Test unit written' "$log" | head -n 20
	exit 1
fi
