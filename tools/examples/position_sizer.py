#!/usr/bin/python3
"""Example position-sizing subscriber for the aftershock update stream.

Subscribes to the engine's per-bar updates (ZeroMQ topics ``u.<symbol>``, JSON
or binary bodies, told apart by the binary magic byte 0xA8) and turns each
update's sizing ``scale`` into a target position for an invented book: the
Halvard Sound desk's commodities-and-currency portfolio (all names made up).

Formula, per symbol i of the book (weights w_i, lot notional L_i):

    base_i   = capital * w_i                 (currency; the position at scale 1)
    target_i = base_i * scale_i              (currency)
    lots_i   = round_half_away(target_i / L_i)

where scale_i = min(cap, target_vol / forecast_vol) is computed by the engine
(the ``scale`` field: a volatility-targeting multiplier, capped). Rounding is
half away from zero (4.5 lots -> 5). The weights add up to 0.90; the rest of
the capital is held as cash. Updates of symbols outside the book are shown and
skipped. Updates flagged ``warmup`` or ``fallback`` come from the EWMA stand-in
model, and their lines say so.

Output: one line per update, then (at --count or Ctrl-C) a table of the latest
target of every symbol seen.

Caution: the scales, and so these positions, are statistical estimates, not
advice. Volatility models fail in crises, their parameters are estimated with
error, and any use for trading or risk limits must follow the firm's own
model-risk policy and applicable regulation.

Run with Debian's Python and python3-zmq:
    /usr/bin/python3 tools/examples/position_sizer.py --endpoint tcp://127.0.0.1:7302 \
        --capital 10000000 --count 100
"""

import argparse
import json
import math
import signal
import struct
import sys
import time

import zmq

# symbol: (weight of capital, notional per lot in currency)
BOOK = {
    "BRANDR.NRG": (0.15, 50_000),
    "SKJOLD.GAS": (0.08, 25_000),
    "VARDE.PWR": (0.05, 25_000),
    "HALVARD.FX": (0.15, 100_000),
    "TIDEMARK.FX": (0.10, 100_000),
    "GRIMSTAD.FX": (0.05, 100_000),
    "JERNVIK.MTL": (0.08, 20_000),
    "SOLVBERG.MTL": (0.07, 20_000),
    "KORNHALL.AGR": (0.06, 10_000),
    "HUMLE.AGR": (0.04, 10_000),
    "ROSTRA.FRT": (0.03, 10_000),
    "ASKE.CRB": (0.04, 10_000),
}

FLAG_NAMES = ["warmup", "fallback", "stale", "seasonal", "gap", "first_bar", "pooled"]
UPDATE_MAGIC = 0xA8


def decode_binary(body):
    """Decodes the binary update form of include/aftershock/update_codec.h."""
    if len(body) < 3 or body[0] != UPDATE_MAGIC or body[1] != 1:
        raise ValueError("not a version-1 binary update")
    n = body[2]
    off = 3
    symbol = body[off:off + n].decode("ascii")
    off += n
    (t_ns,) = struct.unpack_from("<q", body, off)
    off += 8
    r, mu, eps, var, z, var_next, vol_ann = struct.unpack_from("<7d", body, off)
    off += 56
    h = body[off]
    off += 1 + 12 * h
    k = body[off]
    off += 1 + 24 * k
    scale, ver, flags = struct.unpack_from("<dII", body, off)
    off += 16
    if off != len(body):
        raise ValueError("binary update has trailing bytes")
    names = [FLAG_NAMES[b] for b in range(len(FLAG_NAMES)) if flags & (1 << b)]
    return {"s": symbol, "t": t_ns, "z": z, "vol_ann": vol_ann, "scale": scale, "ver": ver,
            "flags": names}


def decode(body):
    if body and body[0] == UPDATE_MAGIC:
        return decode_binary(body)
    return json.loads(body.decode("utf-8"))


def round_half_away(x):
    return int(math.copysign(math.floor(abs(x) + 0.5), x))


def size(symbol, scale, capital):
    """(base, target, lots) for a symbol of the book, or None outside it."""
    if symbol not in BOOK:
        return None
    weight, lot = BOOK[symbol]
    base = capital * weight
    target = base * scale
    return base, target, round_half_away(target / lot)


def utc(t_ns):
    secs, ns = divmod(int(t_ns), 1_000_000_000)
    text = time.strftime("%Y-%m-%dT%H:%M:%S", time.gmtime(secs))
    if ns:
        text += ("." + f"{ns:09d}").rstrip("0")
    return text + "Z"


def main():
    ap = argparse.ArgumentParser(
        description="Turn aftershock sizing scales into target positions for an invented "
                    "book (statistical estimates, not advice).")
    ap.add_argument("--endpoint", default="tcp://127.0.0.1:7302",
                    help="update publisher to connect to (default %(default)s)")
    ap.add_argument("--count", type=int, default=0,
                    help="stop after this many updates; 0 = until Ctrl-C (default 0)")
    ap.add_argument("--capital", type=float, default=10_000_000,
                    help="capital of the book in currency units (default %(default).0f)")
    ap.add_argument("--timeout", type=float, default=0,
                    help="stop after this many seconds; 0 = no limit (default 0)")
    args = ap.parse_args()
    if args.capital <= 0 or args.count < 0 or args.timeout < 0:
        ap.error("--capital must be > 0, --count and --timeout >= 0")

    stop = []
    signal.signal(signal.SIGINT, lambda *_: stop.append(1))
    signal.signal(signal.SIGTERM, lambda *_: stop.append(1))

    ctx = zmq.Context()
    sock = ctx.socket(zmq.SUB)
    sock.setsockopt(zmq.LINGER, 0)
    sock.setsockopt(zmq.SUBSCRIBE, b"u.")
    sock.connect(args.endpoint)
    poller = zmq.Poller()
    poller.register(sock, zmq.POLLIN)

    latest = {}
    seen = 0
    bad = 0
    start = time.monotonic()
    while not stop and (args.count == 0 or seen < args.count):
        if args.timeout and time.monotonic() - start >= args.timeout:
            break
        try:
            events = dict(poller.poll(100))
        except zmq.ZMQError:
            continue  # interrupted by a signal
        if sock not in events:
            continue
        frames = sock.recv_multipart()
        if len(frames) != 2:
            bad += 1
            continue
        try:
            u = decode(frames[1])
            symbol, scale = u["s"], float(u["scale"])
        except (ValueError, KeyError, UnicodeDecodeError, struct.error):
            bad += 1
            continue
        seen += 1
        sized = size(symbol, scale, args.capital)
        note = ""
        if set(u.get("flags", [])) & {"warmup", "fallback"}:
            note = "  (EWMA stand-in model)"
        if sized is None:
            print(f"{utc(u['t'])} {symbol:<14} scale={scale:.3f}  not in the book, skipped",
                  flush=True)
            continue
        base, target, lots = sized
        latest[symbol] = (scale, target, lots)
        print(f"{utc(u['t'])} {symbol:<14} scale={scale:.3f} base={base:,.0f} "
              f"target={target:,.0f} lots={lots}{note}", flush=True)

    print()
    print(f"{'symbol':<14} {'weight':>6} {'lot':>9} {'scale':>7} {'target':>14} {'lots':>6}")
    gross = 0.0
    for symbol in sorted(latest):
        scale, target, lots = latest[symbol]
        weight, lot = BOOK[symbol]
        gross += abs(target)
        print(f"{symbol:<14} {weight:6.2f} {lot:9,d} {scale:7.3f} {target:14,.0f} {lots:6d}")
    print(f"gross target {gross:,.0f} of capital {args.capital:,.0f}; "
          "statistical estimates, not advice")
    print(f"position_sizer: {seen} updates, {bad} undecodable", file=sys.stderr)
    sock.close()
    ctx.term()
    return 0


if __name__ == "__main__":
    sys.exit(main())
