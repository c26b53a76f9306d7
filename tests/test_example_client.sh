#!/usr/bin/env bash
# test_example_client.sh - tools/example_client.py against a stand-in daemon.
#
# The stand-in below is a TEST DOUBLE, not wavetrimd: a few lines of Python
# that bind a REP and a PUB socket on ipc endpoints in a temporary folder,
# answer each request line with a canned JSON reply (or, in the "broken"
# modes, with something that is not a proper reply), log the lines they
# received, and publish status, event and frame messages.  The checks:
#   1. well-formed replies, endpoints from an INI file: exit 0, each reply's
#      ok/result/error printed, three status messages printed (events and
#      frames filtered out), and exactly the lines status, open, close sent;
#   2. a reply that is not JSON: exit 1;
#   3. a reply without "ok": exit 1;
#   4. nobody at the endpoints: exit 2, quickly.
# Usage: tests/test_example_client.sh   (exit 0 when every check passes)
set -euo pipefail

here=$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)
client="$here/tools/example_client.py"
py=/usr/bin/python3 # Debian's, which has python3-zmq
dir=$(mktemp -d /tmp/wt_example_client.XXXXXX)
stand_in_pid=

cleanup() {
	if [ -n "$stand_in_pid" ]; then
		kill "$stand_in_pid" 2>/dev/null || true
		wait "$stand_in_pid" 2>/dev/null || true
	fi
	rm -rf "$dir"
}
trap cleanup EXIT

fail() {
	echo "FAIL: $*" >&2
	echo "--- client output:" >&2
	cat "$dir/out" >&2 || true
	exit 1
}

cat >"$dir/stand_in.py" <<'PY'
# TEST DOUBLE for wavetrimd's control and telemetry sockets (see the script).
import json, sys, time
import zmq

control, telemetry, mode, log = sys.argv[1:5]
ctx = zmq.Context()
rep, pub = ctx.socket(zmq.REP), ctx.socket(zmq.PUB)
rep.linger = pub.linger = 0
rep.bind(control)
pub.bind(telemetry)
canned = {
    "status": {"ok": True, "result": {"state": "open", "frames": 0}},
    "open": {"ok": True, "result": {"state": "open"}},
    "close": {"ok": False, "error": "no control matrix: calibrate or load "
                                    "a calibration first"},
}
frames = 0
while True:
    if rep.poll(20):
        line = rep.recv().decode()
        with open(log, "a") as f:
            f.write(line + "\n")
        reply = json.dumps(canned.get(line, {"ok": False,
                                             "error": "unknown word"}))
        if mode == "not-json" and line == "open":
            reply = "this is not json"
        elif mode == "no-ok" and line == "open":
            reply = json.dumps({"result": {"state": "open"}})
        rep.send_string(reply)
    frames += 1
    pub.send_string("event " + json.dumps({"event": "warning", "frame": frames}))
    pub.send(b"frame " + bytes(64))
    pub.send_string("status " + json.dumps({"state": "open", "frames": frames}))
PY

# Start the stand-in in mode $1 and wait until its sockets exist.
start_stand_in() {
	rm -f "$dir/requests"
	"$py" "$dir/stand_in.py" "ipc://$dir/control" "ipc://$dir/telemetry" \
		"$1" "$dir/requests" &
	stand_in_pid=$!
	for _ in $(seq 100); do
		[ -S "$dir/control" ] && [ -S "$dir/telemetry" ] && return 0
		sleep 0.05
	done
	fail "the stand-in did not bind its sockets"
}

stop_stand_in() {
	kill "$stand_in_pid"
	wait "$stand_in_pid" 2>/dev/null || true
	stand_in_pid=
	rm -f "$dir/control" "$dir/telemetry"
}

# 1. Well-formed replies; endpoints read from an INI file.
cat >"$dir/rig.ini" <<INI
; endpoints as wavetrimd would read them
[daemon]
control = ipc://$dir/control ; an inline comment
telemetry = ipc://$dir/telemetry
INI
start_stand_in good
rc=0
"$py" "$client" -c "$dir/rig.ini" -w 5000 >"$dir/out" 2>&1 || rc=$?
[ "$rc" -eq 0 ] || fail "well-formed replies: exit $rc, expected 0"
grep -qx 'status: ok=true result={"state": "open", "frames": 0}' "$dir/out" ||
	fail "status reply not printed"
grep -qx 'open: ok=true result={"state": "open"}' "$dir/out" ||
	fail "open reply not printed"
grep -qx 'close: ok=false error="no control matrix: calibrate or load a calibration first"' \
	"$dir/out" || fail "close refusal not printed"
[ "$(grep -cE '^status: state=open frames=[0-9]+$' "$dir/out")" -eq 3 ] ||
	fail "expected three status lines"
grep -qiE 'event|frame ' "$dir/out" && fail "events or frames were printed"
[ "$(cat "$dir/requests")" = "$(printf 'status\nopen\nclose')" ] ||
	fail "requests sent: $(tr '\n' ' ' <"$dir/requests")"
stop_stand_in

# 2 and 3. Broken replies, endpoints given on the command line.
for mode in not-json no-ok; do
	start_stand_in "$mode"
	rc=0
	"$py" "$client" "ipc://$dir/control" -t "ipc://$dir/telemetry" \
		-w 5000 >"$dir/out" 2>&1 || rc=$?
	[ "$rc" -eq 1 ] || fail "$mode: exit $rc, expected 1"
	grep -q '^open: malformed reply' "$dir/out" ||
		fail "$mode: malformed reply not reported"
	stop_stand_in
done

# 4. Nobody there: gives up after its timeout with exit 2.
rc=0
"$py" "$client" "ipc://$dir/control" -t "ipc://$dir/telemetry" -w 300 \
	>"$dir/out" 2>&1 || rc=$?
[ "$rc" -eq 2 ] || fail "no daemon: exit $rc, expected 2"
grep -q '^status: no reply from' "$dir/out" || fail "no-reply not reported"

echo "example_client: 4 checks passed"
