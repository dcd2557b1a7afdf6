#!/bin/sh
# SPDX-License-Identifier: ISC
# The pure engine library (libcore.a) must do no I/O, keep no writable
# globals and not touch libuv, clocks or the environment: checked on the
# object code, so it cannot be bypassed by a macro or a new file.
#   1. no undefined reference to an I/O, clock, environment or libuv symbol;
#   2. no symbol in a writable data section (.data / .bss); const tables
#      with pointers live in .data.rel.ro, which is read-only after start.
set -u
lib=${1:-build/libcore.a}
bad=$(nm -u "$lib" | awk '{print $2}' | sort -u | grep -E \
'^(uv_.*|f?open(at)?(64)?|fdopen|f?read|f?write|pread|pwrite|close|fclose|f?printf|__f?printf_chk|puts|fputs|putchar|f?getc|fgets|getline|perror|getenv|secure_getenv|setenv|time|clock_gettime|gettimeofday|rand|random|srand|socket|connect|send|recv|syslog|exit|abort)$')
rc=0
if [ -n "$bad" ]; then
	echo "purity: libcore.a calls I/O or impure functions:" $bad
	rc=1
fi
# Section symbols (flag column "d", e.g. the .data section symbol that
# sanitizer builds emit for their instrumentation) are not variables.
globals=$(objdump -t "$lib" | awk '($0 ~ /[ \t]\.(data|bss)[ \t]/) &&
    substr($0, index($0, " ") + 6, 1) != "d" {print $NF}')
if [ -n "$globals" ]; then
	echo "purity: writable globals in libcore.a:" $globals
	rc=1
fi
[ $rc -eq 0 ] && echo "purity: libcore.a has no I/O calls and no writable globals"
exit $rc
