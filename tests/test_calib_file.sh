#!/usr/bin/env bash
# test_calib_file.sh - a calibration file saved by the real wavetrimd, read
# by Python (Debian's /usr/bin/python3 with h5py and numpy) and by
# `wavetrim calibration show`.
#
# A small simulated rig (8 x 8 lenslets, 6 x 6 mirror without corners: 32
# actuators) with channel 12 dead (actuator (2, 2) of the grid, next to the
# pupil centre) is calibrated with `wavetrim calibrate hadamard` and saved.
# Then:
#   1. h5py opens the file: the datasets have the shapes of lib/wt_store.h;
#      the singular values stored (top level and in the report) are
#      numpy.linalg.svd's of the stored interaction matrix; the report's
#      per-actuator norms are numpy's column norms of it; the JSON printed
#      by `calibration show --json` holds the same flags, partners, norms,
#      recommended modes and reason as the file; the dead channel is
#      flagged dead (bit 1) and no other actuator carries a finding.
#   2. `calibration show FILE` prints the report's structure: the header
#      lines, one "actuator 12: dead, response N% of the expected ..." line,
#      the spectrum and the recommendation (numbers not compared: they are
#      the simulator's).
#   3. the same file with /report removed (as written before reports) is
#      shown with "report: none"; with a damaged report (a partner that
#      does not name its actuator back) it is refused, exit 2, with
#      "damaged report".
# Usage: test_calib_file.sh SIM DAEMON CLI SOURCE_DIR
set -euo pipefail

sim_bin=$1 daemon_bin=$2 cli=$3 src=$4
py=/usr/bin/python3 # Debian's, which has python3-h5py and numpy
dir=$(mktemp -d /tmp/wt_calib_file.XXXXXX)
sim_pid= daemon_pid=

cleanup() {
	for p in $daemon_pid $sim_pid; do
		kill "$p" 2>/dev/null || true
		wait "$p" 2>/dev/null || true
	done
	rm -rf "$dir"
}
trap cleanup EXIT

fail() {
	echo "FAIL: $*" >&2
	for f in "$dir"/*.log "$dir"/*.out; do
		[ -f "$f" ] && { echo "--- $f" >&2; cat "$f" >&2; }
	done
	exit 1
}

sed -e "s|/tmp/wavetrim/|$dir/|" \
	-e 's/^lenslets = 16/lenslets = 8/' \
	-e 's/^actuators = 12/actuators = 6/' \
	-e 's/^pupil_pitches = 11/pupil_pitches = 5/' \
	-e 's/^zernike = .*/zernike =/' \
	-e 's/^timeout_ms = 1000/timeout_ms = 20000/' \
	-e 's/^\[dm\]/[dm]\ndead = 12/' \
	"$src/config/demo.ini" >"$dir/rig.ini"

"$sim_bin" -c "$dir/rig.ini" >"$dir/sim.log" 2>&1 &
sim_pid=$!
"$daemon_bin" -c "$dir/rig.ini" >"$dir/daemon.log" 2>&1 &
daemon_pid=$!
for _ in $(seq 100); do
	"$cli" -c "$dir/rig.ini" -w 200 ping >/dev/null 2>&1 && break
	sleep 0.1
done
"$cli" -c "$dir/rig.ini" -w 60000 calibrate hadamard >"$dir/calibrate.out" ||
	fail "calibrate"
grep -q '^calibration report$' "$dir/calibrate.out" || fail "no report"
"$cli" -c "$dir/rig.ini" save "$dir/cal.h5" >/dev/null || fail "save"
"$cli" -c "$dir/rig.ini" shutdown >/dev/null
wait "$daemon_pid" || fail "daemon exit status"
daemon_pid=
kill "$sim_pid"
wait "$sim_pid" 2>/dev/null || true
sim_pid=

# 2. the text, by structure.
"$cli" calibration show "$dir/cal.h5" >"$dir/show.out" || fail "show"
for re in '^file: +.*/cal\.h5$' \
	'^created: +[0-9]{4}-[0-9]{2}-[0-9]{2}T[0-9:]{8}Z$' \
	'^size: +[0-9]+ slopes x 32 actuators, [0-9]+ modes' \
	'^calibration report$' \
	'^  measured: +hadamard patterns, amplitude [0-9.]+, settle [0-9]+' \
	'^  noise: +[0-9.e-]+ px per slope per frame, [0-9.e-]+ per matrix entry$' \
	'^  actuators: +dead 1, weak 0, swapped 0, displaced 0' \
	'^  flags: +1$' \
	'^    actuator 12: dead, response [0-9]+% of the expected [0-9.e+-]+ ' \
	'^  spectrum: +32 singular values, [0-9.e+-]+ \.\. [0-9.e+-]+$' \
	'^  recommended: [0-9]+ modes: .+'; do
	grep -Eq "$re" "$dir/show.out" || fail "show: no line matching $re"
done
"$cli" --json calibration show "$dir/cal.h5" >"$dir/show.json" ||
	fail "show --json"

# 1. and 3. with h5py.
"$py" - "$dir" "$cli" <<'PY' || fail "python checks"
import json, shutil, subprocess, sys
import h5py
import numpy as np

d, cli = sys.argv[1], sys.argv[2]
path = d + "/cal.h5"
shown = json.load(open(d + "/show.json"))
rep = shown["report"]
with h5py.File(path, "r") as f:
    D = f["interaction_matrix"][()]
    n_slopes, n_act = D.shape
    assert n_act == 32, D.shape
    assert f["control_matrix"].shape == (n_act, n_slopes)
    assert f["flat"].shape == (n_act,)
    assert f["reference_slopes"].shape == (n_slopes,)
    assert f["geometry/actuators"].shape == (n_act, 2)
    # numpy's SVD of the stored matrix (LAPACK gesdd via numpy).
    sv = np.linalg.svd(D, compute_uv=False)
    np.testing.assert_allclose(f["singular_values"][()], sv, rtol=1e-9,
                               atol=1e-12 * sv[0])
    g = f["report"]
    np.testing.assert_allclose(g["singular_values"][()], sv, rtol=1e-9,
                               atol=1e-12 * sv[0])
    # numpy's column norms.
    np.testing.assert_allclose(g["norm"][()], np.linalg.norm(D, axis=0),
                               rtol=1e-12)
    flags = g["flags"][()]
    partner = g["partner"][()]
    assert g["centroid"].shape == (n_act, 2)
    assert g.attrs["patterns"] in (b"hadamard", "hadamard")
    # The simulator's dead channel, and nothing else found.
    assert flags[12] & 1, flags
    findings = [k for k in range(n_act) if flags[k] & 15]
    assert findings == [12], findings
    # The CLI's JSON says what the file says.
    a = rep["actuators"]
    assert list(flags) == a["flags"]
    assert list(partner) == a["partner"]
    np.testing.assert_allclose(a["norm"], g["norm"][()], rtol=1e-5)
    assert rep["spectrum"]["recommended"] == int(g.attrs["modes"])
    reason = g.attrs["modes_reason"]
    reason = reason.decode() if isinstance(reason, bytes) else reason
    assert rep["spectrum"]["reason"] == reason
    assert rep["counts"]["dead"] == 1
    assert [x["actuator"] for x in rep["flags"]] == [12]
    assert rep["flags"][0]["flag"] == "dead"
    np.testing.assert_allclose(rep["noise"]["slope_rms"],
                               g.attrs["noise_rms"], rtol=1e-5)

# 3. without a report, and with a damaged one.
old = d + "/old.h5"
shutil.copy(path, old)
with h5py.File(old, "r+") as f:
    del f["report"]
out = subprocess.run([cli, "calibration", "show", old], capture_output=True,
                     text=True)
assert out.returncode == 0, out
assert "report:      none" in out.stdout, out.stdout

bad = d + "/bad.h5"
shutil.copy(path, bad)
with h5py.File(bad, "r+") as f:
    p = f["report/partner"][()]
    p[3] = 5
    f["report/partner"][...] = p
out = subprocess.run([cli, "calibration", "show", bad], capture_output=True,
                     text=True)
assert out.returncode == 2, out
assert "damaged report" in out.stderr, out.stderr
print("calib_file: h5py, numpy and the CLI agree on", path)
PY
echo "PASS"
