#!/usr/bin/env bash
# Browser test of wavetrim-view: the server fed by a stand-in publisher
# (tools/view/standin.py: status, event and frame messages in the formats of
# lib/wt_request.h, truth records of sim/sim_driver.h), the page loaded in
# Debian's headless Chromium over the DevTools protocol.  Checks: the page
# loads with no console error or exception, the history grows, the frame
# panels get data, the Close button and the gain field reach the "daemon"
# through the server, the server refuses words the page may not send, a
# cross-site POST and a foreign Host header, and the snapshots decode.
# Saves a screenshot of the page.
#
# usage: test_view.sh VIEW_BINARY [SOURCE_DIR] [OUTPUT_DIR]
# Exit 77 (skipped) when chromium or python3-websocket is missing.
set -euo pipefail

view=$1
src=${2:-$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)}
out=${3:-$PWD}
py=/usr/bin/python3
chromium=/usr/bin/chromium

for need in "$view" "$py" "$chromium"; do
	if [ ! -x "$need" ]; then
		echo "test_view: skipped: $need not found (apt-get install chromium)"
		exit 77
	fi
done
if ! "$py" -c 'import websocket, zmq' 2>/dev/null; then
	echo "test_view: skipped: python3-websocket or python3-zmq missing"
	exit 77
fi

tmp=$(mktemp -d)
pids=()
cleanup() {
	for p in "${pids[@]}"; do
		kill "$p" 2>/dev/null || true
	done
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

cat >"$tmp/view.ini" <<EOF
[sensor]
focal_length_mm = 2.0
min_flux = 500
[daemon]
control = ipc://$tmp/control
telemetry = ipc://$tmp/telemetry
[sim]
truth = ipc://$tmp/truth
EOF

"$view" -c "$tmp/view.ini" --listen "127.0.0.1:$port" >"$tmp/view.log" 2>&1 &
pids+=($!)
"$py" "$src/tools/view/standin.py" -c "$tmp/view.ini" \
	--setup "http://127.0.0.1:$port/api/setup" --seconds 120 \
	--log "$tmp/requests.log" >"$tmp/standin.log" 2>&1 &
pids+=($!)
"$chromium" --headless --no-sandbox --disable-gpu --disable-quic \
	--no-first-run --disable-background-networking \
	--disable-component-update --disable-sync \
	--user-data-dir="$tmp/chromium" --remote-debugging-address=127.0.0.1 \
	--remote-debugging-port="$devtools" --remote-allow-origins='*' \
	--window-size=1400,1000 about:blank >"$tmp/chromium.log" 2>&1 &
pids+=($!)

rc=0
"$py" - "$port" "$devtools" "$tmp/requests.log" "$out/view_screenshot.png" <<'EOF' || rc=$?
import base64, json, sys, time, urllib.error, urllib.request
import xml.etree.ElementTree as ET
import websocket

port, devtools, reqlog, shot = sys.argv[1], sys.argv[2], sys.argv[3], sys.argv[4]
base = "http://127.0.0.1:%s" % port
failures = []
passed = []

def check(cond, what):
    print(("ok   " if cond else "FAIL ") + what)
    (passed if cond else failures).append(what)

def http(path, data=None, headers=None):
    req = urllib.request.Request(base + path, data=data, headers=headers or {})
    try:
        with urllib.request.urlopen(req, timeout=10) as r:
            return r.status, r.read()
    except urllib.error.HTTPError as e:
        return e.code, e.read()

# The server is up and the stand-in publishes.
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

# Controls go through the server to the daemon's control socket.
js("document.querySelector('[data-request=close]').click()")
pump(1.5)
reply = js("document.getElementById('reply').textContent")
check(reply is not None and reply.startswith("close: ok"),
      "Close answered: %r" % reply)
js("document.getElementById('gain').value = '0.35';"
   "document.getElementById('set-gain').click()")
pump(1.5)
with open(reqlog) as f:
    lines = [l.strip() for l in f]
check("close" in lines, "the daemon received 'close'")
check("set control.gain 0.35" in lines, "the daemon received the gain")
pump(3)
badge = js("document.getElementById('state').textContent")
check(badge == "closed", "state badge shows closed (%r)" % badge)

# The server's own checks.
code, body = http("/api/control", b"shutdown", {"X-Wavetrim-View": "1"})
check(code == 403 and b"not allowed" in body, "shutdown refused (%d)" % code)
code, _ = http("/api/control", b"set control.gain 1; shutdown",
               {"X-Wavetrim-View": "1"})
check(code == 403, "a value that is no number refused (%d)" % code)
code, _ = http("/api/control", b"open")
check(code == 403, "a POST without X-Wavetrim-View refused (%d)" % code)
code, _ = http("/", headers={"Host": "attacker.example:%s" % port})
check(code == 403, "a foreign Host header refused (%d)" % code)
check("shutdown" not in lines and "set control.gain 1; shutdown" not in lines,
      "refused words never reached the daemon")
code, png = http("/snapshot.png")
check(code == 200 and png[:8] == b"\x89PNG\r\n\x1a\n", "snapshot.png is a PNG")
code, svg = http("/snapshot.svg")
try:
    root = ET.fromstring(svg)
    ok = root.tag.endswith("svg")
except ET.ParseError:
    ok = False
check(code == 200 and ok, "snapshot.svg is well-formed SVG")

# Screenshot of the whole page.
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
	echo "--- view.log"; cat "$tmp/view.log"
	echo "--- standin.log"; cat "$tmp/standin.log"
fi
exit "$rc"
