"""Round trip through a running `aftershock run` from Python with pyzmq.

Usage: pyzmq_roundtrip.py AFTERSHOCK_BINARY SCRATCH_DIR

Publishes JSON return ticks for two invented symbols on an ephemeral port,
starts the engine with a temporary configuration (fixed GARCH(1,1) normal
parameters, publisher on a free loopback port), subscribes to its updates and
checks them against an independent Python evaluation of the GARCH(1,1)
recursion of Bollerslev (1986): sigma2_{t+1} = omega + alpha*eps_t^2 +
beta*sigma2_t, started at the unconditional variance omega/(1-alpha-beta),
eps_t = r_t - mu, z_t = eps_t/sqrt(sigma2_t). Then sends SIGTERM and requires
exit status 0. Prints "OK <n> updates" on success; exits 1 with a reason.
"""
import json
import math
import os
import random
import signal
import socket
import subprocess
import sys
import time

import zmq

MU, OMEGA, ALPHA, BETA = 0.0002, 2e-6, 0.08, 0.9
KEYS = ["s", "t", "r", "mu", "eps", "var", "z", "var_next", "vol_ann", "var_h",
        "value_at_risk", "es", "scale", "ver", "flags"]
T0 = 1772443800000000000


def fail(msg):
    print("FAIL: " + msg)
    sys.exit(1)


def free_port():
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def rel(a, b):
    return abs(a - b) / max(abs(b), 1e-300)


def main():
    binary, scratch = sys.argv[1], sys.argv[2]
    ctx = zmq.Context()
    feed = ctx.socket(zmq.PUB)
    feed.setsockopt(zmq.SNDHWM, 0)
    feed_port = feed.bind_to_random_port("tcp://127.0.0.1")
    pub_port = free_port()
    cfg = os.path.join(scratch, "engine.toml")
    with open(cfg, "w") as f:
        f.write(f"""
[feed]
endpoints = ["tcp://127.0.0.1:{feed_port}"]
[publish]
endpoint = "tcp://127.0.0.1:{pub_port}"
[model]
mean = "constant"
variance = "garch"
shock_lags = 1
variance_lags = 1
innovations = "gaussian"
[model.params]
mu = {MU!r}
omega = {OMEGA!r}
alpha_1 = {ALPHA!r}
beta_1 = {BETA!r}
[http]
enabled = false
""")
    err_path = os.path.join(scratch, "engine.err")
    err = open(err_path, "w")
    proc = subprocess.Popen([binary, "run", "--config", cfg], stderr=err)
    try:
        deadline = time.time() + 10
        while "running:" not in open(err_path).read():
            if proc.poll() is not None or time.time() > deadline:
                fail("engine did not start: " + open(err_path).read())
            time.sleep(0.01)
        sub = ctx.socket(zmq.SUB)
        sub.setsockopt(zmq.SUBSCRIBE, b"u.")
        sub.connect(f"tcp://127.0.0.1:{pub_port}")
        # Slow joiner: probe until an update comes back through the chain.
        probe_t = T0
        live = False
        while time.time() < deadline + 10:
            feed.send_multipart([b"PROBE", json.dumps({"t": probe_t, "r": 0.001}).encode()])
            probe_t += 1
            if sub.poll(5):
                topic, _ = sub.recv_multipart()
                if topic == b"u.PROBE":
                    live = True
                    break
        if not live:
            fail("subscription never became live")

        rng = random.Random(42)
        syms = ["OSPREY.N", "PLOVER.M"]
        rets = {s: [rng.gauss(0, 0.01) for _ in range(60)] for s in syms}
        for i in range(60):
            for s in syms:
                feed.send_multipart([s.encode(), json.dumps({"t": T0 + i * 10**9, "r": rets[s][i]}).encode()])
        got = {s: [] for s in syms}
        deadline = time.time() + 10
        while sum(len(v) for v in got.values()) < 120 and time.time() < deadline:
            if not sub.poll(50):
                continue
            topic, body = sub.recv_multipart()
            sym = topic.decode()[2:]
            if sym in got:
                got[sym].append(json.loads(body))
        for s in syms:
            if len(got[s]) != 60:
                fail(f"{s}: {len(got[s])} updates, expected 60")
            s2 = OMEGA / (1 - ALPHA - BETA)
            for i, u in enumerate(got[s]):
                if list(u.keys()) != KEYS:
                    fail(f"keys {list(u.keys())}")
                r = rets[s][i]
                eps = r - MU
                z = eps / math.sqrt(s2)
                nxt = OMEGA + ALPHA * eps * eps + BETA * s2
                if u["s"] != s or u["t"] != T0 + i * 10**9 or u["r"] != r:
                    fail(f"{s}[{i}]: s/t/r mismatch {u}")
                for name, want in (("var", s2), ("z", z), ("var_next", nxt)):
                    if rel(u[name], want) > 1e-12:
                        fail(f"{s}[{i}] {name} {u[name]!r} != {want!r}")
                if u["ver"] != 1:
                    fail("ver")
                s2 = nxt
        proc.send_signal(signal.SIGTERM)
        code = proc.wait(timeout=10)
        if code != 0:
            fail(f"exit status {code} after SIGTERM")
        log = open(err_path).read()
        if "stopped;" not in log:
            fail("no shutdown summary: " + log)
        print(f"OK {sum(len(v) for v in got.values())} updates; {log.strip().splitlines()[-1]}")
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()


if __name__ == "__main__":
    main()
