#!/usr/bin/env bash
# Run the demo once everything is built: start wavetrim-sim and wavetrimd on
# config/demo.ini, tell the story (tools/demo_story.py), stop both cleanly.
# Usage: tools/demo-run.sh [SOURCE_DIR [BUILD_DIR]]
set -euo pipefail
src=${1:-$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)}
build=${2:-$src/build}
ini=$src/config/demo.ini

# The demo's ipc endpoints live in /tmp/wavetrim, private to this user.
mkdir -p -m 0700 /tmp/wavetrim
log=$(mktemp -d)
sim_pid=""
daemon_pid=""
cleanup() {
	[ -n "$daemon_pid" ] && kill -TERM "$daemon_pid" 2>/dev/null || true
	[ -n "$sim_pid" ] && kill -TERM "$sim_pid" 2>/dev/null || true
	wait 2>/dev/null || true
}
trap cleanup EXIT

echo "Starting the simulated microscope (wavetrim-sim) and wavetrimd ..."
"$build/sim/wavetrim-sim" -c "$ini" >"$log/sim.log" 2>&1 &
sim_pid=$!
"$build/daemon/wavetrimd" -c "$ini" >"$log/daemon.log" 2>&1 &
daemon_pid=$!

status=0
/usr/bin/python3 "$src/tools/demo_story.py" -c "$ini" || status=$?

echo "Stopping: the daemon sends the flat command and exits."
"$build/tools/wavetrim" -c "$ini" shutdown >/dev/null || true
wait "$daemon_pid" || status=$?
daemon_pid=""
kill -TERM "$sim_pid" 2>/dev/null || true
wait "$sim_pid" || true
sim_pid=""
if [ "$status" -ne 0 ]; then
	echo "demo: something went wrong; logs:" >&2
	tail -n 20 "$log/sim.log" "$log/daemon.log" >&2
fi
rm -rf "$log"
exit "$status"
