"""Round trip through a running `aftershock run` from Python with pyzmq.

Usage: pyzmq_roundtrip.py AFTERSHOCK_BINARY SCRATCH_DIR [json|binary]

Publishes JSON return ticks for two invented symbols on an ephemeral port,
starts the engine with a temporary configuration (fixed GARCH(1,1) normal
parameters, publisher on a free loopback port), subscribes to its updates and
checks them against an independent Python evaluation of the GARCH(1,1)
recursion of Bollerslev (1986): sigma2_{t+1} = omega + alpha*eps_t^2 +
beta*sigma2_t, started at the unconditional variance omega/(1-alpha-beta),
eps_t = r_t - mu, z_t = eps_t/sqrt(sigma2_t). Then sends SIGTERM and requires
exit status 0. Prints "OK <n> updates" on success; exits 1 with a reason.

Update batches (README "Update batches"): in the default json mode the engine
publishes both forms ([publish] update_topics = "both") and the records of the
JSON batches on "b.u" must equal the per-symbol updates, in order. In binary
mode it publishes binary batches only (update_topics = "batch") and the
updates are decoded from them with the documented layout (struct) and checked
against the recursion as above.
"""
import json
import math
import os
import random
import signal
import socket
import struct
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


def decode_binary_update(rec):
    """One update in the README's "Update binary" layout, as a dict."""
    magic, version, n = struct.unpack_from("<BBB", rec, 0)
    if magic != 0xA8 or version != 1:
        fail(f"binary update magic/version {magic:#x}/{version}")
    at = 3
    u = {"s": rec[at:at + n].decode()}
    at += n
    (u["t"],) = struct.unpack_from("<q", rec, at)
    at += 8
    for name, v in zip(("r", "mu", "eps", "var", "z", "var_next", "vol_ann"),
                       struct.unpack_from("<7d", rec, at)):
        u[name] = v
    at += 56
    h = rec[at]
    at += 1
    u["var_h"] = {}
    for _ in range(h):
        bars, v = struct.unpack_from("<Id", rec, at)
        u["var_h"][str(bars)] = v
        at += 12
    k = rec[at]
    at += 1
    u["value_at_risk"], u["es"] = {}, {}
    for _ in range(k):
        level, var, es = struct.unpack_from("<3d", rec, at)
        u["value_at_risk"][repr(level)] = var
        u["es"][repr(level)] = es
        at += 24
    u["scale"], u["ver"], u["flags"] = struct.unpack_from("<dII", rec, at)
    at += 16
    if at != len(rec):
        fail(f"binary update of {len(rec)} bytes, layout says {at}")
    return u


def batch_records(body, binary):
    """The updates of one batch message on b.u, as dicts, in order."""
    if not binary:
        b = json.loads(body)
        if list(b.keys()) != ["n", "u"] or b["n"] != len(b["u"]) or b["n"] < 1:
            fail(f"JSON batch frame {list(b.keys())}")
        return b["u"]
    magic, version, count = struct.unpack_from("<BBH", body, 0)
    if magic != 0xA9 or version != 1 or count < 1:
        fail(f"binary batch header {magic:#x} {version} {count}")
    at, out = 4, []
    for _ in range(count):
        (size,) = struct.unpack_from("<H", body, at)
        out.append(decode_binary_update(body[at + 2:at + 2 + size]))
        at += 2 + size
    if at != len(body):
        fail("bytes after the last record of a binary batch")
    return out


def main():
    binary, scratch = sys.argv[1], sys.argv[2]
    mode = sys.argv[3] if len(sys.argv) > 3 else "json"
    binary_batches = mode == "binary"
    publish_extra = ('encoding = "binary"\nupdate_topics = "batch"' if binary_batches
                     else 'update_topics = "both"')
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
{publish_extra}
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
        if not binary_batches:
            sub.setsockopt(zmq.SUBSCRIBE, b"u.")
        sub.setsockopt(zmq.SUBSCRIBE, b"b.u")
        sub.connect(f"tcp://127.0.0.1:{pub_port}")
        # Slow joiner: probe until an update comes back through the chain.
        probe_t = T0
        live = seen_single = seen_batch = False
        while time.time() < deadline + 10:
            feed.send_multipart([b"PROBE", json.dumps({"t": probe_t, "r": 0.001}).encode()])
            probe_t += 1
            # Both subscriptions live: a probe back on u. (json mode) and a batch.
            while sub.poll(5):
                topic, _ = sub.recv_multipart()
                if topic == b"u.PROBE":
                    seen_single = True
                if topic == b"b.u":
                    seen_batch = True
            if seen_batch and (seen_single or binary_batches):
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
        batched = {s: [] for s in syms}
        def done():
            n = sum(len(v) for v in batched.values())
            return n >= 120 and (binary_batches or sum(len(v) for v in got.values()) >= 120)
        deadline = time.time() + 10
        while not done() and time.time() < deadline:
            if not sub.poll(50):
                continue
            topic, body = sub.recv_multipart()
            if topic == b"b.u":
                for u in batch_records(body, binary_batches):
                    if u["s"] in batched:
                        batched[u["s"]].append(u)
                continue
            sym = topic.decode()[2:]
            if sym in got:
                got[sym].append(json.loads(body))
        if binary_batches:
            got = batched
        elif batched != got:
            fail("the JSON batches differ from the per-symbol updates")
        for s in syms:
            if len(got[s]) != 60:
                fail(f"{s}: {len(got[s])} updates, expected 60")
            s2 = OMEGA / (1 - ALPHA - BETA)
            for i, u in enumerate(got[s]):
                if list(u.keys()) != KEYS and not binary_batches:
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
        print(f"OK {sum(len(v) for v in got.values())} updates ({mode}; "
              f"{sum(len(v) for v in batched.values())} in batches); "
              f"{log.strip().splitlines()[-1]}")
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()


if __name__ == "__main__":
    main()
