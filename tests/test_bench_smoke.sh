#!/usr/bin/env bash
# test_bench_smoke.sh - wavetrim-bench runs, compute and end to end, and
# its --json object is well-formed with every expected key and sane values.
# Timing is never judged here (the machine is shared and noisy): only that
# the figures exist, are positive and ordered (p50 <= p99 <= p99.9 <= max),
# that the lockstep runs answered every frame, and that the counts add up.
# Also: bad options are refused with exit 2, a missing daemon with exit 1.
# Usage: tests/test_bench_smoke.sh BENCH DAEMON   (exit 0 when all pass)
set -euo pipefail

bench=$1
daemon=$2
dir=$(mktemp -d /tmp/wt_bench_smoke.XXXXXX)
trap 'rm -rf "$dir"' EXIT

fail() {
	echo "FAIL: $*" >&2
	for f in "$dir"/out.json "$dir"/err; do
		[ -f "$f" ] && { echo "--- $f:" >&2; tail -c 4000 "$f" >&2; }
	done
	exit 1
}

"$bench" --systems S --frames 300 --warmup 50 --split none \
	--e2e S --e2e-frames 300 --e2e-warmup 50 --rates 200,500 \
	--rate-frames 400 --daemon "$daemon" --json \
	>"$dir/out.json" 2>"$dir/err" || fail "bench exited $?"

/usr/bin/python3 - "$dir/out.json" <<'PY' || fail "JSON checks"
import json, math, sys

with open(sys.argv[1]) as f:
    d = json.load(f)  # well-formed, or this raises

def ordered(st, what):
    keys = ["p50_ns", "p99_ns", "p99_9_ns", "max_ns"]
    v = [st[k] for k in keys]
    assert all(isinstance(x, (int, float)) and x > 0 for x in v), (what, v)
    assert v == sorted(v), (what, v)
    assert st["min_ns"] <= st["p50_ns"] and st["mean_ns"] > 0, what

for k in ["tool", "machine", "options", "systems", "e2e"]:
    assert k in d, k
assert d["tool"] == "wavetrim-bench"
s = d["systems"]
assert len(s) == 1 and s[0]["name"] == "S", s
for part in ["centroid", "mvm", "controller", "total"]:
    ordered(s[0]["one_cpu"][part], part)

e = d["e2e"]
for k in ["daemon", "daemon_cpu", "replay_cpu", "load", "frames",
          "warmup", "rate_frames", "systems"]:
    assert k in e, k
assert e["frames"] == 300 and e["rate_frames"] == 400 and e["load"] is False
x = e["systems"][0]
assert x["name"] == "S" and x["done"] is True and x["error"] is None, x
# S: 256 x 256 pixels of 2 bytes, 140 actuators of 4 bytes, each after the
# 40-byte header of lib/wt_proto.h
assert x["frame_bytes"] == 40 + 2 * 256 * 256, x["frame_bytes"]
assert x["command_bytes"] == 40 + 4 * 140, x["command_bytes"]
for run in ["lockstep", "floor"]:
    r = x[run]
    assert r["sent"] == 300 and r["received"] == 300, (run, r)
    for k in ["missing", "send_failed", "foreign", "refused", "duplicates"]:
        assert r[k] == 0, (run, k, r[k])
    ordered(r["latency"], run)
for k in ["p50_over_floor_plus_compute", "p99_9_over_p50",
          "compute_total_p50_ns"]:
    assert math.isfinite(x[k]) and x[k] > 0, (k, x[k])
# the daemon's status median is over its last status period: null when
# that period saw no frame
m = x["daemon_latency_median_us"]
assert m is None or (math.isfinite(m) and m > 0), m
rates = x["rates"]
# both rates are below 10 kHz, so both are run whatever the outcome
assert [t["rate_hz"] for t in rates] == [200, 500], rates
passed = 0
for t in rates:
    r = t["replay"]
    assert isinstance(t["pass"], bool)
    assert r["sent"] + r["send_failed"] == 400, r
    assert r["received"] + r["missing"] == r["sent"], r
    assert r["foreign"] == 0 and r["refused"] == 0, r
    for k in ["daemon_dropped", "daemon_stale", "daemon_send_failed"]:
        assert t[k] >= 0, (k, t[k])
    if t["pass"]:
        assert r["missing"] == 0 and t["daemon_dropped"] == 0, t
        passed = t["rate_hz"]
assert x["max_rate_hz"] == passed, (x["max_rate_hz"], passed)
print("bench JSON: all checks passed")
PY

# bad options: exit 2 and a message naming the option
for args in "--e2e X" "--rates 500,200" "--rate-frames 0" "--e2e-frames x"; do
	rc=0
	# shellcheck disable=SC2086
	"$bench" $args >"$dir/out" 2>"$dir/err" || rc=$?
	[ "$rc" = 2 ] || fail "$args exited $rc, not 2"
	grep -q -- "${args%% *}" "$dir/err" || fail "$args: no message"
done
rc=0
"$bench" --systems S --frames 10 --warmup 0 --split none --e2e S \
	--daemon "$dir/no-such-daemon" >"$dir/out" 2>"$dir/err" || rc=$?
[ "$rc" = 1 ] || fail "missing daemon exited $rc, not 1"
grep -q "wavetrimd not found" "$dir/err" || fail "missing daemon: no message"
echo "bench smoke: all checks passed"
