#!/bin/bash
# soak.sh - run wavetrim-sim and wavetrimd closed in lockstep for many
# frames and check that nothing is lost and nothing grows:
#   - every frame record is received (daemon.frame_decimation = 1, the
#     frame ids of the records counted: no gap, none out of order), and the
#     daemon counts no dropped, stale or refused frame, no telemetry record
#     lost to a full ring, no fault;
#   - the daemon's resident memory (VmRSS) and open file descriptors do not
#     grow after the first window (warm-up);
#   - the latency (receive -> send, from the frame records) p99.9 of each
#     window is printed, and checked to stay within 5 times the median
#     window's (--no-timing-check skips that, for ctest: timing is never
#     asserted there).
# Prints the figures; exits 0 when every check passes, 1 otherwise, 2 on
# bad usage or when the programs cannot start.
#
# usage: tools/soak.sh [--frames N] [--build DIR] [--windows W]
#                      [--no-timing-check] [--keep]
set -u

frames=1000000
windows=10
build=
timing=1
keep=0
here=$(cd "$(dirname "$0")" && pwd)
while [ $# -gt 0 ]; do
	case "$1" in
	--frames) frames=$2; shift 2 ;;
	--build) build=$2; shift 2 ;;
	--windows) windows=$2; shift 2 ;;
	--no-timing-check) timing=0; shift ;;
	--keep) keep=1; shift ;;
	-h|--help) sed -n '2,19p' "$0"; exit 0 ;;
	*) echo "soak: unknown argument '$1' (try --help)" >&2; exit 2 ;;
	esac
done
[ -n "$build" ] || build="$here/../build"
sim="$build/sim/wavetrim-sim"
daemon="$build/daemon/wavetrimd"
py=/usr/bin/python3
for f in "$sim" "$daemon" "$py"; do
	if [ ! -x "$f" ]; then
		echo "soak: $f not found (build first, or --build DIR)" >&2
		exit 2
	fi
done

dir=$(mktemp -d /tmp/wt-soak-XXXXXX) || exit 2
chmod 700 "$dir"
sim_pid=
daemon_pid=
cleanup() {
	if [ -n "$daemon_pid" ] && kill -0 "$daemon_pid" 2>/dev/null; then
		kill -TERM "$daemon_pid"
		wait "$daemon_pid" 2>/dev/null
	fi
	if [ -n "$sim_pid" ] && kill -0 "$sim_pid" 2>/dev/null; then
		kill -TERM "$sim_pid"
		wait "$sim_pid" 2>/dev/null
	fi
	if [ "$keep" = 1 ]; then
		echo "soak: files kept in $dir"
	else
		rm -rf "$dir"
	fi
}
trap cleanup EXIT

# A small sensor and mirror, Gaussian spots, so that frames come fast; a
# driver timeout far above any stall of a loaded machine.
cat > "$dir/soak.ini" <<EOF
[sensor]
lenslets = 8
pixels_per_lenslet = 8
focal_length_mm = 2.0
threshold = 20
min_flux = 200
[mirror]
actuators = 6
layout = square
pupil_pitches = 5
[control]
gain = 0.4
leak = 0.01
[calibration]
amplitude = 0.3
settle = 1
average = 2
[driver]
frames = ipc://$dir/frames
commands = ipc://$dir/commands
timeout_ms = 5000
[daemon]
control = ipc://$dir/control
telemetry = ipc://$dir/telemetry
frame_decimation = 1
; a loaded machine can stall the monitor for a second or more
telemetry_queue = 200000
status_hz = 2
[sim]
mode = lockstep
delay = 1
truth = ipc://$dir/truth
seed = 7
samples_per_lenslet = 2
timeout_ms = 10000
[sample]
zernike = 4:0.2, 5:0.1, 7:-0.08
[camera]
spot_model = geometric
photons = 100000
EOF

"$sim" -c "$dir/soak.ini" > "$dir/sim.log" 2>&1 &
sim_pid=$!
"$daemon" -c "$dir/soak.ini" > "$dir/daemon.log" 2>&1 &
daemon_pid=$!

timing_arg=
[ "$timing" = 1 ] || timing_arg=--no-timing-check
"$py" "$here/soak_monitor.py" --control "ipc://$dir/control" \
	--telemetry "ipc://$dir/telemetry" --pid "$daemon_pid" \
	--frames "$frames" --windows "$windows" $timing_arg
rc=$?
if [ $rc -ne 0 ]; then
	echo "---- daemon.log (last lines) ----" >&2
	tail -n 20 "$dir/daemon.log" >&2
	echo "---- sim.log (last lines) ----" >&2
	tail -n 20 "$dir/sim.log" >&2
fi
# The daemon must stop cleanly too.
kill -TERM "$daemon_pid"
wait "$daemon_pid"
drc=$?
daemon_pid=
if [ $drc -ne 0 ]; then
	echo "soak: FAIL daemon exit status $drc after SIGTERM" >&2
	[ $rc -eq 0 ] && rc=1
fi
exit $rc
