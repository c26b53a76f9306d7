#!/usr/bin/env bash
# Run the demo once everything is built: start wavetrim-sim and wavetrimd on
# config/demo.ini, tell the story (tools/demo_story.py), stop both cleanly.
# With WT_DEMO_VIEW=1 (tools/demo.sh --view) it also starts the live view
# (wavetrim-view on http://127.0.0.1:8080/), leaves the loop closed at the end
# and runs on until Ctrl-C.
# Usage: [WT_DEMO_VIEW=1] tools/demo-run.sh [SOURCE_DIR [BUILD_DIR]]
set -euo pipefail
src=${1:-$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)}
build=${2:-$src/build}
ini=$src/config/demo.ini
view=${WT_DEMO_VIEW:-0}
view_url=http://127.0.0.1:8080/

# The demo's ipc endpoints live in /tmp/wavetrim, private to this user.
mkdir -p -m 0700 /tmp/wavetrim && chmod 0700 /tmp/wavetrim
log=$(mktemp -d)
sim_pid=""
daemon_pid=""
view_pid=""
daemon_gone=""
cleanup() {
	[ -n "$view_pid" ] && kill -TERM "$view_pid" 2>/dev/null || true
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

if [ "$view" = 1 ]; then
	"$build/tools/view/wavetrim-view" -c "$ini" >"$log/view.log" 2>&1 &
	view_pid=$!
	# Say where it is only once it serves.
	for _ in $(seq 50); do
		if ! kill -0 "$view_pid" 2>/dev/null ||
			/usr/bin/python3 -c 'import sys, urllib.request
urllib.request.urlopen(sys.argv[1], timeout=1)' "$view_url" 2>/dev/null; then
			break
		fi
		sleep 0.1
	done
	if kill -0 "$view_pid" 2>/dev/null; then
		echo "Live view: $view_url"
	else
		echo "demo: the live view did not start:" >&2
		tail -n 5 "$log/view.log" >&2
		view_pid=""
	fi
fi

status=0
/usr/bin/python3 "$src/tools/demo_story.py" -c "$ini" || status=$?

if [ -n "$view_pid" ] && [ "$status" -eq 0 ]; then
	# The story ends with the loop open; close it again for the view.
	if "$build/tools/wavetrim" -c "$ini" close >/dev/null; then
		echo "The loop stays closed; the live view runs at $view_url"
		echo "Press Ctrl-C to stop."
		# Background jobs of a script ignore SIGINT: Ctrl-C reaches only
		# this shell, which then stops them in order below.
		stop=0
		trap 'stop=1' INT TERM
		while [ "$stop" -eq 0 ] && kill -0 "$daemon_pid" 2>/dev/null; do
			sleep 1 || true
		done
		trap - INT TERM
		echo
		# A terminal's Ctrl-C reaches wavetrimd too, which then stops
		# by itself: let it finish rather than ask it.
		for _ in $(seq 20); do
			kill -0 "$daemon_pid" 2>/dev/null || break
			sleep 0.1
		done
		kill -0 "$daemon_pid" 2>/dev/null || daemon_gone=1
	else
		status=1
	fi
fi

echo "Stopping: the daemon sends the flat command and exits."
if [ -z "$daemon_gone" ]; then
	"$build/tools/wavetrim" -c "$ini" shutdown >/dev/null || true
fi
wait "$daemon_pid" || status=$?
daemon_pid=""
if [ -n "$view_pid" ]; then
	kill -TERM "$view_pid" 2>/dev/null || true
	wait "$view_pid" || true
	view_pid=""
fi
kill -TERM "$sim_pid" 2>/dev/null || true
wait "$sim_pid" || true
sim_pid=""
if [ "$status" -ne 0 ]; then
	echo "demo: something went wrong; logs:" >&2
	tail -n 20 "$log/sim.log" "$log/daemon.log" >&2
fi
rm -rf "$log"
exit "$status"
