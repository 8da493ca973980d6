"""A webhook receiver on the loopback, as an intake form's server would run one (for the tests).

It verifies every delivery with its own implementation of the Standard Webhooks signature
(hmac + base64 over ``{webhook-id}.{webhook-timestamp}.{body}``, written from the convention's
text, not from sizewise's code), answers with the status codes it is scripted to give, and applies
each message's effect once: a message id it has already applied is acknowledged and ignored.
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import json
import threading
import time
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

# The convention's suggested tolerance against replays.
TOLERANCE_SECONDS = 5 * 60


def verify(secret: str, headers: dict[str, str], body: bytes) -> bool:
    """True when one of the ``v1,`` signatures matches and the timestamp is recent."""
    assert secret.startswith("whsec_"), secret
    key = base64.b64decode(secret[len("whsec_") :])
    message_id, timestamp = headers["webhook-id"], headers["webhook-timestamp"]
    if abs(time.time() - int(timestamp)) > TOLERANCE_SECONDS:
        return False
    signed = f"{message_id}.{timestamp}.".encode() + body
    expected = base64.b64encode(hmac.new(key, signed, hashlib.sha256).digest()).decode()
    candidates = [
        part.split(",", 1)[1]
        for part in headers["webhook-signature"].split(" ")
        if part.startswith("v1,")
    ]
    return any(hmac.compare_digest(expected, c) for c in candidates)


class Receiver:
    """A threading HTTP server on 127.0.0.1 that records, verifies and dedupes deliveries."""

    def __init__(self, codes: list[int] | None = None):
        self.codes = list(codes or [])  # answered in order; 204 once used up
        self.secret: str | None = None
        self.received: list[dict] = []
        self.effects: dict[str, dict] = {}  # webhook-id -> payload, applied once
        self.lock = threading.Lock()
        receiver = self

        class Handler(BaseHTTPRequestHandler):
            def do_POST(self):  # noqa: N802 - http.server's naming
                body = self.rfile.read(int(self.headers.get("Content-Length", 0)))
                receiver.handle(self, body)

            def log_message(self, *_args):
                pass

        self.server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
        self.thread = threading.Thread(target=self.server.serve_forever, daemon=True)

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self.server.server_address[1]}/hooks/sizewise"

    def handle(self, handler: BaseHTTPRequestHandler, body: bytes) -> None:
        headers = {k.lower(): v for k, v in handler.headers.items()}
        with self.lock:
            ok = self.secret is not None and verify(self.secret, headers, body)
            code = self.codes.pop(0) if self.codes else 204
            if not ok:
                code = 401
            self.received.append(
                {
                    "id": headers.get("webhook-id"),
                    "timestamp": headers.get("webhook-timestamp"),
                    "verified": ok,
                    "code": code,
                    "body": json.loads(body),
                    "path": handler.path,
                }
            )
            # The effect happens only with a success answer, and once per message id.
            if 200 <= code < 300 and headers["webhook-id"] not in self.effects:
                self.effects[headers["webhook-id"]] = json.loads(body)
        handler.send_response(code)
        handler.send_header("Content-Length", "0")
        handler.end_headers()

    def __enter__(self) -> Receiver:
        self.thread.start()
        return self

    def __exit__(self, *_exc) -> None:
        self.server.shutdown()
        self.server.server_close()
        self.thread.join(5)
