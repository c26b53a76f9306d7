#!/usr/bin/python3
"""Tell the story of one correction, for the README's demo command.

Talks to a running wavetrimd through its control protocol (lib/wt_request.h)
and reads the simulator's truth stream (sim/sim_driver.h): the true residual
wavefront the simulator computed, not the daemon's own estimate.

    demo_story.py -c config/demo.ini [--frames 50]
"""
import argparse
import configparser
import json
import struct
import sys
import time

import zmq

# The first 95 bytes of a truth record (sim/sim_driver.h; version 2 adds
# 14 Zernike coefficients after them: "<5sHQqddddIIQQQQ14d").
TRUTH = struct.Struct("<5sHQqddddIIQQQQ")


def option(ini, section, key, default):
    try:
        return ini.get(section, key).split(";")[0].strip()
    except (configparser.Error, KeyError):
        return default


class Rig:
    def __init__(self, ini):
        self.ctx = zmq.Context()
        self.control = option(ini, "daemon", "control",
                              "ipc:///tmp/wavetrim/control")
        self.truth = self.ctx.socket(zmq.SUB)
        self.truth.setsockopt(zmq.LINGER, 0)
        self.truth.setsockopt(zmq.SUBSCRIBE, b"truth")
        self.truth.connect(option(ini, "sim", "truth",
                                  "ipc:///tmp/wavetrim/truth"))

    def ask(self, line, timeout_ms=10000):
        req = self.ctx.socket(zmq.REQ)
        req.setsockopt(zmq.LINGER, 0)
        req.setsockopt(zmq.RCVTIMEO, timeout_ms)
        req.connect(self.control)
        try:
            req.send_string(line)
            reply = json.loads(req.recv())
        finally:
            req.close()
        if not reply.get("ok"):
            raise RuntimeError(f"{line}: {reply.get('error')}")
        return reply.get("result")

    def truth_mean(self, frames):
        """Mean true RMS (nm) and Strehl over the next `frames` frames."""
        rms = strehl = 0.0
        for _ in range(frames):
            if not self.truth.poll(5000):
                raise RuntimeError("no truth from the simulator")
            rec = TRUTH.unpack_from(self.truth.recv())
            rms += rec[5]
            strehl += rec[7]
        return rms / frames, strehl / frames

    def sync(self):
        """Drop truth of frames answered before now: the simulator runs
        on while we talk, and its records queue up in our socket."""
        last = self.ask("status").get("last_frame")
        if last is None:
            return
        while True:
            if not self.truth.poll(5000):
                raise RuntimeError("no truth from the simulator")
            if TRUTH.unpack_from(self.truth.recv())[2] > last:
                return

    def wait_state(self, state, timeout_s):
        end = time.monotonic() + timeout_s
        while time.monotonic() < end:
            status = self.ask("status")
            if status["state"] == state:
                return status
            time.sleep(0.1)
        raise RuntimeError(f"the loop did not reach {state}")


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("-c", "--config", required=True)
    ap.add_argument("--frames", type=int, default=50)
    args = ap.parse_args()
    ini = configparser.ConfigParser(inline_comment_prefixes=(";",), strict=False)
    ini.read(args.config)
    wavelength = float(option(ini, "sensor", "wavelength_nm", "920"))
    rig = Rig(ini)

    rig.wait_state("open", 10)
    rig.sync()
    rms, strehl = rig.truth_mean(20)
    print(f"1. The sample, mirror flat: {rms:.0f} nm RMS of wavefront "
          f"error, Strehl {strehl:.3f} at {wavelength:.0f} nm.")

    # No `reference`: through the sample it would measure the very
    # aberration we want gone. The simulated sensor's own reference is the
    # lenslet axes, which is the daemon's default.
    print("2. Calibrating: push-pull pokes of every actuator ...",
          flush=True)
    result = rig.ask("calibrate")
    rig.wait_state("open", 600)
    status = rig.ask("status")
    for _ in range(100):
        if status.get("modes"):
            break
        time.sleep(0.1)
        status = rig.ask("status")
    cal = status.get("calibration") or {}
    print(f"   {result.get('frames', '?')} frames; control matrix keeps "
          f"{status.get('modes')} modes (condition number "
          f"{cal.get('condition', float('nan')):.1f}).")

    rig.ask("close")
    rig.sync()
    rig.truth_mean(args.frames)
    rms1, strehl1 = rig.truth_mean(10)
    print(f"3. Loop closed at gain {status.get('gain')}: after "
          f"{args.frames} frames {rms1:.1f} nm RMS, Strehl "
          f"{strehl1:.3f} ({rms / max(rms1, 1e-9):.0f}x less error; "
          f"Marechal's well-corrected limit is {wavelength / 14:.0f} nm).")
    rig.ask("open")
    return 0 if rms1 < wavelength / 14 else 1


if __name__ == "__main__":
    try:
        sys.exit(main())
    except (RuntimeError, zmq.ZMQError, KeyError, ValueError) as exc:
        print(f"demo: {exc}", file=sys.stderr)
        sys.exit(1)
