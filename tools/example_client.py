#!/usr/bin/python3
"""Drive a running wavetrimd: send status, open and close, print a few
telemetry status messages (needs Debian's python3-zmq: run /usr/bin/python3).
Control: REQ/REP, a line of words out, a JSON object with "ok" back.
Telemetry: PUB, "status {json}", "event {json}", "frame <binary>".  Exit 0
when every reply was well formed (refusals are), 1 if not, 2 on no answer.
Over tcp to a daemon with CURVE keys: --server-key FILE (its public key)
--client-key PREFIX (our pair, PREFIX.key, made by `wavetrim keygen`)."""
import argparse
import configparser
import json
import sys

import zmq


def endpoints(args):
    ini = configparser.ConfigParser(inline_comment_prefixes=(";",),
                                    interpolation=None, strict=False)
    if args.config:
        with open(args.config, encoding="utf-8") as f:
            ini.read_file(f)
    # Defaults as in the option table (lib/wt_options.def, [daemon]).
    control, telemetry = (ini.get("daemon", k, fallback="ipc:///tmp/wavetrim/"
                                  + k) for k in ("control", "telemetry"))
    return args.control or control, args.telemetry or telemetry


def read_key(path):
    """The one Z85 key in a key file: a line whose first word is 40
    characters; blank lines and '#' comments are skipped."""
    keys = []
    with open(path, encoding="ascii") as f:
        for line in f:
            words = line.split()
            if words and len(words[0]) == 40:
                keys.append(words[0])
            elif words and not words[0].startswith("#"):
                raise SystemExit(f"{path}: not a key file")
    if len(keys) != 1:
        raise SystemExit(f"{path}: holds {len(keys)} keys, want one")
    return keys[0].encode("ascii")


def use_keys(sock, endpoint, args):
    """CURVE client on every transport but ipc and inproc (as the daemon)."""
    if not (args.server_key or args.client_key):
        return
    if not (args.server_key and args.client_key):
        raise SystemExit("CURVE needs both --server-key and --client-key")
    if endpoint.startswith(("ipc://", "inproc://")):
        return
    path = args.client_key
    secret = read_key(path if path.endswith(".key") else path + ".key")
    sock.curve_secretkey = secret
    sock.curve_publickey = zmq.curve_public(secret)
    sock.curve_serverkey = read_key(args.server_key)


def as_object(raw):
    try:
        value = json.loads(raw)
    except ValueError:
        return None
    return value if isinstance(value, dict) else None


def main():
    p = argparse.ArgumentParser(description="wavetrimd example client")
    p.add_argument("control", nargs="?", help="control endpoint (REP)")
    p.add_argument("-t", "--telemetry", help="telemetry endpoint (PUB)")
    p.add_argument("-c", "--config", help="INI file: [daemon] endpoints")
    p.add_argument("-n", "--count", type=int, default=3, help="statuses")
    p.add_argument("-w", "--timeout-ms", type=int, default=5000)
    p.add_argument("--server-key", help="the daemon's CURVE public key file")
    p.add_argument("--client-key", help="our CURVE key pair: PREFIX(.key)")
    args = p.parse_args()
    control, telemetry = endpoints(args)
    bad, wait = 0, args.timeout_ms
    with zmq.Context() as ctx, ctx.socket(zmq.SUB) as sub, \
            ctx.socket(zmq.REQ) as req:
        for sock in (sub, req):
            sock.linger, sock.rcvtimeo = 0, wait  # never hang on exit
        use_keys(sub, telemetry, args)
        use_keys(req, control, args)
        sub.subscribe("status ")  # topic = the text before the first space
        sub.connect(telemetry)  # first, so that statuses queue meanwhile
        req.connect(control)
        for line in ("status", "open", "close"):
            req.send_string(line)
            try:
                raw = req.recv()
            except zmq.Again:  # this REQ socket is stuck now: give up
                print(f"{line}: no reply from {control} in {wait} ms")
                return 2
            reply = as_object(raw)
            if reply is None or "ok" not in reply:
                print(f"{line}: malformed reply: {raw[:200]!r}")
                bad += 1
                continue
            print(f"{line}:", *(f"{k}={json.dumps(reply[k])}" for k in
                                ("ok", "result", "error") if k in reply))
        for _ in range(args.count):
            try:
                status = as_object(sub.recv().partition(b" ")[2])
            except zmq.Again:
                print(f"no status from {telemetry} in {wait} ms")
                return 2
            bad += status is None
            print("status:", "malformed" if status is None else " ".join(
                f"{k}={status.get(k)}" for k in ("state", "frames")))
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
