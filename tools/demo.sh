#!/usr/bin/env bash
# The README's demo command.  Builds through tools/setup.sh, then runs the
# simulator and the daemon from config/ and tells the story of one correction.
# Usage: tools/demo.sh [--view]
#   --view  also serve the live view on http://127.0.0.1:8080/, leave the loop
#           closed at the end and run on until Ctrl-C (same as WT_DEMO_VIEW=1)
set -euo pipefail
here=$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)
for arg in "$@"; do
	case $arg in
	--view) export WT_DEMO_VIEW=1 ;;
	*) echo "usage: tools/demo.sh [--view]" >&2; exit 2 ;;
	esac
done
"$here/tools/setup.sh"

if [ ! -x "$here/build/daemon/wavetrimd" ] || [ ! -x "$here/build/sim/wavetrim-sim" ]; then
	cat <<'MSG'
demo: the daemon (wavetrimd) and the simulator (wavetrim-sim) are not built yet.
When they are, this command will: start wavetrim-sim and wavetrimd from config/,
print the sample's true aberration (RMS and Strehl), calibrate the mirror
(modes kept, condition number), close the loop, print the corrected true RMS
and Strehl, and stop both cleanly.
MSG
	exit 0
fi
exec "$here/tools/demo-run.sh" "$here" "$here/build"
