"""A real SMTP server for turnbook's delivery tests (aiosmtpd on loopback).

Usage: python3 smtp_sink.py PORT OUTDIR
Each accepted message is written as OUTDIR/<n>.eml with OUTDIR/<n>.json holding the
envelope (sender, recipients). Prints "ready" once listening; stops when stdin closes
or on SIGTERM.
"""
import json
import os
import signal
import sys
import threading
import uuid

from aiosmtpd.controller import Controller


class Sink:
    def __init__(self, outdir):
        self.outdir = outdir
        self.lock = threading.Lock()

    async def handle_DATA(self, server, session, envelope):
        name = uuid.uuid4().hex
        with self.lock:
            base = os.path.join(self.outdir, name)
            with open(base + ".eml.tmp", "wb") as f:
                f.write(envelope.original_content or envelope.content)
            with open(base + ".json", "w") as f:
                json.dump({"from": envelope.mail_from, "to": envelope.rcpt_tos}, f)
            os.rename(base + ".eml.tmp", base + ".eml")
        return "250 2.0.0 stored as " + name


def main():
    port = int(sys.argv[1])
    outdir = sys.argv[2]
    os.makedirs(outdir, exist_ok=True)
    controller = Controller(Sink(outdir), hostname="127.0.0.1", port=port)
    controller.start()
    stop = threading.Event()
    signal.signal(signal.SIGTERM, lambda *_: stop.set())
    print("ready", flush=True)

    def wait_stdin():
        sys.stdin.read()
        stop.set()

    threading.Thread(target=wait_stdin, daemon=True).start()
    stop.wait()
    controller.stop()


if __name__ == "__main__":
    main()
