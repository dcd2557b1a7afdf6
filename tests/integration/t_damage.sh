#!/bin/sh
# SPDX-License-Identifier: ISC
# Damage to the state directory (issue 4), each case with the outcome
# documented in daemon/STATE.md: a flipped bit in a model block, in the
# checkpoint header and in a journal entry; a truncated checkpoint; a torn
# journal tail; a checkpoint from a newer format version; an empty and a
# missing directory; a directory the daemon may not write (run as nobody);
# a full disk (a small tmpfs, or when mounting is not permitted an
# LD_PRELOAD shim failing writes with ENOSPC). Damage is reported with file
# and offset, kept aside in damaged/, never silently reset; the daemon
# starts with everything valid; --verify-state exits non-zero.
. tests/integration/lib.sh

cat >"$TMP/d.conf" <<'EOF'
[daemon]
log_level = info
journal = every-record
[template flow_*]
fields = raw temp
target = ref
memory = 0.99
EOF

cat >"$TMP/gen.py" <<'EOF'
import random, sys
names, n, seed = sys.argv[1].split(","), int(sys.argv[2]), int(sys.argv[3])
rnd = random.Random(seed)
for i in range(n):
    for m in names:
        raw = rnd.uniform(5, 50); temp = rnd.uniform(10, 30)
        ref = 0.4 + 1.02 * raw - 0.003 * temp + rnd.gauss(0, 0.05)
        print("%s %r %r %r" % (m, ref, raw, temp))
print(".sync")
EOF
# Byte offsets and model names of the blocks in a checkpoint.
cat >"$TMP/blocks.py" <<'EOF'
import struct, sys
b = open(sys.argv[1], "rb").read()
off = 48
while b[off:off + 4] == b"MODL":
    n = struct.unpack_from("<H", b, off + 12)[0]
    print(off, b[off + 14:off + 14 + n].decode())
    off += 12 + struct.unpack_from("<I", b, off + 4)[0]
EOF
# flip FILE OFFSET: flip bit 3 of one byte.
flip() {
	"$PY" -c '
import sys
p, o = sys.argv[1], int(sys.argv[2])
b = bytearray(open(p, "rb").read()); b[o] ^= 8
open(p, "wb").write(b)' "$1" "$2"
}
feed() { "$PY" "$TMP/gen.py" "$1" "$2" "$3" | send | tail -n 1; }
get() { printf '.get %s\n' "$1" | send; }
stats() { printf '.stats\n' | send; }
verify() { "$COEFD" --verify-state "$1" >"$TMP/verify.out" 2>&1; }
fresh() { rm -rf "$STATE"; cp -a "$TMP/clean" "$STATE"; }
# same_as NAME...: .get of each model equals the one taken before damage.
same_as() {
	for m in "$@"; do
		get "$m" | cmp -s - "$TMP/g_$m" || return 1
	done
}

echo "t_damage: every kind of damage has its documented outcome"
start_daemon "$TMP/d.conf"
feed flow_1,flow_2,flow_3 100 1 >/dev/null
for m in flow_1 flow_2 flow_3; do get $m >"$TMP/g_$m"; done
stop_daemon
cp -a "$STATE" "$TMP/clean"
set -- $("$PY" "$TMP/blocks.py" "$STATE/models.ckpt")
check "the checkpoint has three model blocks" [ $# -eq 6 ]
m1=$2 b2=$3 m2=$4 b3=$5 m3=$6

# 1. A flipped bit inside the second model block.
flip "$STATE/models.ckpt" $((b2 + 100))
verify "$STATE"
check "bit flip in a block: --verify-state exits 1" [ $? -eq 1 ]
check "  and names the file and the block's offset" \
    grep -q "models.ckpt: offset $b2: model block is damaged" "$TMP/verify.out"
cp "$STATE/models.ckpt" "$TMP/bad.ckpt"
start_daemon "$TMP/d.conf"
check "  the daemon starts and logs file and offset" \
    grep -q "models.ckpt: offset $b2: model block is damaged" "$TMP/coefd.log"
check "  and which model is lost" grep -q "(model \"$m2\", not restored)" "$TMP/coefd.log"
n=$(printf '.list\n' | send)
check "  the two intact models are restored" [ "$(jget "$n" 'd["count"]')" = 2 ]
check "  bit for bit" same_as $m1 $m3
check "  the damaged one is not made up" \
    [ "$(jget "$(get $m2)" 'd["error"]')" = unknown_model ]
check "  the damaged file is kept aside, unchanged" \
    sh -c "cmp -s '$TMP/bad.ckpt' '$STATE'/damaged/models.ckpt.*"
s=$(stats)
check "  .stats restore: damage, 1 model damaged" \
    [ "$(jget "$s" 'd["state"]["restore"]["damage"], d["state"]["restore"]["damaged"]')" = "(True, 1)" ]
r=$(printf '.save\n' | send)
verify "$STATE"
check "  after a new checkpoint the directory verifies clean" [ $? -eq 0 ]
stop_daemon

# 2. A flipped bit in the checkpoint header: blocks are still scanned.
fresh
flip "$STATE/models.ckpt" 20
verify "$STATE"
check "bit flip in the header: --verify-state exits 1" [ $? -eq 1 ]
check "  offset 0 reported" grep -q "models.ckpt: offset 0: the file header is damaged" "$TMP/verify.out"
start_daemon "$TMP/d.conf"
check "  all three intact blocks restored" [ "$(jget "$(printf '.list\n' | send)" 'd["count"]')" = 3 ]
check "  bit for bit" same_as flow_1 flow_2 flow_3
stop_daemon

# 3. A truncated checkpoint (cut inside the third block).
fresh
truncate -s $((b3 + 50)) "$STATE/models.ckpt"
verify "$STATE"
check "truncated checkpoint: --verify-state exits 1" [ $? -eq 1 ]
check "  reports the cut with its offset" grep -q "offset $b3: the file ends inside a model block" "$TMP/verify.out"
start_daemon "$TMP/d.conf"
check "  the two models before the cut are restored" [ "$(jget "$(printf '.list\n' | send)" 'd["count"]')" = 2 ]
check "  bit for bit" same_as $m1 $m2
stop_daemon

# 4. A checkpoint written by a newer format version: refuse to start.
fresh
"$PY" - "$STATE/models.ckpt" <<'EOF'
import struct, sys
p = sys.argv[1]
b = bytearray(open(p, "rb").read())
struct.pack_into("<I", b, 8, 2)
# CRC-32C of bytes 0..43 (bitwise, as daemon/STATE.md describes).
c = 0xffffffff
for x in b[:44]:
    c ^= x
    for _ in range(8):
        c = (c >> 1) ^ 0x82F63B78 if c & 1 else c >> 1
struct.pack_into("<I", b, 44, c ^ 0xffffffff)
open(p, "wb").write(b)
EOF
cp "$STATE/models.ckpt" "$TMP/v2.ckpt"
verify "$STATE"
check "newer format: --verify-state exits 2" [ $? -eq 2 ]
"$COEFD" -c "$TMP/d.conf" -s "$SOCK" --state-dir "$STATE" >"$TMP/v2.log" 2>&1
check "  the daemon refuses to start with status 78" [ $? -eq 78 ]
check "  and says why" grep -q "format version 2 is newer than this coefd reads (1)" "$TMP/v2.log"
check "  the file is left as it was" cmp -s "$TMP/v2.ckpt" "$STATE/models.ckpt"

# 5. An empty directory and a missing one: a fresh start, no damage.
rm -rf "$STATE"; mkdir "$STATE"
verify "$STATE"
check "empty directory: --verify-state exits 0" [ $? -eq 0 ]
start_daemon "$TMP/d.conf"
s=$(stats)
check "  starts with no models and no damage" \
    [ "$(jget "$s" 'd["models"], d["state"]["restore"]["damage"], d["state"]["ok"]')" = "(0, False, True)" ]
stop_daemon
rm -rf "$STATE"
start_daemon "$TMP/d.conf"
check "missing directory: created, mode 0700" \
    [ "$(stat -c %a "$STATE")" = 700 ]
stop_daemon

# 6. A flipped bit in a journal entry: replay stops there.
fresh
start_daemon "$TMP/d.conf"
feed flow_1 200 2 >/dev/null
kill -KILL "$DPID"; wait "$DPID" 2>/dev/null; DPID=
seg=$(ls "$STATE" | grep journal | tail -n 1)
size=$(stat -c %s "$STATE/$seg")
flip "$STATE/$seg" $((size / 2))
verify "$STATE"
check "bit flip in the journal: --verify-state exits 1" [ $? -eq 1 ]
check "  names the segment and an offset" grep -q "$seg: offset [0-9]*: entry is damaged" "$TMP/verify.out"
start_daemon "$TMP/d.conf"
n1=$(jget "$(get flow_1)" 'd["n_seen"]')
check "  the records before the bad entry are replayed, none after ($n1 of 300)" \
    [ "$n1" -gt 100 ] && [ "$n1" -lt 300 ]
check "  the segment is kept aside" sh -c "ls '$STATE/damaged' | grep -q '$seg'"
check "  .stats restore reports damage" [ "$(jget "$(stats)" 'd["state"]["restore"]["damage"]')" = True ]
stop_daemon

# 7. A torn journal tail (a write cut by a crash): cut, not damage.
fresh
start_daemon "$TMP/d.conf"
feed flow_1 50 3 >/dev/null
kill -KILL "$DPID"; wait "$DPID" 2>/dev/null; DPID=
seg=$(ls "$STATE" | grep journal | tail -n 1)
truncate -s -7 "$STATE/$seg"
verify "$STATE"
check "torn tail: --verify-state exits 0 and notes it" \
    sh -c "[ $? -eq 0 ] && grep -q 'torn tail' '$TMP/verify.out'"
start_daemon "$TMP/d.conf"
check "  the last (torn) record is dropped, the rest replayed" \
    [ "$(jget "$(get flow_1)" 'd["n_seen"]')" = 149 ]
check "  logged as cut" grep -q "$seg: offset [0-9]*: torn tail of [0-9]* bytes (an interrupted write); cut" "$TMP/coefd.log"
# A segment torn at its creation (a crash inside its first write): it is
# removed and its number reused, so a later replay has no hole.
feed flow_1 20 9 >/dev/null
kill -KILL "$DPID"; wait "$DPID" 2>/dev/null; DPID=
seg=$(ls "$STATE" | grep journal | tail -n 1)
next=$(printf 'journal.%016x' $((0x${seg#journal.} + 1)))
head -c 20 "$STATE/$seg" >"$STATE/$next"
verify "$STATE"
check "segment torn at creation: --verify-state exits 0" [ $? -eq 0 ]
start_daemon "$TMP/d.conf"
check "  removed at start" grep -q "$next: segment cut inside its header (torn at creation); removed" "$TMP/coefd.log"
feed flow_1 10 10 >/dev/null
kill -KILL "$DPID"; wait "$DPID" 2>/dev/null; DPID=
verify "$STATE"
check "  the next run's journal has no hole" [ $? -eq 0 ]
start_daemon "$TMP/d.conf"
check "  every record is there" [ "$(jget "$(get flow_1)" 'd["n_seen"]')" = 179 ]
stop_daemon

# 8. A directory the daemon may not write: it serves from memory with the
# state alarm up, retries, and recovers once it may write again.
fresh
chmod 0755 "$TMP"
mkdir -m 0777 "$TMP/nob"
chmod 0555 "$STATE"
chmod 0444 "$STATE/models.ckpt"
# Root may write anywhere: as root the daemon runs as nobody.
AS=
[ "$(id -u)" -eq 0 ] && AS="setpriv --reuid=65534 --regid=65534 --clear-groups"
$AS "$COEFD" -c "$TMP/d.conf" -s "$TMP/nob/s.sock" --state-dir "$STATE" \
    >"$TMP/nob.log" 2>&1 &
DPID=$!
SOCK0=$SOCK SOCK=$TMP/nob/s.sock
i=0; while [ ! -S "$SOCK" ] && [ $i -lt 100 ]; do sleep 0.05; i=$((i + 1)); done
sleep 0.3
s=$(stats)
check "read-only directory: starts, models restored" [ "$(jget "$s" 'd["models"]')" = 3 ]
check "  state alarm up with the reason" \
    [ "$(jget "$s" 'd["state"]["ok"], "Permission denied" in d["state"]["error"]')" = "(False, True)" ]
check "  logged" grep -q "Permission denied" "$TMP/nob.log"
r=$(feed flow_1 5 4)
check "  records are applied; .sync says they are not on disk (busy)" \
    [ "$(jget "$r" 'd["error"]')" = busy ]
check "  .get serves them" [ "$(jget "$(get flow_1)" 'd["n_seen"]')" = 105 ]
chmod 0777 "$STATE"; chmod 0666 "$STATE/models.ckpt"
i=0; while [ $i -lt 600 ]; do
	[ "$(jget "$(stats)" 'd["state"]["ok"]')" = True ] && break
	sleep 0.1; i=$((i + 1))
done
check "  the alarm clears once writing works again" [ "$(jget "$(stats)" 'd["state"]["ok"]')" = True ]
r=$(feed flow_1 5 5)
check "  .sync succeeds again" [ "$(jget "$r" 'd["sync"]["accepted"]')" = 5 ]
kill -KILL "$DPID"; wait "$DPID" 2>/dev/null; DPID=
SOCK=$SOCK0
start_daemon "$TMP/d.conf"
check "  nothing applied in memory was lost" [ "$(jget "$(get flow_1)" 'd["n_seen"]')" = 110 ]
stop_daemon

# 9. A full disk: a 1 MiB tmpfs filled up (or writes failing with ENOSPC
# through an LD_PRELOAD shim where mounting is not permitted).
FULL=$TMP/full
mkdir "$FULL"
PRELOAD=
if [ -z "${COEFD_TEST_NO_MOUNT:-}" ] && mount -t tmpfs -o size=1m tmpfs "$FULL" 2>/dev/null; then
	echo "  (full disk: a 1 MiB tmpfs)"
	fill() { dd if=/dev/zero of="$FULL/filler" bs=4k >/dev/null 2>&1; sync; }
	unfill() { rm -f "$FULL/filler"; }
	MOUNTED=1
else
	echo "  (full disk: mount not permitted; ENOSPC from an LD_PRELOAD shim)"
	cat >"$TMP/enospc.c" <<'EOF'
/* Writes to files under $FAULT_DIR fail with ENOSPC while $FAULT_FLAG
 * exists: a full disk for the test. */
#define _GNU_SOURCE
#include <dlfcn.h>
#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/types.h>
#include <unistd.h>

static int
full(int fd)
{
	const char *dir = getenv("FAULT_DIR"), *flag = getenv("FAULT_FLAG");
	char p[64], path[4096];
	struct stat sb;
	ssize_t n;

	if (dir == NULL || flag == NULL || stat(flag, &sb) != 0)
		return 0;
	snprintf(p, sizeof(p), "/proc/self/fd/%d", fd);
	if ((n = readlink(p, path, sizeof(path) - 1)) < 0)
		return 0;
	path[n] = '\0';
	return strncmp(path, dir, strlen(dir)) == 0;
}

ssize_t
write(int fd, const void *b, size_t n)
{
	ssize_t (*real)(int, const void *, size_t) =
	    (ssize_t (*)(int, const void *, size_t))dlsym(RTLD_NEXT, "write");

	if (full(fd)) {
		errno = ENOSPC;
		return -1;
	}
	return real(fd, b, n);
}

ssize_t
pwrite(int fd, const void *b, size_t n, off_t o)
{
	ssize_t (*real)(int, const void *, size_t, off_t) =
	    (ssize_t (*)(int, const void *, size_t, off_t))dlsym(RTLD_NEXT,
	    "pwrite");

	if (full(fd)) {
		errno = ENOSPC;
		return -1;
	}
	return real(fd, b, n, o);
}

ssize_t
pwrite64(int fd, const void *b, size_t n, off_t o)
{
	return pwrite(fd, b, n, o);
}
EOF
	cc -shared -fPIC -o "$TMP/enospc.so" "$TMP/enospc.c" -ldl
	PRELOAD=$TMP/enospc.so
	fill() { : >"$TMP/full.flag"; }
	unfill() { rm -f "$TMP/full.flag"; }
	MOUNTED=
fi
STATE0=$STATE STATE=$FULL/state
if [ -n "$PRELOAD" ]; then
	FAULT_DIR=$FULL FAULT_FLAG=$TMP/full.flag LD_PRELOAD=$PRELOAD \
	    ASAN_OPTIONS=verify_asan_link_order=0 start_daemon "$TMP/d.conf"
else
	start_daemon "$TMP/d.conf"
fi
feed flow_1 100 6 >/dev/null
r=$(printf '.save\n' | send)
cp "$STATE/models.ckpt" "$TMP/good.ckpt"
fill
r=$(feed flow_1 1000 7)
echo "$r" >"$TMP/full.reply"
check "full disk: .sync replies busy, naming the cause" \
    [ "$(jget "$r" 'd.get("error"), "No space left on device" in d.get("detail", "")')" = "('busy', True)" ]
s=$(stats)
check "  state alarm up in .stats" [ "$(jget "$s" 'd["state"]["ok"]')" = False ]
check "  logged" grep -q "No space left on device" "$TMP/coefd.log"
check "  the daemon keeps serving from memory" [ "$(jget "$(get flow_1)" 'd["n_seen"]')" = 1100 ]
r=$(printf '.save\n' | send)
check "  .save fails, reported busy" [ "$(jget "$r" 'd["error"]')" = busy ]
check "  the last good checkpoint is untouched" cmp -s "$TMP/good.ckpt" "$STATE/models.ckpt"
check "  no temporary file left behind" [ ! -e "$STATE/models.ckpt.tmp" ]
unfill
i=0; while [ $i -lt 600 ]; do
	[ "$(jget "$(stats)" 'd["state"]["ok"]')" = True ] && break
	sleep 0.1; i=$((i + 1))
done
check "  space again: the retry succeeds, the alarm clears" [ "$(jget "$(stats)" 'd["state"]["ok"]')" = True ]
r=$(feed flow_1 10 8)
check "  .sync succeeds again" [ "$(jget "$r" 'd["sync"]["accepted"]')" = 10 ]
kill -KILL "$DPID"; wait "$DPID" 2>/dev/null; DPID=
start_daemon "$TMP/d.conf"
check "  after SIGKILL nothing is lost" [ "$(jget "$(get flow_1)" 'd["n_seen"]')" = 1110 ]
stop_daemon

# 10. The disk stays full until more than 64 MiB of journal is waiting:
# the backlog is dropped, journaling stops until a checkpoint succeeds,
# and that checkpoint's segment is marked as following the gap.
awk 'BEGIN { printf "[daemon]\nlog_level = info\njournal = every-record\n[template wide_*]\nfields ="
	for (i = 1; i <= 200; i++) printf " f%d", i
	printf "\ntarget = y\nterms = f1\n" }' >"$TMP/w.conf"
awk 'BEGIN { l = "wide_1 1"; for (i = 1; i <= 200; i++) l = l " " i
	for (n = 0; n < 45000; n++) print l; print ".sync" }' >"$TMP/wide.txt"
rm -rf "$STATE"
if [ -n "$PRELOAD" ]; then
	FAULT_DIR=$FULL FAULT_FLAG=$TMP/full.flag LD_PRELOAD=$PRELOAD \
	    ASAN_OPTIONS=verify_asan_link_order=0 start_daemon "$TMP/w.conf"
else
	start_daemon "$TMP/w.conf"
fi
r=$(printf '.save\n' | send)
fill
r=$(send <"$TMP/wide.txt" | tail -n 1)
check "backlog over 64 MiB: .sync busy" [ "$(jget "$r" 'd.get("error")')" = busy ]
check "  the backlog is dropped and the journal suspended (logged)" \
    grep -q "journal suspended until the next checkpoint: more than 64 MiB" "$TMP/coefd.log"
unfill
i=0; while [ $i -lt 600 ]; do
	[ "$(jget "$(stats)" 'd["state"]["ok"]')" = True ] && break
	sleep 0.1; i=$((i + 1))
done
check "  a checkpoint succeeds, journaling resumes, the alarm clears" \
    [ "$(jget "$(stats)" 'd["state"]["ok"]')" = True ]
r=$(printf 'wide_1 1 %s\n.sync\n' "$(seq -s ' ' 1 200)" | send)
check "  .sync succeeds again" [ "$(jget "$r" 'd["sync"]["accepted"]')" = 1 ]
kill -KILL "$DPID"; wait "$DPID" 2>/dev/null; DPID=
"$COEFD" --verify-state "$STATE" >"$TMP/verify.out" 2>&1
check "  the directory verifies clean" [ $? -eq 0 ]
start_daemon "$TMP/w.conf"
check "  after SIGKILL nothing is lost" [ "$(jget "$(get wide_1)" 'd["n_seen"]')" = 45001 ]
stop_daemon
[ -n "$MOUNTED" ] && umount "$FULL"
STATE=$STATE0
finish
