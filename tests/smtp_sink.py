"""A real SMTP server for turnbook's delivery tests (aiosmtpd on loopback).

Usage: python3 smtp_sink.py PORT OUTDIR [USER:PASSWORD]
Each accepted message is written as OUTDIR/<n>.eml with OUTDIR/<n>.json holding the
envelope (sender, recipients, the login that sent it). With USER:PASSWORD the server
requires AUTH (PLAIN or LOGIN, allowed without TLS on loopback) and accepts only that
pair. Prints "ready" once listening; stops when stdin closes or on SIGTERM.
"""
import json
import os
import signal
import sys
import threading
import uuid

from aiosmtpd.controller import Controller
from aiosmtpd.smtp import AuthResult, LoginPassword


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
                login = session.auth_data if isinstance(session.auth_data, str) else None
                json.dump(
                    {"from": envelope.mail_from, "to": envelope.rcpt_tos, "login": login}, f
                )
            os.rename(base + ".eml.tmp", base + ".eml")
        return "250 2.0.0 stored as " + name


class Authenticator:
    def __init__(self, user, password):
        self.user = user.encode("utf-8")
        self.password = password.encode("utf-8")

    def __call__(self, server, session, envelope, mechanism, auth_data):
        ok = (
            isinstance(auth_data, LoginPassword)
            and auth_data.login == self.user
            and auth_data.password == self.password
        )
        login = auth_data.login.decode("utf-8", "replace") if ok else None
        return AuthResult(success=ok, handled=False, auth_data=login)


def main():
    port = int(sys.argv[1])
    outdir = sys.argv[2]
    os.makedirs(outdir, exist_ok=True)
    options = {}
    if len(sys.argv) > 3:
        user, password = sys.argv[3].split(":", 1)
        options = {
            "authenticator": Authenticator(user, password),
            "auth_required": True,
            "auth_require_tls": False,
        }
    controller = Controller(Sink(outdir), hostname="127.0.0.1", port=port, **options)
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
