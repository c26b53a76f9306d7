#!/usr/bin/python3
"""soak_monitor.py - the watching half of tools/soak.sh (see there).

Calibrates and closes the daemon, then reads every frame record (topic
"frame ", wt_request.h section 5) for --frames closed-loop frames, in
--windows windows: counts the ids, the daemon's VmRSS and open file
descriptors (/proc/PID) and the receive -> send latency p99.9 of each
window.  Prints a table and the verdict; exit status 0 (pass) or 1.
"""
import argparse
import json
import os
import struct
import sys
import time

import numpy as np
import zmq

HEADER = struct.Struct("<4sHHQQQQIIIIfI")  # 64 bytes, wt_frame_record
TOPIC = b"frame "
STATE_CLOSED = 2


def request(ctx, endpoint, line, timeout_ms=20000):
    s = ctx.socket(zmq.REQ)
    s.setsockopt(zmq.LINGER, 0)
    s.setsockopt(zmq.RCVTIMEO, timeout_ms)
    s.connect(endpoint)
    try:
        s.send_string(line)
        return json.loads(s.recv())
    finally:
        s.close()


class Control:
    """One REQ connection kept for the whole run: a connection per request
    would show in the daemon's descriptor count while it is open."""

    def __init__(self, ctx, endpoint):
        self.s = ctx.socket(zmq.REQ)
        self.s.setsockopt(zmq.LINGER, 0)
        self.s.setsockopt(zmq.RCVTIMEO, 20000)
        self.s.connect(endpoint)

    def __call__(self, line):
        self.s.send_string(line)
        return json.loads(self.s.recv())


def wait_for(ctx, endpoint, cond, timeout_s, what):
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        try:
            r = request(ctx, endpoint, "status", 2000)
            if r.get("ok") and cond(r["result"]):
                return r["result"]
        except zmq.ZMQError:
            pass
        time.sleep(0.1)
    raise SystemExit("soak: FAIL %s not reached in %d s" % (what, timeout_s))


def vm_rss_kib(pid):
    with open("/proc/%d/status" % pid) as f:
        for line in f:
            if line.startswith("VmRSS:"):
                return int(line.split()[1])
    return -1


def fd_count(pid):
    return len(os.listdir("/proc/%d/fd" % pid))


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--control", required=True)
    ap.add_argument("--telemetry", required=True)
    ap.add_argument("--pid", type=int, required=True)
    ap.add_argument("--frames", type=int, default=1000000)
    ap.add_argument("--windows", type=int, default=10)
    ap.add_argument("--no-timing-check", action="store_true")
    a = ap.parse_args()
    windows = max(2, a.windows)
    per_window = max(1, a.frames // windows)

    ctx = zmq.Context()
    wait_for(ctx, a.control, lambda r: r["last_frame"] is not None, 20,
             "first frame")
    r = request(ctx, a.control, "calibrate")
    if not r.get("ok"):
        raise SystemExit("soak: FAIL calibrate refused: %s" % r)
    wait_for(ctx, a.control,
             lambda r: r["state"] == "open" and r["modes"] > 0, 600,
             "a control matrix")

    sub = ctx.socket(zmq.SUB)
    sub.setsockopt(zmq.RCVHWM, 1000000)
    sub.setsockopt(zmq.SUBSCRIBE, TOPIC)
    sub.connect(a.telemetry)
    time.sleep(0.5)  # let the subscription reach the daemon
    r = request(ctx, a.control, "close")
    if not r.get("ok"):
        raise SystemExit("soak: FAIL close refused: %s" % r)

    ctl = Control(ctx, a.control)
    ctl("ping")
    poller = zmq.Poller()
    poller.register(sub, zmq.POLLIN)
    lat = np.empty(per_window, dtype=np.float64)
    rows = []
    prev = None
    gaps = disorder = 0
    gap_at = []
    n = k = 0
    t0 = time.monotonic()
    tw = t0
    while len(rows) < windows:
        if not poller.poll(5000):
            raise SystemExit("soak: FAIL no frame record for 5 s after "
                             "%d frames" % n)
        msg = sub.recv()
        if not msg.startswith(TOPIC) or len(msg) < 6 + HEADER.size:
            raise SystemExit("soak: FAIL malformed record")
        f = HEADER.unpack_from(msg, 6)
        state, fid, recv_ns, send_ns = f[2], f[3], f[5], f[6]
        if prev is None:
            if state != STATE_CLOSED:
                continue  # records from before `close`
        elif fid != prev + 1:
            if fid > prev:
                gaps += fid - prev - 1
                if len(gap_at) < 5:
                    gap_at.append("%d missing after id %d (frame %d)"
                                  % (fid - prev - 1, prev, n))
            else:
                disorder += 1
        prev = fid
        lat[k] = (send_ns - recv_ns) / 1000.0
        k += 1
        n += 1
        if k == per_window:
            now = time.monotonic()
            fds = fd_count(a.pid)
            st = ctl("status")["result"]
            rows.append({
                "frames": n,
                "rate": per_window / (now - tw),
                "p50": float(np.percentile(lat, 50)),
                "p99": float(np.percentile(lat, 99)),
                "p999": float(np.percentile(lat, 99.9)),
                "max": float(lat.max()),
                "rss": vm_rss_kib(a.pid),
                "fds": fds,
                "counts": st["counts"],
                "state": st["state"],
            })
            w = rows[-1]
            print("window %2d  frames %8d  %7.0f Hz  latency us p50 %6.1f "
                  "p99 %7.1f p99.9 %7.1f max %8.1f  VmRSS %6d KiB  fds %3d"
                  % (len(rows), n, w["rate"], w["p50"], w["p99"], w["p999"],
                     w["max"], w["rss"], w["fds"]), flush=True)
            k = 0
            tw = now
    elapsed = time.monotonic() - t0
    sub.close()
    ctl.s.close()

    last = rows[-1]
    c = last["counts"]
    fails = []
    if gaps or disorder:
        fails.append("frame records missing %d, out of order %d"
                     % (gaps, disorder))
    for key in ("dropped", "stale", "refused", "bad_dimensions",
                "telemetry_dropped", "faults", "send_failed",
                "rejected_updates"):
        if c[key]:
            fails.append("daemon counts %s = %d" % (key, c[key]))
    if any(w["state"] != "closed" for w in rows):
        fails.append("the loop left the closed state")
    # Warm-up: the first window.  Flat: at most 1 MiB above it (ZeroMQ
    # and allocator slack), and not one descriptor more.
    rss0, fds0 = rows[0]["rss"], rows[0]["fds"]
    rss_max = max(w["rss"] for w in rows[1:])
    fds_max = max(w["fds"] for w in rows[1:])
    if rss_max > rss0 + 1024:
        fails.append("VmRSS grew from %d to %d KiB" % (rss0, rss_max))
    if fds_max > fds0:
        fails.append("open descriptors grew from %d to %d" % (fds0, fds_max))
    p999 = [w["p999"] for w in rows]
    med = float(np.median(p999))
    if not a.no_timing_check and max(p999) > 5 * med:
        fails.append("latency p99.9 not stable: worst window %.1f us, "
                     "median window %.1f us" % (max(p999), med))

    print("soak: %d closed-loop frames in %.0f s (%.0f Hz); records "
          "received %d, missing %d, out of order %d"
          % (n, elapsed, n / elapsed, n, gaps, disorder))
    print("soak: daemon counts dropped %d stale %d refused %d "
          "telemetry_dropped %d faults %d send_failed %d"
          % (c["dropped"], c["stale"], c["refused"], c["telemetry_dropped"],
             c["faults"], c["send_failed"]))
    print("soak: VmRSS %d KiB after warm-up, max %d KiB after; fds %d, "
          "max %d after" % (rss0, rss_max, fds0, fds_max))
    print("soak: latency p99.9 per window min %.1f median %.1f max %.1f us%s"
          % (min(p999), med, max(p999),
             " (not checked)" if a.no_timing_check else ""))
    for g in gap_at:
        print("soak: gap: " + g)
    for f in fails:
        print("soak: FAIL " + f)
    print("soak: %s" % ("PASS" if not fails else "FAIL"))
    return 1 if fails else 0


if __name__ == "__main__":
    sys.exit(main())
