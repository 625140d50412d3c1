#!/usr/bin/env python3
"""Throughput of one engine instance fed from JetStream and from ZeroMQ, same run.

Starts a loopback nats-server -js (the shipped config/nats-server.conf with its
partition() mapping, store in a scratch directory), then:

  1. `aftershock simulate --nats --rate 0` publishes N ticks (50 invented
     instruments x 2,000 one-minute bars by default) into the stream; every
     tick is acknowledged (and kept for a resend until it is). The rate is
     the publisher's own final line.
  2. Rounds, alternating the two feeds:
     - JetStream: one `aftershock run` with [feed] source = "nats" claims all
       12 partitions and reads the stored ticks through its lanes (one per
       partition): the path a takeover uses. Each round uses fresh lease and
       checkpoint buckets, so it replays from the first message.
     - ZeroMQ: one `aftershock run` with [feed] source = "zmq" subscribed to
       `aftershock simulate --publish --rate 0` of the same ticks.
     The engine's rate is the growth of its message counter on /metrics
     (aftershock_lanes_messages_total with lanes, aftershock_messages_in_total
     without), sampled every 20 ms: messages between the first sample above 0
     and the first sample at N, over that time. Refits are off, so the figures
     are the ingest path (decode, bars, filter, publish), not model fits.
Prints one line per round, the medians and the 1-minute load average before
and after (the machine's other work shows in wide ranges; compare the two
feeds within one run).

Run (after building the aftershock target):
  /usr/bin/python3 bench/python/feed_throughput.py [--build build] [--rounds 3]
      [--symbols 50] [--bars 2000]
Needs nats-server (Debian nats-server, which tools/dev installs); only the
Python standard library.
"""
import argparse
import os
import re
import shutil
import signal
import socket
import statistics
import subprocess
import sys
import tempfile
import time
import urllib.request

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))


def free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def accepts(port):
    with socket.socket() as s:
        s.settimeout(0.2)
        return s.connect_ex(("127.0.0.1", port)) == 0


def wait_for(pred, limit_s, what):
    t0 = time.monotonic()
    while not pred():
        if time.monotonic() - t0 > limit_s:
            raise RuntimeError("timed out waiting for " + what)
        time.sleep(0.05)


def load1():
    return os.getloadavg()[0]


def start_nats(work):
    store = os.path.join(work, "store")
    os.makedirs(store)
    with open(os.path.join(ROOT, "config", "nats-server.conf")) as f:
        conf = re.sub(r'^\s*store_dir:.*$', '  store_dir: "%s"' % store, f.read(),
                      flags=re.M)
    conf_path = os.path.join(work, "nats-server.conf")
    with open(conf_path, "w") as f:
        f.write(conf)
    binary = shutil.which("nats-server") or "/usr/sbin/nats-server"
    port = free_port()
    proc = subprocess.Popen([binary, "-c", conf_path, "-a", "127.0.0.1", "-p", str(port), "-js",
                             "-l", os.path.join(work, "nats-server.log")])
    wait_for(lambda: accepts(port), 10, "nats-server")
    return proc, "nats://127.0.0.1:%d" % port


def engine_config(work, name, http_port, feed):
    path = os.path.join(work, name + ".toml")
    with open(path, "w") as f:
        f.write(feed + '\n[publish]\nendpoint = "tcp://127.0.0.1:*"\n'
                '[http]\nendpoint = "127.0.0.1:%d"\n'
                '[bars]\ninterval = "1m"\n[refit]\nevery_bars = 0\n' % http_port)
    return path


def metric(http_port, name):
    try:
        with urllib.request.urlopen("http://127.0.0.1:%d/metrics" % http_port, timeout=1) as r:
            text = r.read().decode()
    except OSError:
        return None
    m = re.search(r"^%s (\S+)$" % re.escape(name), text, flags=re.M)
    return float(m.group(1)) if m else None


def measure(http_port, counter, n, stall_s=5.0):
    """Samples the counter every 20 ms until it reaches n (or stalls); returns
    (rate, messages counted)."""
    first = None
    last_value, last_change = 0.0, time.monotonic()
    while True:
        now = time.monotonic()
        v = metric(http_port, counter)
        if v is not None:
            if v > 0 and first is None:
                first = (now, v)
            if v != last_value:
                last_value, last_change = v, now
            if v >= n:
                break
        if now - last_change > stall_s and first is not None:
            break
        if first is None and now - last_change > 60:
            raise RuntimeError("the engine took no message")
        time.sleep(0.02)
    end = last_change
    rate = (last_value - first[1]) / (end - first[0]) if end > first[0] else float("nan")
    return rate, int(last_value)


def stop(proc):
    if proc.poll() is None:
        proc.send_signal(signal.SIGTERM)
        try:
            proc.wait(20)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--build", default=os.path.join(ROOT, "build"))
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--symbols", type=int, default=50)
    ap.add_argument("--bars", type=int, default=2000)
    args = ap.parse_args()
    cli = os.path.join(args.build, "aftershock")
    market = ["--symbols", str(args.symbols), "--bars", str(args.bars), "--seed", "3",
              "--quiet"]
    n = args.symbols * args.bars
    work = tempfile.mkdtemp(prefix="aftershock-feed-bench-")
    load_before = load1()
    nats, url = start_nats(work)
    procs = []
    try:
        feed_nats = '[feed]\nsource = "nats"\n[nats]\nservers = ["%s"]\n' % url
        pub_cfg = engine_config(work, "publisher", free_port(), feed_nats)
        r = subprocess.run([cli, "simulate", "--nats", pub_cfg, "--rate", "0"] + market,
                           capture_output=True, text=True)
        if r.returncode != 0:
            raise RuntimeError(r.stderr)
        line = r.stderr.strip().splitlines()[-1]
        pub_rate = float(re.search(r"\((\d+) ticks/s\)", line).group(1))
        print("publisher: %s" % line.replace("aftershock simulate: ", ""))

        js_rates, zmq_rates = [], []
        for rnd in range(args.rounds):
            # JetStream: a fresh lease and checkpoint bucket, so the engine
            # replays every partition from its first message.
            port = free_port()
            cfg = engine_config(
                work, "js%d" % rnd, port,
                feed_nats + 'instance = "bench"\nlease_bucket = "L%d"\n'
                'checkpoint_bucket = "C%d"\ncheckpoint_seconds = 0\n' % (rnd, rnd))
            eng = subprocess.Popen([cli, "run", "--config", cfg],
                                   stdout=subprocess.DEVNULL,
                                   stderr=open(os.path.join(work, "js%d.err" % rnd), "w"))
            procs.append(eng)
            rate, got = measure(port, "aftershock_lanes_messages_total", n)
            stop(eng)
            js_rates.append(rate)
            print("round %d JetStream: %d of %d messages, %.0f messages/s (load %.1f)" %
                  (rnd + 1, got, n, rate, load1()))

            # ZeroMQ: the engine subscribes first, then the simulator publishes.
            port = free_port()
            feed_port = free_port()
            cfg = engine_config(work, "zmq%d" % rnd, port,
                                '[feed]\nsource = "zmq"\nendpoints = ["tcp://127.0.0.1:%d"]\n' %
                                feed_port)
            eng = subprocess.Popen([cli, "run", "--config", cfg],
                                   stdout=subprocess.DEVNULL,
                                   stderr=open(os.path.join(work, "zmq%d.err" % rnd), "w"))
            procs.append(eng)
            wait_for(lambda: metric(port, "aftershock_messages_in_total") is not None, 30,
                     "the ZeroMQ engine's /metrics")
            sim = subprocess.Popen([cli, "simulate", "--publish", "tcp://127.0.0.1:%d" % feed_port,
                                    "--rate", "0", "--wait-subscribers", "10000"] + market,
                                   stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
            procs.append(sim)
            rate, got = measure(port, "aftershock_messages_in_total", n)
            sim.wait(60)
            stop(eng)
            zmq_rates.append(rate)
            print("round %d ZeroMQ:    %d of %d messages, %.0f messages/s (load %.1f)" %
                  (rnd + 1, got, n, rate, load1()))
        print("median: JetStream %.0f messages/s, ZeroMQ %.0f messages/s (ratio %.2f); "
              "publisher %.0f ticks/s; load average %.1f before, %.1f after" %
              (statistics.median(js_rates), statistics.median(zmq_rates),
               statistics.median(js_rates) / statistics.median(zmq_rates), pub_rate,
               load_before, load1()))
    finally:
        for p in procs:
            if p.poll() is None:
                p.kill()
                p.wait()
        stop(nats)
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    sys.exit(main())
