#!/usr/bin/python3
# SPDX-License-Identifier: ISC
"""Adversarial driver for coefd (issue 9): hostile peers against a running
daemon on loopback, while a well-behaved client keeps querying.

Each case attacks the daemon one way (thousands of connections, slow
writers, a client that never reads, 10 MB lines, binary garbage, NUL
bytes and invalid UTF-8, non-finite and extreme numbers, wrong feature
counts, a flood of new model names, a UDP flood, a SIGHUP storm during
ingest) and then asserts that

  - the daemon is still up and answers a fresh connection;
  - the probe client's queries were all answered, with p99 latency under
    the stated bound (--p99-ms) and none slower than --max-ms (a stalled
    event loop);
  - the daemon's resident memory stayed under the ceiling derived from the
    configured limits (see ceiling());
  - no accepted record was lost: for every "ledger" model, the records the
    daemon reported as accepted (.sync) equal the records the model saw.

Everything is bounded: counts are fixed per mode, every socket has a
timeout, and a watchdog ends the run after --deadline seconds. Loopback
and the daemon's Unix socket only. The figures are printed per case and as
one JSON object at the end (for README "Reliability").
"""

import argparse
import json
import os
import random
import select
import signal
import socket
import subprocess
import sys
import threading
import time

QUICK = {
    "conns": 9000, "slow": 20, "stuck": 10, "long_lines": 4,
    "long_line_mb": 10, "garbage": 8, "garbage_kb": 512, "names": 3000,
    "udp_valid": 100000, "udp_garbage": 20000, "hup_records": 20000,
    "hups": 200,
}
# Under valgrind (make valgrind): the same cases, small counts.
SMALL = {
    "conns": 300, "slow": 5, "stuck": 3, "long_lines": 2,
    "long_line_mb": 2, "garbage": 2, "garbage_kb": 64, "names": 1200,
    "udp_valid": 5000, "udp_garbage": 1000, "hup_records": 2000,
    "hups": 20,
}
LONG = {
    "conns": 9000, "slow": 100, "stuck": 50, "long_lines": 8,
    "long_line_mb": 100, "garbage": 32, "garbage_kb": 4096, "names": 20000,
    "udp_valid": 1000000, "udp_garbage": 200000, "hup_records": 200000,
    "hups": 2000,
}


def log(msg):
    print(msg, flush=True)


class Failed(Exception):
    pass


# ---------------------------------------------------------------- plumbing

def connect(path, timeout=20.0):
    """A Unix stream connection. With a timeout the socket is
    non-blocking, and Linux then answers EAGAIN instead of waiting while
    the listen backlog is full (a burst of connects): retry until the
    timeout, as any non-blocking client must."""
    end = time.monotonic() + timeout
    while True:
        s = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
        s.settimeout(timeout)
        try:
            s.connect(path)
            return s
        except BlockingIOError:
            s.close()
            if time.monotonic() >= end:
                raise
            time.sleep(0.005)


def read_line(s, buf):
    """One reply line from s; buf is a bytearray of leftovers."""
    while b"\n" not in buf:
        d = s.recv(65536)
        if not d:
            raise Failed("connection closed by the daemon")
        buf += d
    i = buf.index(b"\n")
    line = bytes(buf[:i])
    del buf[:i + 1]
    return line


def request(path, lines, timeout=20.0):
    """Send lines on a fresh connection, half-close, return reply lines."""
    s = connect(path, timeout)
    try:
        s.sendall(lines if isinstance(lines, bytes) else lines.encode())
        s.shutdown(socket.SHUT_WR)
        out = bytearray()
        while True:
            d = s.recv(65536)
            if not d:
                break
            out += d
    finally:
        s.close()
    return [json.loads(l) for l in out.split(b"\n") if l.strip()]


def wait_io(s, write, timeout):
    """(readable, writable) for s within timeout seconds (poll(2): works
    for descriptors above FD_SETSIZE, unlike select)."""
    p = select.poll()
    p.register(s, select.POLLIN | (select.POLLOUT if write else 0))
    ev = p.poll(timeout * 1000)
    m = ev[0][1] if ev else 0
    return (bool(m & (select.POLLIN | select.POLLHUP | select.POLLERR)),
            bool(m & select.POLLOUT))


def exchange(s, data, timeout=60.0):
    """Send data and read replies at the same time (the daemon stops
    reading from a peer whose replies pile up). Returns the reply lines
    received until the last one is a .sync reply, EOF, or timeout."""
    s.setblocking(False)
    sent, lines, buf = 0, [], bytearray()
    end = time.monotonic() + timeout
    done = False
    while not done and time.monotonic() < end:
        r, w = wait_io(s, sent < len(data), 0.5)
        if w:
            try:
                sent += s.send(data[sent:sent + 262144])
            except BlockingIOError:
                pass
        if r:
            try:
                d = s.recv(262144)
            except BlockingIOError:
                continue
            if not d:
                break
            buf += d
            while b"\n" in buf:
                i = buf.index(b"\n")
                lines.append(bytes(buf[:i]))
                del buf[:i + 1]
                if sent == len(data) and lines[-1].startswith(b'{"sync"'):
                    done = True
    s.setblocking(True)
    return [json.loads(l) for l in lines]


def stats(path):
    return request(path, ".stats\n")[0]


def get(path, model):
    r = request(path, ".get %s\n" % model)[0]
    if "error" in r:
        raise Failed("%s: %s" % (model, r))
    return r


def sync_of(replies):
    for r in reversed(replies):
        if "sync" in r:
            return r["sync"]
    raise Failed("no .sync reply among %d replies" % len(replies))


def reasons(replies):
    out = {}
    for r in replies:
        if "error" in r:
            out[r["error"]] = out.get(r["error"], 0) + 1
    return out


def pct(xs, q):
    if not xs:
        return float("nan")
    xs = sorted(xs)
    return xs[min(len(xs) - 1, int(q * len(xs)))]


# ------------------------------------------------------ background threads

def probe_main(path, period):
    """The well-behaved client, run as its own process (so that the
    driver's threads cannot delay it): a query (.get probe) and, every
    tenth time, a record plus .sync, one at a time on one connection.
    Prints "L seconds" per round trip, "A n" per .sync, "F why" per
    failure (then reconnects); ends when stdin closes, at most 1 h."""
    s, buf, k = None, bytearray(), 0
    end = time.monotonic() + 3600
    sel = select.poll()
    sel.register(sys.stdin, select.POLLIN | select.POLLHUP)
    while time.monotonic() < end:
        if sel.poll(period * 1000):
            break    # stdin closed (or written to): stop
        k += 1
        try:
            if s is None:
                s, buf = connect(path, 5.0), bytearray()
            t0 = time.monotonic()
            if k % 10 == 0:
                s.sendall(b"probe %d 1\n.sync\n" % k)
                r = json.loads(read_line(s, buf))
                dt = time.monotonic() - t0
                print("A %d" % r["sync"]["accepted"])
            else:
                s.sendall(b".get probe\n")
                r = json.loads(read_line(s, buf))
                dt = time.monotonic() - t0
                if r.get("model") != "probe":
                    raise Failed("bad reply %r" % r)
            print("L %.6f" % dt, flush=True)
        except (OSError, ValueError, Failed) as e:
            print("F %s" % str(e).replace("\n", " "), flush=True)
            if s is not None:
                s.close()
            s = None


class Probe:
    """Runs probe_main in a child process and collects its reports."""

    def __init__(self, path):
        self.p = subprocess.Popen(
            [sys.executable, os.path.abspath(__file__), "--probe",
             "--sock", path], stdin=subprocess.PIPE,
            stdout=subprocess.PIPE, text=True)
        self.lock = threading.Lock()
        self.lat, self.fails, self.accepted = [], [], 0
        self.t = threading.Thread(target=self.collect, daemon=True)
        self.t.start()

    def collect(self):
        for line in self.p.stdout:
            kind, _, rest = line.rstrip("\n").partition(" ")
            with self.lock:
                if kind == "L":
                    self.lat.append(float(rest))
                elif kind == "A":
                    self.accepted += int(rest)
                else:
                    self.fails.append(rest)

    def close(self):
        self.p.stdin.close()
        self.p.wait(10)
        self.t.join(10)

    def take(self):
        with self.lock:
            lat, fails = self.lat, self.fails
            self.lat, self.fails = [], []
        return lat, fails


class Memory(threading.Thread):
    """Samples the daemon's VmRSS every 20 ms; peak since the last take."""

    def __init__(self, pid):
        super().__init__(daemon=True)
        self.pid = pid
        self.stop = threading.Event()
        self.peak = 0
        self.alive = True

    def rss(self):
        try:
            with open("/proc/%d/status" % self.pid) as f:
                for line in f:
                    if line.startswith("VmRSS:"):
                        return int(line.split()[1]) * 1024
        except OSError:
            self.alive = False
        return 0

    def run(self):
        while not self.stop.is_set():
            self.peak = max(self.peak, self.rss())
            self.stop.wait(0.02)

    def take(self):
        p, self.peak = self.peak, self.rss()
        return p


class SlowWriters(threading.Thread):
    """n connections that each send one record at one byte a second,
    running in the background across the other cases."""

    def __init__(self, path, n, model="ledger_s"):
        super().__init__(daemon=True)
        self.msg = ("%s 2 1\n" % model).encode()
        self.socks = [connect(path, 30.0) for _ in range(n)]
        self.sent = 0
        self.seconds = 0.0

    def run(self):
        t0 = time.monotonic()
        for i in range(len(self.msg)):
            for s in self.socks:
                s.sendall(self.msg[i:i + 1])
            self.sent = i + 1
            time.sleep(1.0)
        self.seconds = time.monotonic() - t0

    def finish(self):
        """.sync on each; returns how many had their record accepted."""
        ok, accepted = 0, 0
        for s in self.socks:
            try:
                s.sendall(b".sync\n")
                r = json.loads(read_line(s, bytearray()))
                accepted += r["sync"]["accepted"]
                ok += r["sync"]["accepted"] == 1
            except (OSError, ValueError, Failed):
                pass
            s.close()
        return ok, accepted


# ------------------------------------------------------------------ driver

class Driver:
    def __init__(self, a):
        self.a = a
        self.path = a.sock
        self.n = {"quick": QUICK, "long": LONG, "small": SMALL}[a.mode]
        self.expected = {}     # ledger model -> records accepted by .sync
        self.figures = {}
        self.failures = []
        self.probe = None
        self.mem = Memory(a.pid)
        self.base_rss = 0

    def expect(self, model, n):
        self.expected[model] = self.expected.get(model, 0) + n

    def ceiling(self):
        """The memory the configured limits allow: the idle daemon plus,
        per allowed connection, its line buffer (max_line), its parsed
        message (6.5 KiB, rounded up to 16 KiB) and its output (capped at
        output_buffer, which one reply may pass: counted here as twice
        output_buffer, enough for every reply this driver provokes; the
        daemon's absolute cap per reply is 8 MiB), plus 64 KiB per allowed
        model; times --rss-factor (sanitizer builds)."""
        a = self.a
        per_conn = a.max_line + 16384 + 2 * a.output_buffer
        return int((self.base_rss + a.max_connections * per_conn +
                    a.max_models * 65536) * a.rss_factor)

    def case(self, name, fn):
        log("case %s" % name)
        self.probe.take()
        self.mem.take()
        t0 = time.monotonic()
        figs = {}
        try:
            figs = fn() or {}
        except (OSError, ValueError, Failed) as e:
            self.failures.append("%s: %s" % (name, e))
            log("  FAIL %s: %s" % (name, e))
        figs["seconds"] = round(time.monotonic() - t0, 2)
        # Let the probe sample at least a second around every case.
        time.sleep(max(0.0, 1.0 - (time.monotonic() - t0)))
        lat, fails = self.probe.take()
        peak = self.mem.take()
        figs["probe_queries"] = len(lat)
        figs["probe_p50_ms"] = round(pct(lat, 0.5) * 1000, 2)
        figs["probe_p99_ms"] = round(pct(lat, 0.99) * 1000, 2)
        figs["probe_max_ms"] = round(max(lat) * 1000, 2) if lat else None
        figs["peak_rss_mb"] = round(peak / 1048576, 1)
        self.check(name, self.mem.alive, "the daemon died")
        try:
            v = request(self.path, ".version\n")[0]
            up = "version" in v
        except (OSError, ValueError):
            up = False
        self.check(name, up, "no reply to .version on a new connection")
        self.check(name, not fails, "probe failures: %s" % fails[:3])
        self.check(name, len(lat) > 0, "probe made no query")
        self.check(name, pct(lat, 0.99) * 1000 <= self.a.p99_ms,
                   "probe p99 %.1f ms > %g ms" % (pct(lat, 0.99) * 1000,
                                                  self.a.p99_ms))
        # A stall of the event loop (one slow accept path, say) shows in
        # the worst case long before it moves the p99.
        self.check(name, (max(lat) if lat else 0) * 1000 <= self.a.max_ms,
                   "probe max %.1f ms > %g ms" % ((max(lat) if lat else 0)
                                                  * 1000, self.a.max_ms))
        self.check(name, peak <= self.ceiling(),
                   "peak RSS %d > ceiling %d" % (peak, self.ceiling()))
        self.figures[name] = figs
        log("  %s" % json.dumps(figs, sort_keys=True))

    def check(self, name, cond, what):
        if not cond:
            self.failures.append("%s: %s" % (name, what))
            log("  FAIL %s: %s" % (name, what))

    # ---- cases

    def c_connections(self):
        """Thousands of concurrent connections, each with one record;
        connections over max_connections are refused with an error."""
        n = min(self.n["conns"], self.a.max_connections - 50)
        socks = []
        for i in range(n):
            s = connect(self.path, 30.0)
            s.sendall(b"ledger_c 1 %d\n" % i)
            socks.append(s)
        held = stats(self.path)["connections"]
        # Over the limit: the connections past max_connections (the
        # .stats one above has closed) get connection_limit and EOF.
        extra, refused = [], 0
        for _ in range(self.a.max_connections - held + 21):
            extra.append(connect(self.path, 10.0))
        pending = {s.fileno(): (s, bytearray()) for s in extra}
        p = select.poll()
        for fd in pending:
            p.register(fd, select.POLLIN)
        end = time.monotonic() + 3
        while pending and time.monotonic() < end:
            for fd, _ in p.poll(200):
                s, got = pending[fd]
                d = s.recv(4096)
                got += d
                if not d or b"\n" in got:
                    if b'"connection_limit"' in got:
                        refused += 1
                    p.unregister(fd)
                    del pending[fd]
        for s in extra:
            s.close()
        accepted = 0
        for s in socks:
            s.sendall(b".sync\n")
            accepted += json.loads(read_line(s, bytearray()))["sync"][
                "accepted"]
            s.close()
        self.expect("ledger_c", accepted)
        if accepted != n:
            raise Failed("%d of %d held connections had their record "
                         "accepted" % (accepted, n))
        if refused < 20:
            raise Failed("only %d connections over the limit refused" %
                         refused)
        return {"connections_held": held, "over_limit_refused": refused}

    def c_burst(self):
        """A burst of non-blocking connects with no retry (what a client
        restarted with many workers does): none may be turned away with
        EAGAIN while the daemon is under max_connections, i.e. the listen
        backlog must hold the burst (up to net.core.somaxconn)."""
        try:
            with open("/proc/sys/net/core/somaxconn") as f:
                cap = int(f.read())
        except (OSError, ValueError):
            cap = 128
        k = min(1000, cap - 64, self.a.max_connections // 2)
        if k < 100:
            return {"skipped": "net.core.somaxconn is %d" % cap}
        socks, eagain = [], 0
        for _ in range(k):
            s = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
            s.setblocking(False)
            try:
                s.connect(self.path)
                socks.append(s)
            except BlockingIOError:
                eagain += 1
                s.close()
        for s in socks:
            s.close()
        if eagain:
            raise Failed("%d of %d burst connects refused with EAGAIN" %
                         (eagain, k))
        return {"burst": k, "eagain": eagain}

    def c_never_reads(self):
        """Clients that pipeline queries and never read the replies: the
        daemon stops reading from them at output_buffer and closes them
        after stuck_timeout, holding only their capped output."""
        k = self.n["stuck"]
        before = stats(self.path)["dropped_stuck"]
        socks = [connect(self.path, 5.0) for _ in range(k)]
        chunk = b".stats\n.list\n" * 4096
        pushed = 0
        for s in socks:
            s.setblocking(False)
        end = time.monotonic() + 3
        while time.monotonic() < end:
            progress = False
            for s in socks:
                try:
                    pushed += s.send(chunk)
                    progress = True
                except (BlockingIOError, BrokenPipeError,
                        ConnectionResetError):
                    pass
            if not progress:
                time.sleep(0.05)
        time.sleep(self.a.stuck_timeout + 2.5)
        dropped = stats(self.path)["dropped_stuck"] - before
        for s in socks:
            s.close()
        if dropped < k:
            raise Failed("%d of %d stuck clients dropped" % (dropped, k))
        return {"stuck_clients": k, "dropped_stuck": dropped,
                "bytes_pushed_mb": round(pushed / 1048576, 1)}

    def c_long_lines(self):
        """10 MB lines: line_too_long, the rest skipped, the next line
        read normally, no growth beyond max_line per connection."""
        k, mb = self.n["long_lines"], self.n["long_line_mb"]
        socks = [connect(self.path, 60.0) for _ in range(k)]
        data = b"ledger_l 1 " + b"7" * (mb << 20) + \
            b"\nledger_l 1 2\n.sync\n"
        res = [None] * k

        def one(i):
            try:
                res[i] = exchange(socks[i], data, 120.0)
            except (OSError, ValueError) as e:
                res[i] = e
        th = [threading.Thread(target=one, args=(i,)) for i in range(k)]
        for t in th:
            t.start()
        for t in th:
            t.join(180)
        accepted = 0
        for i, r in enumerate(res):
            socks[i].close()
            if not isinstance(r, list):
                raise Failed("client %d: %r" % (i, r))
            if reasons(r) != {"line_too_long": 1} or r[0]["line"] != 1:
                raise Failed("client %d: replies %r" % (i, r[:3]))
            s = sync_of(r)
            if s != {"accepted": 1, "rejected": 1}:
                raise Failed("client %d: sync %r" % (i, s))
            accepted += s["accepted"]
        self.expect("ledger_l", accepted)
        return {"clients": k, "line_mb": mb}

    def c_garbage(self):
        """Random binary, NUL bytes, invalid UTF-8 and control characters;
        the same connection then sends a valid record, which counts."""
        k, kb = self.n["garbage"], self.n["garbage_kb"]
        rnd = random.Random(9)
        total_rej, accepted = 0, 0
        nasty = [b"ledger_g 1\x00 2\n", b"ledger_g \xc0\xaf 2\n",
                 b"ledger_g 1 \xed\xa0\x80\n", b"\xff\xfe\xfd\n",
                 b"ledger\x01g 1 2\n", b"ledger_g 1 2\x1b[2J\n",
                 b"\xf4\x90\x80\x80 1 2\n", b".get \x00\n",
                 b"ledger_g @\xe2\x82 1 2\n"]
        for i in range(k):
            blob = bytearray(rnd.randbytes(kb << 10))
            for _ in range(200):
                p = rnd.randrange(len(blob))
                blob[p:p] = rnd.choice(nasty)
            s = connect(self.path, 60.0)
            r = exchange(s, bytes(blob) + b"\nledger_g 3 1\n.sync\n", 60.0)
            s.close()
            sy = sync_of(r)
            if sy["accepted"] < 1:
                raise Failed("the record after the garbage was lost: %r" %
                             sy)
            total_rej += sy["rejected"]
            accepted += sy["accepted"]
        self.expect("ledger_g", accepted)
        return {"clients": k, "bytes_each_kb": kb,
                "lines_rejected": total_rej, "records_accepted": accepted}

    def c_numbers(self):
        """nan, inf, 1e400 are refused; -0, subnormals and the largest
        finite values are accepted, and the model stays finite."""
        bad = ["nan", "NaN", "inf", "-inf", "Infinity", "1e400", "-1e400",
               "1e309", "0x10", "1e", "--1", "1,5", ""]
        good = ["-0", "0", "4.9406564584124654e-324", "1e-320",
                "2.2250738585072014e-308", "-2.2250738585072014e-308",
                "1e-400", "1e100", "-1e100", "123456789012345678901234567890",
                "1.5", "3"]
        lines = []
        for v in bad:
            lines.append("ledger_n %s 1" % v)
            lines.append("ledger_n 1 %s" % v)
        rnd = random.Random(5)
        for i in range(2000):
            lines.append("ledger_n %s %s" % (rnd.choice(good),
                                             rnd.choice(good)))
        r = request(self.path, "\n".join(lines) + "\n.sync\n")
        sy = sync_of(r)
        want_rej = 2 * len(bad)
        if sy["rejected"] != want_rej or sy["accepted"] != 2000:
            raise Failed("sync %r, want %d rejected, 2000 accepted (%r)" %
                         (sy, want_rej, reasons(r)))
        self.expect("ledger_n", sy["accepted"])
        g = get(self.path, "ledger_n")
        for key in ("coef", "rss", "weight", "n_eff"):
            v = g[key]
            vals = v if isinstance(v, list) else [v]
            if any(x is None for x in vals):
                raise Failed("%s not finite after extreme values: %r" %
                             (key, v))
        return {"refused": sy["rejected"], "accepted": sy["accepted"],
                "reasons": reasons(r)}

    def c_counts(self):
        """Wrong feature counts and forms for a one-field model."""
        lines = ["ledger_w 1", "ledger_w 1 2 3", "ledger_w " +
                 " ".join(["1"] * 10), "ledger_w " + " ".join(["1"] * 256),
                 "ledger_w " + " ".join(["1"] * 300),
                 "ledger_w " + " ".join(["1"] * 100000),
                 "ledger_w y=1", "ledger_w x=1", "ledger_w y=1 x=2 z=3",
                 "ledger_w y=1 x=2 x=3", "ledger_w y=1 2",
                 "ledger_w ? 1 2", "ledger_w 1 2"]
        r = request(self.path, "\n".join(lines) + "\n.sync\n")
        sy = sync_of(r)
        if sy["accepted"] != 1:
            raise Failed("sync %r (%r)" % (sy, reasons(r)))
        self.expect("ledger_w", 1)
        return {"rejected": sy["rejected"], "reasons": reasons(r)}

    def c_names(self):
        """A flood of new model names: templates create models up to
        max_models, the rest get model_limit; names no template matches
        create nothing."""
        n = self.n["names"]
        before = stats(self.path)["models"]
        lines = ["flood_%d 1 2 3" % i for i in range(n)]
        lines += ["nomatch_%d 1 2 3" % i for i in range(n // 4)]
        s = connect(self.path, 120.0)
        r = exchange(s, ("\n".join(lines) + "\n.sync\n").encode(), 120.0)
        s.close()
        after = stats(self.path)["models"]
        rs = reasons(r)
        if after > self.a.max_models:
            raise Failed("%d models > max_models %d" % (after,
                                                        self.a.max_models))
        if after != self.a.max_models and n >= self.a.max_models:
            raise Failed("only %d models created" % after)
        if rs.get("unknown_model", 0) != n // 4:
            raise Failed("reasons %r" % rs)
        if rs.get("model_limit", 0) != n - (after - before):
            raise Failed("reasons %r, %d created" % (rs, after - before))
        return {"names_sent": n, "models_before": before,
                "models_after": after, "reasons": rs}

    def c_udp(self):
        """A UDP flood (garbage, then records) at full speed: the daemon
        keeps serving; every datagram it received was applied."""
        if not self.a.udp_port:
            return {"skipped": "no udp"}
        addr = ("127.0.0.1", self.a.udp_port)
        u = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
        rnd = random.Random(11)
        d0 = stats(self.path)["datagrams"]
        for _ in range(self.n["udp_garbage"]):
            try:
                u.sendto(rnd.randbytes(rnd.randrange(1, 1400)), addr)
            except OSError:
                pass
        time.sleep(0.5)
        d1 = stats(self.path)["datagrams"]
        n0 = self.seen("ledger_u")
        sent, t0 = 0, time.monotonic()
        for i in range(self.n["udp_valid"]):
            try:
                u.sendto(b"ledger_u 1 %d\n" % (i % 1000), addr)
                sent += 1
            except OSError:
                pass
        rate = sent / max(time.monotonic() - t0, 1e-9)
        time.sleep(1.0)
        d2 = stats(self.path)["datagrams"]
        got = d2 - d1
        applied = self.seen("ledger_u") - n0
        u.close()
        if applied != got:
            raise Failed("%d record datagrams received, %d applied" %
                         (got, applied))
        # UDP has no .sync: a record the daemon received is accepted.
        self.expect("ledger_u", applied)
        return {"garbage_sent": self.n["udp_garbage"],
                "garbage_received": d1 - d0, "records_sent": sent,
                "records_received": got, "records_applied": applied,
                "send_rate_per_s": int(rate)}

    def c_hup_storm(self):
        """SIGHUP storm during ingest: the configuration is rewritten
        (valid variants and a broken one) and reloaded hundreds of times
        while a client streams records; every accepted record counts."""
        n, hups = self.n["hup_records"], self.n["hups"]
        conf = self.a.conf
        with open(conf) as f:
            orig = f.read()
        variants = [orig, orig.replace("memory = 1\n", "memory = 0.999\n"),
                    orig + "\n[model broken\n"]
        res = {}

        def writer():
            s = connect(self.path, 60.0)
            data = b"".join(b"ledger_h 1 %d\n" % (i % 977)
                            for i in range(n)) + b".sync\n"
            res["r"] = exchange(s, data, 120.0)
            s.close()
        t = threading.Thread(target=writer)
        t.start()
        sent = 0
        for i in range(hups):
            tmp = conf + ".tmp"
            with open(tmp, "w") as f:
                f.write(variants[i % 3])
            os.rename(tmp, conf)
            os.kill(self.a.pid, signal.SIGHUP)
            sent += 1
            time.sleep(0.01)
            if not t.is_alive() and i > hups // 2:
                break
        t.join(180)
        with open(conf + ".tmp", "w") as f:
            f.write(orig)
        os.rename(conf + ".tmp", conf)
        os.kill(self.a.pid, signal.SIGHUP)
        sy = sync_of(res.get("r", []))
        if sy["accepted"] != n:
            raise Failed("sync %r for %d records" % (sy, n))
        self.expect("ledger_h", sy["accepted"])
        return {"records": n, "sighups": sent}

    def seen(self, model):
        r = request(self.path, ".get %s\n" % model)[0]
        return 0 if "error" in r else r["n_seen"]

    # ---- run

    def run(self):
        sy = sync_of(request(self.path, "".join(
            "probe %d %d\n" % (i, i % 7) for i in range(50)) + ".sync\n"))
        self.expect("probe", sy["accepted"])
        # Every ledger model exists before the model-name flood fills
        # the registry up to max_models.
        ledgers = ["ledger_" + c for c in "clgnwsuh"]
        sy = sync_of(request(self.path, "".join(
            "%s 1 1\n" % m for m in ledgers) + ".sync\n"))
        if sy["accepted"] != len(ledgers):
            raise SystemExit("cannot create the ledger models: %r" % sy)
        for m in ledgers:
            self.expect(m, 1)
        self.mem.start()
        time.sleep(0.3)
        self.base_rss = self.mem.take()
        self.probe = Probe(self.path)
        slow = SlowWriters(self.path, self.n["slow"])
        slow.start()
        self.case("connect_burst", self.c_burst)
        self.case("connections", self.c_connections)
        self.case("never_reads", self.c_never_reads)
        self.case("long_lines", self.c_long_lines)
        self.case("garbage", self.c_garbage)
        self.case("numbers", self.c_numbers)
        self.case("feature_counts", self.c_counts)
        self.case("model_names", self.c_names)
        self.case("udp_flood", self.c_udp)
        self.case("sighup_storm", self.c_hup_storm)

        def finish_slow():
            slow.join(60)
            ok, acc = slow.finish()
            self.expect("ledger_s", acc)
            if ok != len(slow.socks):
                raise Failed("%d of %d slow writers survived" %
                             (ok, len(slow.socks)))
            return {"slow_writers": len(slow.socks), "survived": ok,
                    "bytes_each": len(slow.msg),
                    "seconds_each": round(slow.seconds, 1)}
        self.case("slow_writers", finish_slow)
        self.probe.close()
        self.expect("probe", self.probe.accepted)

        # No accepted record lost, per ledger model.
        lost = {}
        for model, n in sorted(self.expected.items()):
            seen = self.seen(model)
            if seen != n:
                lost[model] = n - seen
                self.failures.append("%s: %d records accepted, %d seen" %
                                     (model, n, seen))
        st = stats(self.path)
        self.mem.stop.set()
        self.figures["summary"] = {
            "records_accepted": sum(self.expected.values()),
            "records_lost": sum(lost.values()),
            "lost_by_model": lost,
            "connections_total": st["connections_total"],
            "connections_refused": st["connections_refused"],
            "dropped_stuck": st["dropped_stuck"],
            "rejected_total": st["rejected_total"],
            "memory_ceiling_mb": round(self.ceiling() / 1048576, 1),
            "base_rss_mb": round(self.base_rss / 1048576, 1),
            "peak_rss_mb": max(f.get("peak_rss_mb", 0)
                               for f in self.figures.values()),
            "probe_p99_bound_ms": self.a.p99_ms,
            "probe_max_bound_ms": self.a.max_ms,
        }
        log("figures %s" % json.dumps(self.figures, sort_keys=True))
        for f in self.failures:
            log("FAIL %s" % f)
        return 0 if not self.failures else 1


def main():
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--sock", required=True)
    p.add_argument("--probe", action="store_true",
                   help="internal: run as the probe process")
    p.add_argument("--pid", type=int)
    p.add_argument("--conf", help="config file (rewritten "
                   "during the SIGHUP storm, restored after)")
    p.add_argument("--udp-port", type=int, default=0)
    p.add_argument("--max-connections", type=int)
    p.add_argument("--max-models", type=int)
    p.add_argument("--max-line", type=int)
    p.add_argument("--output-buffer", type=int)
    p.add_argument("--stuck-timeout", type=float)
    p.add_argument("--p99-ms", type=float, default=100.0)
    p.add_argument("--max-ms", type=float, default=1000.0)
    p.add_argument("--rss-factor", type=float, default=1.0)
    p.add_argument("--deadline", type=float, default=300.0)
    p.add_argument("--mode", choices=("quick", "long", "small"),
                   default="quick")
    a = p.parse_args()
    if a.probe:
        probe_main(a.sock, 0.02)
        return

    def watchdog():
        time.sleep(a.deadline)
        log("FAIL deadline of %g s passed; stopping" % a.deadline)
        os._exit(2)
    threading.Thread(target=watchdog, daemon=True).start()
    sys.exit(Driver(a).run())


if __name__ == "__main__":
    main()
