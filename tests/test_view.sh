#!/usr/bin/env bash
# Browser test of wavetrim-view against the real simulator and daemon:
# wavetrim-sim and wavetrimd run the demo scenario (config/demo.ini, with
# private ipc endpoints, geometric spots and short calibration averages for
# speed), a calibration is loaded (the e2e fixture's file when it exists,
# else measured), and the page is loaded in Debian's headless Chromium over
# the DevTools protocol.  Checks: the page loads with no console error or
# exception, the history grows, the frame panels get data, the Close button
# closes the daemon's loop (state badge and `status`), the gain field reaches
# the daemon (`get control.gain`), the residual shown drops after close, the
# server refuses words the page may not send (and the daemon keeps running),
# a cross-site POST and a foreign Host header, and the snapshots decode.
# Saves a screenshot of the page with the loop closed (OUTPUT_DIR/
# view_screenshot.png).
#
# usage: test_view.sh VIEW_BINARY [SOURCE_DIR] [OUTPUT_DIR]
# OUTPUT_DIR is the tests binary dir; the simulator, daemon and CLI are taken
# from beside it (OUTPUT_DIR/../sim, ../daemon, ../tools).
# Exit 77 (skipped) when chromium, python3-websocket or a binary is missing.
set -euo pipefail

view=$1
src=${2:-$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)}
out=${3:-$PWD}
sim=$out/../sim/wavetrim-sim
daemon=$out/../daemon/wavetrimd
cli=$out/../tools/wavetrim
py=/usr/bin/python3
chromium=/usr/bin/chromium

for need in "$view" "$sim" "$daemon" "$cli" "$py" "$chromium"; do
	if [ ! -x "$need" ]; then
		echo "test_view: skipped: $need not found (build it; apt-get install chromium)"
		exit 77
	fi
done
if ! "$py" -c 'import websocket, zmq' 2>/dev/null; then
	echo "test_view: skipped: python3-websocket or python3-zmq missing"
	exit 77
fi

# mktemp -d makes the folder 0700: the ipc endpoints stay private.
tmp=$(mktemp -d)
ini=$tmp/demo.ini
pids=()
daemon_pid=""
chromium_pid=""
cleanup() {
	if [ -n "$daemon_pid" ]; then
		"$cli" -c "$ini" --timeout 2000 shutdown >/dev/null 2>&1 || true
	fi
	for p in "${pids[@]}"; do
		kill "$p" 2>/dev/null || true
	done
	# Chromium's helper processes share its session's process group.
	if [ -n "$chromium_pid" ]; then
		kill -- -"$chromium_pid" 2>/dev/null || true
	fi
	for p in "${pids[@]}"; do
		wait "$p" 2>/dev/null || true
	done
	rm -rf "$tmp"
}
trap cleanup EXIT

free_port() {
	"$py" -c 'import socket; s = socket.socket(); s.bind(("127.0.0.1", 0)); print(s.getsockname()[1])'
}
port=$(free_port)
devtools=$(free_port)

# The demo scenario with this test's endpoints; geometric spots and two
# frames per poke so that a calibration, when one is needed, takes seconds.
sed -e "s|^frames *=.*|frames = ipc://$tmp/frames|" \
	-e "s|^commands *=.*|commands = ipc://$tmp/commands|" \
	-e "s|^control *=.*|control = ipc://$tmp/control|" \
	-e "s|^telemetry *=.*|telemetry = ipc://$tmp/telemetry|" \
	-e "s|^truth *=.*|truth = ipc://$tmp/truth|" \
	-e "s|^spot_model *=.*|spot_model = geometric|" \
	-e "s|^average *=.*|average = 2|" \
	"$src/config/demo.ini" >"$ini"
for key in frames commands control telemetry truth; do
	if ! grep -q "^$key = ipc://$tmp/$key\$" "$ini"; then
		echo "test_view: FAIL: config/demo.ini has no '$key =' line to replace"
		exit 1
	fi
done

"$sim" -c "$ini" >"$tmp/sim.log" 2>&1 &
pids+=($!)
"$daemon" -c "$ini" >"$tmp/daemon.log" 2>&1 &
daemon_pid=$!
pids+=($!)
"$view" -c "$ini" --listen "127.0.0.1:$port" >"$tmp/view.log" 2>&1 &
pids+=($!)
setsid "$chromium" --headless --no-sandbox --disable-gpu --disable-quic \
	--no-first-run --disable-background-networking \
	--disable-component-update --disable-sync \
	--user-data-dir="$tmp/chromium" --remote-debugging-address=127.0.0.1 \
	--remote-debugging-port="$devtools" --remote-allow-origins='*' \
	--window-size=1400,1000 about:blank >"$tmp/chromium.log" 2>&1 &
chromium_pid=$!
pids+=($!)

rc=0
"$py" - "$port" "$devtools" "$cli" "$ini" "$out/e2e-demo-calibration.h5" \
	"$out/view_screenshot.png" <<'EOF' || rc=$?
import base64, json, os, subprocess, sys, time, urllib.error, urllib.request
import xml.etree.ElementTree as ET
import websocket

port, devtools, cli, ini, calfile, shot = sys.argv[1:7]
base = "http://127.0.0.1:%s" % port
failures = []
passed = []

def check(cond, what):
    print(("ok   " if cond else "FAIL ") + what, flush=True)
    (passed if cond else failures).append(what)

def ask(*words, opts=()):
    """One request through the built CLI; the daemon's result or None."""
    r = subprocess.run([cli, "-c", ini, "--json", *opts] + list(words),
                       capture_output=True, text=True, timeout=20)
    try:
        reply = json.loads(r.stdout)
    except ValueError:
        return None
    return reply.get("result") if reply.get("ok") else None

def http(path, data=None, headers=None):
    req = urllib.request.Request(base + path, data=data, headers=headers or {})
    try:
        with urllib.request.urlopen(req, timeout=10) as r:
            return r.status, r.read()
    except urllib.error.HTTPError as e:
        return e.code, e.read()

def shown_rms():
    """The residual slopes RMS the page shows, in px (None if none yet)."""
    text = js("document.getElementById('s-rms').textContent") or ""
    try:
        return float(text.split()[0])
    except (ValueError, IndexError):
        return None

# The daemon answers, with frames from the simulator.
status = None
for _ in range(100):
    status = ask("status")
    if status and status.get("frames"):
        break
    time.sleep(0.1)
check(status is not None and status.get("state") == "open",
      "wavetrimd answers, loop open (%s)" %
      (status and status.get("state")))
if status is None:
    sys.exit(1)

# A calibration, so that the page's Close can close the loop.
if os.path.exists(calfile):
    how = "loaded %s" % os.path.basename(calfile)
    ok = ask("load", calfile) is not None
else:
    how = "measured"
    ok = ask("calibrate", opts=("--no-wait",)) is not None
end = time.monotonic() + 40
while ok and time.monotonic() < end:
    status = ask("status") or {}
    if status.get("state") == "open" and (status.get("modes") or 0) > 0:
        break
    time.sleep(0.2)
check(ok and status.get("state") == "open" and (status.get("modes") or 0) > 0,
      "calibration %s: %s modes" % (how, status.get("modes")))

# The server is up.
for _ in range(100):
    try:
        if http("/")[0] == 200:
            break
    except OSError:
        pass
    time.sleep(0.1)

# DevTools: the page target.
target = None
for _ in range(150):
    try:
        with urllib.request.urlopen("http://127.0.0.1:%s/json/list" % devtools,
                                    timeout=2) as r:
            pages = [t for t in json.load(r) if t.get("type") == "page"]
        if pages:
            target = pages[0]
            break
    except OSError:
        pass
    time.sleep(0.2)
check(target is not None, "headless chromium answers on DevTools")
if target is None:
    sys.exit(1)
ws = websocket.create_connection(target["webSocketDebuggerUrl"], timeout=30,
                                 suppress_origin=True)
msg_id = [0]
errors = []

def take(m):
    meth = m.get("method")
    p = m.get("params", {})
    if meth == "Runtime.exceptionThrown":
        errors.append("exception: %s" % json.dumps(p["exceptionDetails"])[:400])
    elif meth == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
        errors.append("console.%s: %s" % (p["type"], json.dumps(p["args"])[:400]))
    elif meth == "Log.entryAdded" and p["entry"].get("level") == "error":
        errors.append("log: %s %s" % (p["entry"].get("text"), p["entry"].get("url", "")))

def call(method, **params):
    msg_id[0] += 1
    ws.send(json.dumps({"id": msg_id[0], "method": method, "params": params}))
    while True:
        m = json.loads(ws.recv())
        if m.get("id") == msg_id[0]:
            if "error" in m:
                raise RuntimeError("%s: %s" % (method, m["error"]))
            return m.get("result", {})
        take(m)

def pump(seconds):
    end = time.time() + seconds
    ws.settimeout(0.2)
    while time.time() < end:
        try:
            take(json.loads(ws.recv()))
        except websocket.WebSocketTimeoutException:
            pass
    ws.settimeout(30)

def js(expr):
    r = call("Runtime.evaluate", expression=expr, returnByValue=True,
             awaitPromise=True)
    return r.get("result", {}).get("value")

call("Runtime.enable")
call("Log.enable")
call("Page.enable")
call("Emulation.setDeviceMetricsOverride", width=1400, height=1000,
     deviceScaleFactor=1, mobile=False)
call("Page.navigate", url=base + "/")
pump(4)
h1 = js("window.wtview ? window.wtview.histLen() : -1")
t1 = js("window.wtview ? window.wtview.ticks() : -1")
pump(2)
h2 = js("window.wtview.histLen()")
t2 = js("window.wtview.ticks()")
check(t2 is not None and t1 is not None and t2 > t1 >= 1,
      "ticks arrive (%s then %s)" % (t1, t2))
check(h2 is not None and h1 is not None and h2 > h1 > 0,
      "history grows (%s then %s points)" % (h1, h2))
check(js("window.wtview.hasFrame()") is True, "a frame record reached the page")
badge = js("document.getElementById('state').textContent")
check(badge == "open", "state badge shows open (%r)" % badge)
rms_open = shown_rms()

# Controls go through the server to the daemon's control socket.
js("document.querySelector('[data-request=close]').click()")
pump(1.5)
reply = js("document.getElementById('reply').textContent")
check(reply is not None and reply.startswith("close: ok"),
      "Close answered: %r" % reply)
state = (ask("status") or {}).get("state")
check(state == "closed", "the daemon's status says closed (%r)" % state)
js("document.getElementById('gain').value = '0.35';"
   "document.getElementById('set-gain').click()")
pump(1.5)
gain = (ask("get", "control.gain") or {}).get("value")
check(gain == 0.35, "the gain reached the daemon (get control.gain: %r)" % gain)
pump(3)
badge = js("document.getElementById('state').textContent")
check(badge == "closed", "state badge shows closed (%r)" % badge)
rms_closed = shown_rms()
check(rms_open is not None and rms_closed is not None and
      rms_closed < 0.5 * rms_open,
      "residual shown drops after close (%s px then %s px)" %
      (rms_open, rms_closed))

# The server's own checks; the daemon must come through them untouched.
code, body = http("/api/control", b"shutdown", {"X-Wavetrim-View": "1"})
check(code == 403 and b"not allowed" in body, "shutdown refused (%d)" % code)
code, _ = http("/api/control", b"set control.gain 1; shutdown",
               {"X-Wavetrim-View": "1"})
check(code == 403, "a value that is no number refused (%d)" % code)
code, _ = http("/api/control", b"open")
check(code == 403, "a POST without X-Wavetrim-View refused (%d)" % code)
code, _ = http("/", headers={"Host": "attacker.example:%s" % port})
check(code == 403, "a foreign Host header refused (%d)" % code)
status = ask("status") or {}
gain = (ask("get", "control.gain") or {}).get("value")
check(status.get("state") == "closed" and gain == 0.35,
      "refused words never reached the daemon (still %r, gain %r)" %
      (status.get("state"), gain))
code, png = http("/snapshot.png")
check(code == 200 and png[:8] == b"\x89PNG\r\n\x1a\n", "snapshot.png is a PNG")
code, svg = http("/snapshot.svg")
try:
    root = ET.fromstring(svg)
    ok = root.tag.endswith("svg")
except ET.ParseError:
    ok = False
check(code == 200 and ok, "snapshot.svg is well-formed SVG")

# Screenshot of the whole page, loop closed.
height = js("Math.ceil(document.documentElement.scrollHeight)") or 1000
call("Emulation.setDeviceMetricsOverride", width=1400, height=int(height),
     deviceScaleFactor=1, mobile=False)
pump(1)
data = call("Page.captureScreenshot", format="png")["data"]
with open(shot, "wb") as f:
    f.write(base64.b64decode(data))
print("screenshot: %s" % shot)
pump(0.5)
for e in errors:
    print("  " + e)
check(not errors, "no console errors or exceptions (%d)" % len(errors))
ws.close()
print("%d passed, %d failed" % (len(passed), len(failures)))
sys.exit(1 if failures else 0)
EOF
if [ "$rc" -ne 0 ]; then
	for f in sim daemon view; do
		echo "--- $f.log"; tail -n 30 "$tmp/$f.log"
	done
fi
exit "$rc"
