#!/usr/bin/env bash
# Browser test of wavetrim-view against the real simulator and daemon:
# wavetrim-sim and wavetrimd run the demo scenario (config/demo.ini, with
# private ipc endpoints, geometric spots and short calibration averages for
# speed), a calibration is loaded (the e2e fixture's file when it exists,
# else measured), and the page is loaded in Debian's headless Chromium over
# the DevTools protocol.  Checks: the page loads with no console error or
# exception, the history grows, the frame panels get data, the Close button
# closes the daemon's loop (state badge and `status`), the gain field reaches
# the daemon (`get control.gain`), the residual slopes and the wavefront RMS
# shown drop after close, the sensor image panel receives images, the
# latency histogram fills, the server refuses words the page may not send
# (and the daemon keeps running), a cross-site POST and a foreign Host
# header, and the snapshots (the server's and `wavetrim snapshot`'s) decode
# with a PNG reader written here on python3's zlib (every filter type,
# CRCs) to the expected size with every panel, and parse as SVG with a
# group per panel.
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
# frames per poke so that a calibration, when one is needed, takes seconds;
# a driver timeout of 10 s, since a loaded machine can starve the
# simulator for more than the demo's second (this test is about the view,
# not about faults).
sed -e "s|^frames *=.*|frames = ipc://$tmp/frames|" \
	-e "s|^commands *=.*|commands = ipc://$tmp/commands|" \
	-e "s|^control *=.*|control = ipc://$tmp/control|" \
	-e "s|^telemetry *=.*|telemetry = ipc://$tmp/telemetry|" \
	-e "s|^truth *=.*|truth = ipc://$tmp/truth|" \
	-e "s|^spot_model *=.*|spot_model = geometric|" \
	-e "s|^average *=.*|average = 2|" \
	-e "s|^timeout_ms *=.*|timeout_ms = 10000|" \
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
	"$out/view_screenshot.png" "$tmp" <<'EOF' || rc=$?
import base64, json, os, struct, subprocess, sys, time, zlib
import urllib.error, urllib.request
import xml.etree.ElementTree as ET
import websocket

port, devtools, cli, ini, calfile, shot, tmp = sys.argv[1:8]
# The snapshot's layout (lib/wt_draw.c): 4 x 2 panels of 408 x 384 under a
# 56-pixel header, 8 pixels apart; panel paper white on a pale ground.
SNAP_W, SNAP_H = 1672, 848
PANELS = ["image", "slopes", "wavefront", "command", "history", "latency",
          "sv", "actuators"]

def png_decode(data):
    """A PNG reader (ISO/IEC 15948) on zlib: 8-bit RGB or RGBA, every
    filter type; returns (width, height, channels, rows of bytes)."""
    assert data[:8] == b"\x89PNG\r\n\x1a\n", "PNG signature"
    pos, idat, ihdr = 8, b"", None
    while pos < len(data):
        n, kind = struct.unpack(">I4s", data[pos:pos + 8])
        body = data[pos + 8:pos + 8 + n]
        crc, = struct.unpack(">I", data[pos + 8 + n:pos + 12 + n])
        assert zlib.crc32(kind + body) == crc, "CRC of %r" % kind
        if kind == b"IHDR":
            ihdr = struct.unpack(">IIBBBBB", body)
        elif kind == b"IDAT":
            idat += body
        elif kind == b"IEND":
            break
        pos += 12 + n
    w, h, depth, ctype, comp, filt, inter = ihdr
    assert depth == 8 and ctype in (2, 6) and inter == 0, ihdr
    ch = 3 if ctype == 2 else 4
    raw = zlib.decompress(idat)
    stride = w * ch
    assert len(raw) == h * (stride + 1), "image data length"
    rows, prev = [], bytearray(stride)
    for y in range(h):
        f = raw[y * (stride + 1)]
        line = bytearray(raw[y * (stride + 1) + 1:(y + 1) * (stride + 1)])
        assert 0 <= f <= 4, "filter type %d" % f
        for i in range(stride if f else 0):
            a = line[i - ch] if i >= ch else 0
            b = prev[i]
            c = prev[i - ch] if i >= ch else 0
            if f == 1:
                line[i] = (line[i] + a) & 255
            elif f == 2:
                line[i] = (line[i] + b) & 255
            elif f == 3:
                line[i] = (line[i] + (a + b) // 2) & 255
            elif f == 4:
                p = a + b - c
                pa, pb, pc = abs(p - a), abs(p - b), abs(p - c)
                pr = a if pa <= pb and pa <= pc else (b if pb <= pc else c)
                line[i] = (line[i] + pr) & 255
        rows.append(bytes(line))
        prev = line
    return w, h, ch, rows

def check_png(data, what, image=True):
    try:
        w, h, ch, rows = png_decode(data)
    except (AssertionError, zlib.error, struct.error, TypeError) as e:
        check(False, "%s decodes (%s)" % (what, e))
        return
    check((w, h) == (SNAP_W, SNAP_H), "%s decodes, %dx%d" % (what, w, h))
    px = lambda x, y: tuple(rows[y][x * ch:x * ch + 3])
    # Each panel: white paper inside its frame, ground between panels.
    papers = [px(8 + (k % 4) * 416 + 4, 64 + (k // 4) * 392 + 4)
              for k in range(8)]
    check(all(p == (255, 255, 255) for p in papers) and
          px(4, 100) == (0xec, 0xef, 0xf1),
          "%s has the 8 panels on their ground" % what)
    if image:
        # The sensor image's map area: colours, not paper.
        area = [px(8 + 12 + x, 64 + 40 + y) for x in range(20, 300, 37)
                for y in range(20, 300, 37)]
        check(sum(p != (255, 255, 255) for p in area) > len(area) // 2,
              "%s shows the sensor image" % what)

def check_svg(data, what):
    try:
        root = ET.fromstring(data)
    except ET.ParseError as e:
        check(False, "%s parses as XML (%s)" % (what, e))
        return
    ns = "{http://www.w3.org/2000/svg}"
    ids = {g.get("id") for g in root.iter(ns + "g")}
    missing = [p for p in PANELS if "panel-" + p not in ids]
    check(root.tag == ns + "svg" and root.get("width") == str(SNAP_W) and
          not missing, "%s is SVG %sx%s with every panel's group (missing %s)"
          % (what, root.get("width"), root.get("height"), missing))
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

def shown(field):
    """The first number of a stats field as the page shows it (None if
    none yet): s-rms the residual slopes RMS in px, s-wf the wavefront RMS
    in nm."""
    # "n/a" while a status period held no frame (a slow machine): retry.
    for _ in range(20):
        text = js("document.getElementById('%s').textContent" % field) or ""
        try:
            return float(text.split()[0])
        except (ValueError, IndexError):
            pump(0.5)
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
end = time.monotonic() + 150  # a loaded machine runs the simulator slowly
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
# A loaded machine may take longer to bring the page up: wait for the
# first history points (the server's "hello") before comparing.
for _ in range(40):
    if (js("window.wtview ? window.wtview.histLen() : 0") or 0) > 0:
        break
    pump(0.5)
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
i1, f1 = js("window.wtview.images()"), js("window.wtview.imageFrame()")
pump(1.5)
i2, f2 = js("window.wtview.images()"), js("window.wtview.imageFrame()")
check(i1 is not None and i2 > i1 >= 1 and f2 != f1,
      "sensor images reach the page (%s then %s, frames %s, %s)" %
      (i1, i2, f1, f2))
check((js("window.wtview.latencyRecords()") or 0) > 0,
      "the latency histogram fills (%s records)" %
      js("window.wtview.latencyRecords()"))
if how == "measured":
    # The calibration event came while the view ran: its report's flags.
    kinds = js("window.wtview.flagKinds()")
    check(isinstance(kinds, list) and "weak" in kinds,
          "the actuator flags panel has the report's kinds (%r)" % kinds)
cap = js("document.getElementById('cap-image').textContent") or ""
check("of the 256\u00d7256 px sensor" in cap, "image caption: %r" % cap)
rms_open = shown("s-rms")
wf_open = shown("s-wf")

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
rms_closed = shown("s-rms")
check(rms_open is not None and rms_closed is not None and
      rms_closed < 0.5 * rms_open,
      "residual shown drops after close (%s px then %s px)" %
      (rms_open, rms_closed))
wf_closed = shown("s-wf")
check(wf_open is not None and wf_closed is not None and
      wf_closed < 0.5 * wf_open,
      "wavefront RMS shown drops after close: it flattens (%s nm then %s nm)"
      % (wf_open, wf_closed))

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
check(code == 200, "GET /snapshot.png (%d)" % code)
check_png(png, "the server's snapshot.png")
code, svg = http("/snapshot.svg")
check(code == 200, "GET /snapshot.svg (%d)" % code)
check_svg(svg, "the server's snapshot.svg")
for ext in ("png", "svg"):
    path = os.path.join(tmp, "cli-snapshot." + ext)
    r = subprocess.run([cli, "-c", ini, "snapshot", path],
                       capture_output=True, text=True, timeout=30)
    check(r.returncode == 0 and "and a sensor image" in r.stdout,
          "wavetrim snapshot %s: %s%s" % (ext, r.stdout.strip(),
                                          r.stderr.strip()))
    if r.returncode == 0:
        with open(path, "rb") as f:
            (check_png if ext == "png" else check_svg)(
                f.read(), "wavetrim snapshot's ." + ext)

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
