#!/usr/bin/env bash
# test_replay.sh - wavetrim-replay against the real wavetrimd.
#
# Checks:
#   1. lockstep, open loop: every frame sent is answered by a command
#      carrying its id (no command for an id not sent, none twice, none
#      refused), exit 0; the daemon's status counts every frame received
#      and none dropped or stale;
#   2. a second replay starting at --first-id above the daemon's last frame
#      is answered just as fully; free-running at a low rate sends every
#      frame (counts only; rates are wavetrim-bench's business);
#   3. bad input is refused with a clear message and exit 2 (arguments) or
#      1 (an ipc endpoint whose folder others may enter), never a crash.
# Usage: tests/test_replay.sh REPLAY DAEMON CLI   (exit 0 when all pass)
set -euo pipefail

replay=$1
daemon=$2
cli=$3
dir=$(mktemp -d /tmp/wt_replay.XXXXXX) # mode 0700, as ipc needs
daemon_pid=

cleanup() {
	if [ -n "$daemon_pid" ]; then
		kill "$daemon_pid" 2>/dev/null || true
		wait "$daemon_pid" 2>/dev/null || true
	fi
	rm -rf "$dir"
}
trap cleanup EXIT

fail() {
	echo "FAIL: $*" >&2
	for f in "$dir"/out "$dir"/daemon.log; do
		[ -f "$f" ] && { echo "--- $f:" >&2; cat "$f" >&2; }
	done
	exit 1
}

# field NAME FILE LINE-TAG: the value of NAME= on the line tagged LINE-TAG
field() {
	grep "^wavetrim-replay: $3: " "$2" | tr ' ' '\n' |
		sed -n "s/^$1=//p" | head -1
}

cat >"$dir/rig.ini" <<EOF
[sensor]
background = 100
min_flux = 1
[driver]
frames = ipc://$dir/frames
commands = ipc://$dir/commands
[daemon]
control = ipc://$dir/control
telemetry = ipc://$dir/telemetry
EOF

"$daemon" -c "$dir/rig.ini" --log-level notice >"$dir/daemon.log" 2>&1 &
daemon_pid=$!
for _ in $(seq 100); do
	"$cli" -c "$dir/rig.ini" ping >/dev/null 2>&1 && break
	sleep 0.1
done

# 1. lockstep: every id answered once
"$replay" -c "$dir/rig.ini" --frames 1500 --warmup 0 >"$dir/out" 2>&1 ||
	fail "lockstep run exited $?"
[ "$(field frames_sent "$dir/out" lockstep)" = 1500 ] || fail "sent"
[ "$(field commands_received "$dir/out" lockstep)" = 1500 ] ||
	fail "not every frame answered"
for k in commands_missing send_failed timeouts duplicates foreign refused; do
	[ "$(field $k "$dir/out" lockstep)" = 0 ] || fail "$k not 0"
done
"$cli" -c "$dir/rig.ini" status >"$dir/status" || fail "status"
grep -qx 'counts.received: 1500' "$dir/status" || fail "daemon's received"
grep -qx 'counts.dropped: 0' "$dir/status" || fail "daemon dropped frames"
grep -qx 'counts.stale: 0' "$dir/status" || fail "daemon saw stale frames"
grep -qx 'last_frame: 1499' "$dir/status" || fail "daemon's last id"

# 2. a second driver run above the last id, lockstep then free at 200 Hz
"$replay" -c "$dir/rig.ini" --frames 500 --warmup 0 --first-id 1500 \
	>"$dir/out" 2>&1 || fail "second lockstep run exited $?"
[ "$(field commands_received "$dir/out" lockstep)" = 500 ] ||
	fail "second run not answered"
"$replay" -c "$dir/rig.ini" --frames 200 --rate 200 --warmup 10 \
	--first-id 2000 >"$dir/out" 2>&1 || true
[ "$(field frames_sent "$dir/out" free)" -gt 0 ] || fail "free run sent none"
[ "$(field foreign "$dir/out" free)" = 0 ] || fail "free run: foreign ids"
[ "$(field refused "$dir/out" free)" = 0 ] || fail "free run: refused"

# 3. bad input: a clear message and the right exit status
expect() { # STATUS PATTERN ARGS...
	local want=$1 pat=$2 rc=0
	shift 2
	"$replay" "$@" >"$dir/out" 2>&1 || rc=$?
	[ "$rc" = "$want" ] || fail "$* exited $rc, not $want"
	grep -q -- "$pat" "$dir/out" || fail "$*: no '$pat' in the message"
}
expect 2 "-c FILE is required"
expect 2 "--rate" -c "$dir/rig.ini" --rate 0
expect 2 "--prerender" -c "$dir/rig.ini" --prerender 2
expect 2 "--frames" -c "$dir/rig.ini" --frames -5
expect 1 "" -c "$dir/no-such.ini"
mkdir -m 0755 "$dir/open"
sed "s|ipc://$dir/frames|ipc://$dir/open/frames|" "$dir/rig.ini" \
	>"$dir/open.ini"
expect 1 "driver.frames" -c "$dir/open.ini" --frames 10
echo "replay: all checks passed"
