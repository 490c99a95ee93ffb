"""Alert events and a loopback HTTP receiver shared by the alert delivery tests."""

from __future__ import annotations

import json
import threading
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

from lightwarden.collector.readings import Quantity
from lightwarden.rules.findings import (
    AlertEvent,
    AlertKind,
    AlertSeverity,
    Condition,
    WindowSource,
)

CAUTION = (
    "Never look into a fibre end or an open port (infrared light is invisible); inspect "
    "with a video scope; disable the transmitter or cap the port before handling; follow "
    "local codes and site laser-safety procedures."
)


def make_event(
    kind: AlertKind | str = AlertKind.OPEN,
    sequence: int = 1,
    key: str = "hg-core-01/sfp7/0/rx_power/OpticRxNearOverload",
    at: float = 1_700_000_000.0,
    **over,
) -> AlertEvent:
    """An event about a fictional Quillmoor Lab optic (``kind`` may be given as its word)."""
    kind = AlertKind(kind)
    fields = dict(
        kind=kind,
        key=key,
        sequence=sequence,
        alertname="OpticRxNearOverload",
        severity=AlertSeverity.WARNING,
        device="hg-core-01",
        port="sfp7",
        lane=0,
        quantity=Quantity.RX_POWER,
        condition=Condition.NEAR_OVERLOAD,
        value=-0.4,
        unit="dBm",
        edge_name="overload",
        edge_value=0.5,
        window_source=WindowSource.MODULE,
        margin_db=0.9,
        rate_per_day=0.05,
        summary="Rx on hg-core-01 sfp7 is 0.9 dB from overload",
        advice="Fit a 5 dB attenuator (pad) at the receiver.",
        caution=CAUTION,
        starts_at=at - 60 * (sequence - 1),
        ends_at=at if kind is AlertKind.RESOLVE else None,
        at=at,
    )
    fields.update(over)
    return AlertEvent(**fields)


class Receiver:
    """A stdlib HTTP server on loopback recording every POST (headers, raw body).

    ``status`` is what it answers (set 503 to simulate a receiver in trouble); ``down()``
    closes the socket (connection refused) and ``up()`` reopens on the same port.
    """

    def __init__(self) -> None:
        self.requests: list[tuple[dict[str, str], bytes]] = []
        self.status = 200
        self.attempts = 0  # every POST seen, accepted or not
        self._lock = threading.Lock()
        self.port = 0
        self._server: ThreadingHTTPServer | None = None
        self.up()

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self.port}/hook"

    def _handler(self):
        rec = self

        class H(BaseHTTPRequestHandler):
            def do_POST(self) -> None:
                n = int(self.headers.get("Content-Length") or 0)
                body = self.rfile.read(n)
                with rec._lock:
                    rec.attempts += 1
                    status = rec.status
                    if 200 <= status < 300:
                        rec.requests.append((dict(self.headers.items()), body))
                self.send_response(status)
                self.send_header("Content-Length", "0")
                self.end_headers()

            def log_message(self, *args) -> None:
                pass

        return H

    def up(self) -> None:
        self._server = ThreadingHTTPServer(("127.0.0.1", self.port), self._handler())
        self.port = self._server.server_address[1]
        threading.Thread(target=self._server.serve_forever, daemon=True).start()

    def down(self) -> None:
        if self._server is not None:
            self._server.shutdown()
            self._server.server_close()
            self._server = None

    def bodies(self) -> list[dict]:
        with self._lock:
            return [json.loads(b) for _, b in self.requests]

    def seen(self) -> int:
        with self._lock:
            return self.attempts
