#!/usr/bin/python3
"""Stand-in for wavetrimd and wavetrim-sim, to exercise wavetrim-view.

Publishes "status " JSON, "event " JSON, "frame " records and "image "
records exactly as lib/wt_request.h defines them (sections 2-6), the
simulator's 95-byte
"truth" records (sim/sim_driver.h), and answers the control words the page
uses (status, open, close, hold, set control.gain/leak X) on REP.  The
numbers are made up: a defocus plus astigmatism residual that decays while
the loop is "closed".  Only for tests and for trying the page without a
rig; Debian's python3-zmq is all it needs.

usage: standin.py -c FILE --setup URL [--seconds S] [--log FILE]
  --setup URL  the view's /api/setup (geometry and optics come from there,
               so the records always have the sizes the view expects)
"""
import argparse
import configparser
import json
import math
import os
import random
import signal
import struct
import sys
import time
import urllib.request

import zmq


def endpoint_dir(ep):
    if ep.startswith("ipc://"):
        d = os.path.dirname(ep[len("ipc://"):])
        if d:
            os.makedirs(d, exist_ok=True)


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("-c", "--config", required=True)
    ap.add_argument("--setup", required=True)
    ap.add_argument("--seconds", type=float, default=0)
    ap.add_argument("--rate", type=float, default=20, help="frame records/s")
    ap.add_argument("--log", help="append every control request here")
    args = ap.parse_args()

    ini = configparser.ConfigParser(inline_comment_prefixes=(";",))
    ini.read(args.config)

    def opt(sec, key, dflt):
        return ini.get(sec, key, fallback=dflt).strip()

    control = opt("daemon", "control", "ipc:///tmp/wavetrim/control")
    telemetry = opt("daemon", "telemetry", "ipc:///tmp/wavetrim/telemetry")
    truth_ep = opt("sim", "truth", "ipc:///tmp/wavetrim/truth")

    setup = None
    for _ in range(100):
        try:
            with urllib.request.urlopen(args.setup, timeout=2) as r:
                setup = json.load(r)
            break
        except OSError:
            time.sleep(0.1)
    if setup is None:
        sys.exit("standin: no setup from %s" % args.setup)
    lx, ly = setup["lenslets"]["x"], setup["lenslets"]["y"]
    ax, ay = setup["actuators"]["x"], setup["actuators"]["y"]
    n, a = len(lx), len(ax)
    um_per_px = setup["um_per_px"]
    lam = setup["wavelength_nm"]

    ctx = zmq.Context()
    for ep in (control, telemetry, truth_ep):
        endpoint_dir(ep)
    pub = ctx.socket(zmq.PUB)
    pub.setsockopt(zmq.LINGER, 0)
    pub.bind(telemetry)
    tru = ctx.socket(zmq.PUB)
    tru.setsockopt(zmq.LINGER, 0)
    tru.bind(truth_ep)
    rep = ctx.socket(zmq.REP)
    rep.setsockopt(zmq.LINGER, 0)
    rep.bind(control)

    stop = [False]
    signal.signal(signal.SIGTERM, lambda *_: stop.__setitem__(0, True))
    signal.signal(signal.SIGINT, lambda *_: stop.__setitem__(0, True))

    rng = random.Random(20261201)
    s = {"state": "open", "gain": 0.5, "leak": 0.01, "amp": 1.0}
    start = time.monotonic()
    frame = 0
    sv = [20 * math.exp(-k / 25.0) for k in range(min(2 * n, a))]
    counts = dict(received=0, dropped=2, stale=0, refused=1,
                  bad_dimensions=0, wrong_kind=0, rejected_updates=0,
                  clipped_frames=0, send_failed=0, telemetry_dropped=0,
                  faults=0)

    def event(name, **kw):
        body = dict(event=name, t_ns=time.monotonic_ns(), frame=frame, **kw)
        pub.send(b"event " + json.dumps(body).encode())

    def status(with_sv):
        calib = dict(matrix=True, reference=True, source="measured",
                     file=None, created="2026-12-01T12:00:00Z",
                     modes=len(sv) - 8, recommended=len(sv) - 12,
                     condition=sv[0] / sv[-1])
        if with_sv:
            calib["singular_values"] = sv
        return dict(state=s["state"], fault=None,
                    uptime_s=time.monotonic() - start, frames=frame,
                    last_frame=frame, driver_seen=True,
                    frame_rate_hz=1000.0,
                    latency_us=dict(median=38.5, max=91.0),
                    residual_rms=0.05 * s["amp"], clipped_actuators=3,
                    invalid_subapertures=2, counts=counts,
                    refused=dict(short=0, magic=0, version=0, kind=0,
                                 dims=0, payload=0, length=0),
                    gain=s["gain"], leak=s["leak"], modes=len(sv) - 8,
                    calibration=calib, calibrating=None)

    def answer(line):
        w = line.split()
        if args.log:
            with open(args.log, "a") as f:
                f.write(line + "\n")
        if w == ["status"]:
            return dict(ok=True, result=status(True))
        if len(w) == 1 and w[0] in ("open", "close", "hold"):
            new = {"open": "open", "close": "closed", "hold": "held"}[w[0]]
            event("state", **{"from": s["state"], "to": new,
                              "why": "request"})
            s["state"] = new
            return dict(ok=True, result=dict(state=new))
        if len(w) == 3 and w[0] == "set" and w[1] in ("control.gain",
                                                      "control.leak"):
            v = float(w[2])
            s[w[1].split(".")[1]] = v
            event("config", key=w[1], value=v)
            return dict(ok=True, result=dict(key=w[1], value=v))
        return dict(ok=False, error="unknown word '%s' (try help)" % line)

    side = setup["sensor_px"]
    nl = setup["lenslets"]["n"]
    ppl = side // nl
    b = -(-side // 128)  # the daemon's bin: ceil(side / b) <= 128
    iw = -(-side // b)
    cell = {(round((x + 1) / 2 * nl - 0.5), round((y + 1) / 2 * nl - 0.5)): k
            for k, (x, y) in enumerate(zip(lx, ly))}

    def image(fid, recv, sx, sy):
        """An IW x IW image record of section 6: a spot per lenslet, moved by
        its slope, on a dark background."""
        px = []
        for j in range(iw):
            for i in range(iw):
                X, Y = (i + 0.5) * b, (j + 0.5) * b
                k = cell.get((int(X // ppl), int(Y // ppl)))
                v = 5.0
                if k is not None:
                    dx = X % ppl - ppl / 2 - sx[k]
                    dy = Y % ppl - ppl / 2 - sy[k]
                    v += 900 * math.exp(-(dx * dx + dy * dy) / 2.0)
                px.append(int(v + 0.5))
        head = struct.pack("<4sHHQQIIIIIf", b"WTIM", 1,
                           {"open": 0, "closed": 2, "held": 3}[s["state"]],
                           fid, recv, iw, iw, b, side, side, 1.0)
        return head + struct.pack("<%dH" % (iw * iw), *px)

    event("state", **{"from": "open", "to": "open", "why": "start"})
    period = 1.0 / args.rate
    next_frame = time.monotonic()
    next_status = next_frame
    poller = zmq.Poller()
    poller.register(rep, zmq.POLLIN)
    while not stop[0]:
        now = time.monotonic()
        if args.seconds and now - start > args.seconds:
            break
        wait = max(0.0, min(next_frame, next_status) - now)
        if dict(poller.poll(wait * 1000)).get(rep):
            line = rep.recv().decode("utf-8", "replace")
            rep.send(json.dumps(answer(line)).encode())
            continue
        now = time.monotonic()
        if now >= next_status:
            pub.send(b"status " + json.dumps(status(False)).encode())
            next_status += 0.2
        if now < next_frame:
            continue
        next_frame += period
        frame += 10
        counts["received"] = frame
        if s["state"] == "closed":
            s["amp"] = 0.03 + (s["amp"] - 0.03) * (1 - 0.5 * s["gain"])
        elif s["state"] == "open":
            s["amp"] = min(1.0, s["amp"] + 0.05)
        t = now - start
        c4 = 0.12 * s["amp"] * (1 + 0.2 * math.sin(t))
        c5 = 0.05 * s["amp"]
        c6 = -0.08 * s["amp"] * math.cos(0.7 * t)
        r3, r6 = math.sqrt(3), math.sqrt(6)
        sx, sy, flux = [], [], []
        for k in range(n):
            x, y = lx[k], ly[k]
            gx = c4 * 4 * r3 * x + c5 * 2 * r6 * y + c6 * 2 * r6 * x
            gy = c4 * 4 * r3 * y + c5 * 2 * r6 * x - c6 * 2 * r6 * y
            sx.append(gx / um_per_px + rng.gauss(0, 0.003))
            sy.append(gy / um_per_px + rng.gauss(0, 0.003))
            flux.append(4000 * (1 - 0.35 * (x * x + y * y)) *
                        (0.05 if k in (0, 1) else 1) + rng.gauss(0, 30))
        cmd = []
        for k in range(a):
            x, y = ax[k], ay[k]
            w = (1 - 0.6 * s["amp"]) * 0.3 * (r3 * (2 * (x * x + y * y) - 1)
                                        + r6 * (x * x - y * y))
            cmd.append(max(-1.0, min(1.0, w)))
        clipped = sum(1 for v in cmd if abs(v) >= 1)
        rms_px = math.sqrt(sum(v * v for v in sx + sy) / (2 * n))
        recv = time.monotonic_ns()
        head = struct.pack("<4sHHQQQQIIIIfI", b"WTFR", 1,
                           {"open": 0, "closed": 2, "held": 3}[s["state"]],
                           frame, recv - 200000, recv, recv + 38000,
                           n, a, 2, clipped, rms_px, 0)
        body = struct.pack("<%df" % (3 * n + a), *(sx + sy + flux + cmd))
        pub.send(b"frame " + head + body)
        if frame % 40 == 0:
            pub.send(b"image " + image(frame, recv, sx, sy))
        rms_nm = 1000 * math.sqrt(c4 * c4 + c5 * c5 + c6 * c6) * 1.05
        strehl = math.exp(-(2 * math.pi * rms_nm / lam) ** 2)
        tru.send(struct.pack("<5sHQqddddIIQQQQ", b"truth", 1, frame,
                             frame - 1, t, rms_nm, rms_nm * 0.9, strehl,
                             clipped, 0, 0, 0, 0, 0))
    ctx.destroy(linger=0)


if __name__ == "__main__":
    main()
