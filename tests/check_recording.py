#!/usr/bin/python3
"""Check a wavetrim recording (layout: lib/wt_recording.h) with h5py/numpy.

usage: check_recording.py FILE FRAMES STATE
Exit 0 when consistent, 1 with the reason otherwise, 77 without h5py.
"""
import sys

try:
    import h5py
    import numpy as np
except ImportError:
    print("h5py or numpy missing: skipped")
    sys.exit(77)

STATES = ["open", "calibrating", "closed", "held", "fault"]


def text(v):
    """Fixed-length HDF5 strings come back as bytes."""
    return v.decode() if isinstance(v, bytes) else str(v)


def fail(msg):
    print("recording check failed:", msg)
    sys.exit(1)


def main():
    path, frames, state = sys.argv[1], int(sys.argv[2]), sys.argv[3]
    with h5py.File(path, "r") as f:
        a = f.attrs
        if text(a["format"]) != "wavetrim recording" or a["format_version"] != 1:
            fail("format attributes %r %r" % (a["format"],
                                               a["format_version"]))
        n, act = int(a["n_subaps"]), int(a["n_act"])
        if int(a["frames"]) != frames or int(a["frames_requested"]) != frames:
            fail("frames %d of %d, wanted %d" % (a["frames"],
                                                 a["frames_requested"],
                                                 frames))
        lost, dropped = int(a["frames_lost"]), int(a["telemetry_dropped"])
        print("frames %d, lost %d, telemetry dropped %d" %
              (frames, lost, dropped))
        shapes = {"frame_id": (frames,), "driver_ns": (frames,),
                  "recv_ns": (frames,), "send_ns": (frames,),
                  "latency_us": (frames,), "state": (frames,),
                  "flags": (frames,), "n_invalid": (frames,),
                  "n_clipped": (frames,), "residual_rms": (frames,),
                  "slopes": (frames, 2 * n), "flux": (frames, n),
                  "commands": (frames, act)}
        for name, shape in shapes.items():
            if f[name].shape != shape:
                fail("%s has shape %s, not %s" % (name, f[name].shape,
                                                  shape))
        ids = f["frame_id"][:]
        steps = np.diff(ids.astype(np.int64))
        if np.any(steps <= 0):
            fail("frame ids not increasing")
        # With nothing lost and a lockstep simulator, every frame is there.
        if lost == 0 and dropped == 0:
            if not np.all(steps == 1):
                fail("gaps in the frame ids: %s" %
                     np.unique(steps).tolist())
            if int(a["complete"]) != 1:
                fail("complete is not 1")
        recv, send = f["recv_ns"][:], f["send_ns"][:]
        if np.any(send < recv) or np.any(np.diff(recv.astype(np.int64)) < 0):
            fail("timestamps out of order")
        if np.any(np.diff(f["driver_ns"][:].astype(np.int64)) <= 0):
            fail("driver timestamps not increasing")
        # latency is (send - recv) / 1000 (wt_recording.h)
        lat = (send - recv).astype(np.float64) / 1e3
        if not np.allclose(f["latency_us"][:], lat, rtol=0, atol=1e-6):
            fail("latency_us is not (send_ns - recv_ns) / 1000")
        # residual_rms is the RMS of the residual slopes (its definition,
        # wt_request.h section 5), recomputed here with numpy.
        s = f["slopes"][:].astype(np.float64)
        rms = np.sqrt(np.mean(s * s, axis=1))
        if not np.allclose(f["residual_rms"][:], rms, rtol=1e-4,
                           atol=1e-6):
            fail("residual_rms differs from the slopes' RMS")
        st = f["state"][:]
        if text(f["state"].attrs["names"]).split() != STATES:
            fail("state names %r" % f["state"].attrs["names"])
        if np.any(st != STATES.index(state)):
            fail("states %s, wanted all %s" % (np.unique(st).tolist(), state))
        c = f["commands"][:]
        if not np.all(np.isfinite(c)) or np.any(np.abs(c) > 1):
            fail("commands outside [-1, 1]")
        if state == "open" and not np.all(c == c[0]):
            fail("open loop commands are not all the flat")
        if state == "closed" and np.all(c == c[0]):
            fail("closed loop commands never change")
        if not np.all(f["flux"][:] >= 0):
            fail("negative flux")
        if "[sensor]" not in text(f["config"][()]):
            fail("config text missing")
    print("recording consistent: %d frames, %d subapertures, %d actuators" %
          (frames, n, act))
    return 0


if __name__ == "__main__":
    sys.exit(main())
