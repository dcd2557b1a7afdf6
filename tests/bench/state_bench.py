#!/usr/bin/python3
# SPDX-License-Identifier: ISC
# Benchmark of the state directory (issue 4), not part of `make check`:
#   1. checkpoint of N models (default 100000, p = 8): the daemon's own
#      figures from .stats (start of the checkpoint, longest encoding
#      slice, encode and write time) and, from outside, the round-trip
#      time of `.version` pings sent back to back during the checkpoint
#      against the same pings without one, alone and with a client
#      feeding records to random models meanwhile (copy-before-write);
#   2. restore time of those N models (SIGTERM, restart, .stats);
#   3. journal throughput with journal = every-record: one client sending
#      batches of B records then .sync (each reply waits for fdatasync),
#      and K clients at once (group commit), against journal = off.
# Usage: state_bench.py BUILD_DIR [--models N] [--history H] [--quick]
import argparse, json, multiprocessing as mp, os, random, shutil, signal
import socket, subprocess, sys, tempfile, time

def connect(path):
    s = socket.socket(socket.AF_UNIX)
    s.connect(path)
    return s

def ask(path, line):
    s = connect(path)
    s.sendall(line.encode())
    s.shutdown(socket.SHUT_WR)
    out = b""
    while True:
        d = s.recv(1 << 20)
        if not d:
            break
        out += d
    s.close()
    return json.loads(out.splitlines()[-1])

def readline(s, buf):
    while b"\n" not in buf[0]:
        d = s.recv(1 << 16)
        if not d:
            raise EOFError
        buf[0] += d
    line, buf[0] = buf[0].split(b"\n", 1)
    return line

class Daemon:
    def __init__(self, build, tmp, conf):
        self.sock = os.path.join(tmp, "b.sock")
        self.state = os.path.join(tmp, "state")
        self.log = open(os.path.join(tmp, "coefd.log"), "a")
        cf = os.path.join(tmp, "b.conf")
        open(cf, "w").write(conf)
        t0 = time.monotonic()
        if os.path.exists(self.sock):
            os.unlink(self.sock)
        self.p = subprocess.Popen([os.path.join(build, "coefd"), "-c", cf,
            "-s", self.sock, "--state-dir", self.state], stdout=self.log,
            stderr=self.log, env=dict(os.environ, OPENBLAS_NUM_THREADS="1"))
        while not os.path.exists(self.sock):
            if self.p.poll() is not None:
                sys.exit("coefd exited; see %s" % self.log.name)
            time.sleep(0.005)
        self.ready_s = time.monotonic() - t0

    def stop(self):
        self.p.send_signal(signal.SIGTERM)
        self.p.wait()

def conf_text(journal, history, nmax):
    return ("[daemon]\nlog_level = info\njournal = %s\ncheckpoint_every = 1d\n"
        "history = %d\nhistory_every = 1\nmax_models = %d\n"
        "max_connections_per_uid = 1000\n"
        "[template b_*]\nfields = f1 f2 f3 f4 f5 f6 f7\ntarget = y\n"
        "memory = 0.999\n") % (journal, history, nmax)

def record(rnd, name):
    f = [rnd.uniform(-1, 1) for _ in range(7)]
    y = 1 + sum((k + 1) * v for k, v in enumerate(f)) + rnd.gauss(0, 0.01)
    return "%s %.6f %s\n" % (name, y, " ".join("%.6f" % v for v in f))

def load(sock, n, per):
    rnd = random.Random(1)
    s = connect(sock)
    buf = [b""]
    chunk = []
    for i in range(n):
        name = "b_%06d" % i
        for k in range(per):
            chunk.append(record(rnd, name))
        if len(chunk) >= 20000 or i == n - 1:
            s.sendall(("".join(chunk) + ".sync\n").encode())
            r = json.loads(readline(s, buf))
            assert "sync" in r, r
            chunk = []
    s.close()

def pinger(sock, secs, q):
    s = connect(sock)
    buf = [b""]
    rtts = []
    end = time.monotonic() + secs
    while time.monotonic() < end:
        t0 = time.monotonic()
        s.sendall(b".version\n")
        readline(s, buf)
        rtts.append(time.monotonic() - t0)
    q.put(rtts)

def feeder(sock, n, secs, q):
    rnd = random.Random(7)
    s = connect(sock)
    buf = [b""]
    sent = 0
    end = time.monotonic() + secs
    while time.monotonic() < end:
        lines = "".join(record(rnd, "b_%06d" % rnd.randrange(n))
            for _ in range(200))
        s.sendall((lines + ".sync\n").encode())
        readline(s, buf)
        sent += 200
    q.put(sent)

def pct(v, p):
    v = sorted(v)
    return v[min(len(v) - 1, int(p / 100 * len(v)))]

def ping_during(sock, secs, action=None, feed_n=0):
    q = mp.Queue()
    procs = [mp.Process(target=pinger, args=(sock, secs, q))]
    if feed_n:
        procs.append(mp.Process(target=feeder, args=(sock, feed_n, secs, q)))
    for p in procs:
        p.start()
    time.sleep(0.3)
    res = action() if action else None
    out = [q.get() for _ in procs]
    for p in procs:
        p.join()
    rtts = next(o for o in out if isinstance(o, list))
    fed = next((o for o in out if not isinstance(o, list)), 0)
    return rtts, fed, res

def bench_checkpoint(build, n, history):
    tmp = tempfile.mkdtemp(prefix="coefd-sbench.")
    try:
        d = Daemon(build, tmp, conf_text("200ms", history, n + 10))
        t0 = time.monotonic()
        load(d.sock, n, 10)
        print("loaded %d models (p = 8, 10 records each, history %d) in "
            "%.1f s; daemon RSS %.0f MB" % (n, history,
            time.monotonic() - t0, ask(d.sock, ".stats\n")["memory_rss"]
            / 1e6))
        ask(d.sock, ".save\n")
        for label, feed_n in (("alone", 0), ("with ingest", n)):
            base, fed0, _ = ping_during(d.sock, 1.5, None, feed_n)
            def save():
                t = time.monotonic()
                r = ask(d.sock, ".save\n")
                assert r.get("ok") == "save", r
                return time.monotonic() - t
            during, fed1, took = ping_during(d.sock, 1.5 + 0, save, feed_n)
            st = ask(d.sock, ".stats\n")["state"]["last_checkpoint"]
            print("checkpoint %s: %d models, %.1f MB, %.0f ms total (.save "
                "reply after %.0f ms); start %.2f ms, %d slices, longest "
                "%.2f ms (%.2f ms of CPU), encoding %.0f ms, writer %.0f ms"
                % (label, st["models"], st["bytes"] / 1e6, st["ms"],
                took * 1e3, st["start_ms"], st["slices"],
                st["slice_max_ms"], st["slice_cpu_max_ms"],
                st["encode_ms"], st["write_ms"]))
            print("  .version round trip without / during the checkpoint: "
                "median %.3f / %.3f ms, p99 %.3f / %.3f ms, max %.3f / "
                "%.3f ms%s" % (pct(base, 50) * 1e3, pct(during, 50) * 1e3,
                pct(base, 99) * 1e3, pct(during, 99) * 1e3, max(base) * 1e3,
                max(during) * 1e3, "" if not feed_n else
                "; records fed in 1.5 s: %d without, %d with" % (fed0,
                fed1)))
        t0 = time.monotonic()
        d.stop()
        print("SIGTERM with final checkpoint: %.0f ms" %
            ((time.monotonic() - t0) * 1e3))
        size = os.path.getsize(os.path.join(d.state, "models.ckpt"))
        d = Daemon(build, tmp, conf_text("200ms", history, n + 10))
        r = ask(d.sock, ".stats\n")["state"]["restore"]
        print("restore: %d models from %.1f MB in %.0f ms (socket ready "
            "after %.0f ms)" % (r["models"], size / 1e6, r["ms"],
            d.ready_s * 1e3))
        d.stop()
    finally:
        shutil.rmtree(tmp)

def syncer(sock, batch, secs, q, seed):
    rnd = random.Random(seed)
    s = connect(sock)
    buf = [b""]
    n = 0
    name = "b_%d" % seed
    lines = [record(rnd, name) for _ in range(1000)]
    end = time.monotonic() + secs
    i = 0
    while time.monotonic() < end:
        chunk = "".join(lines[(i + k) % 1000] for k in range(batch))
        i += batch
        s.sendall((chunk + ".sync\n").encode())
        r = json.loads(readline(s, buf))
        assert "sync" in r, r
        n += batch
    q.put(n)

def bench_journal(build, secs):
    for journal in ("every-record", "off"):
        tmp = tempfile.mkdtemp(prefix="coefd-sbench.")
        try:
            d = Daemon(build, tmp, conf_text(journal, 0, 1000))
            for clients, batch in ((1, 1), (1, 10), (1, 100), (1, 1000),
                    (8, 1), (8, 10)):
                q = mp.Queue()
                ps = [mp.Process(target=syncer, args=(d.sock, batch, secs,
                    q, c)) for c in range(clients)]
                w0 = ask(d.sock, ".stats\n")["state"]["journal_writes"]
                for p in ps:
                    p.start()
                n = sum(q.get() for _ in ps)
                for p in ps:
                    p.join()
                w1 = ask(d.sock, ".stats\n")["state"]["journal_writes"]
                print("journal %-12s %d client(s), batch %4d + .sync: "
                    "%7.0f records/s, %6.0f syncs/s, %5.0f journal "
                    "writes/s" % (journal, clients, batch, n / secs,
                    n / batch / secs, (w1 - w0) / secs))
            d.stop()
        finally:
            shutil.rmtree(tmp)

def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("build")
    ap.add_argument("--models", type=int, default=100000)
    ap.add_argument("--history", type=int, default=0)
    ap.add_argument("--quick", action="store_true")
    a = ap.parse_args()
    print("machine: %d CPUs, load %.2f; state directory on %s" %
        (os.cpu_count(), os.getloadavg()[0], tempfile.gettempdir()))
    bench_checkpoint(a.build, a.models, a.history)
    bench_journal(a.build, 1.0 if a.quick else 2.0)

if __name__ == "__main__":
    main()
