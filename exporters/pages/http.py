"""A small HTTP server for /metrics, /healthz and whatever pages the service mounts.

Built on the standard library's ``ThreadingHTTPServer``: one thread per connection, every
socket with a timeout, and a cap on connections served at once. A client that connects
and sends nothing ties up only its own thread, and only until the timeout; other scrapes
go on. Bodies are gzip-compressed when the client asks (``Accept-Encoding: gzip``).

Routes are plain callables, so the status page and JSON API plug in without subclassing::

    server.add_route("/status", lambda req: (200, "text/html; charset=utf-8", page_bytes))
"""

from __future__ import annotations

import gzip
import ipaddress
import logging
import socket
import threading
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from urllib.parse import parse_qs, urlsplit

from lightwarden.exporters.prometheus.exposition import CONTENT_TYPE, Exposition

log = logging.getLogger(__name__)

#: Bodies shorter than this go out uncompressed: gzip would not pay for its header.
GZIP_MIN_BYTES = 1024


@dataclass(slots=True, frozen=True)
class HttpRequest:
    """What a route handler sees of a request."""

    method: str  # "GET", "HEAD" or (actions) "POST"
    path: str  # without the query string
    query: Mapping[str, list[str]]
    headers: Mapping[str, str]


Response = tuple[int, str, bytes]  # (status, content type, body)
Handler = Callable[[HttpRequest], Response]


def accepts_gzip(accept_encoding: str | None) -> bool:
    """True when the Accept-Encoding header allows gzip (a ``q=0`` refuses it)."""
    if not accept_encoding:
        return False
    for item in accept_encoding.split(","):
        coding, _, params = item.strip().partition(";")
        if coding.strip().lower() not in ("gzip", "*"):
            continue
        q = 1.0
        for p in params.split(";"):
            k, _, v = p.strip().partition("=")
            if k.strip().lower() == "q":
                try:
                    q = float(v)
                except ValueError:
                    q = 0.0
        return q > 0.0
    return False


# What socketserver hands a server per connection (a TCP server gets the socket alone).
_Request = socket.socket | tuple[bytes, socket.socket]


class _Server(ThreadingHTTPServer):
    daemon_threads = True
    # SO_REUSEADDR lets a restarted service rebind at once; the port is ours alone.
    allow_reuse_address = True

    def __init__(self, addr: tuple[str, int], owner: HttpServer) -> None:
        self.owner = owner
        super().__init__(addr, _Handler)

    def process_request(self, request: _Request, client_address: tuple[str, int]) -> None:
        # Cap concurrent connections: past the cap, close at once instead of spawning
        # threads without bound for clients that may never send a byte.
        if not self.owner._slots.acquire(blocking=False):
            log.warning(
                "HTTP connection refused: %d connections already open", self.owner.max_connections
            )
            self.shutdown_request(request)
            return
        try:
            super().process_request(request, client_address)
        except Exception:
            self.owner._slots.release()
            raise

    def process_request_thread(
        self, request: _Request, client_address: tuple[str, int]
    ) -> None:
        try:
            super().process_request_thread(request, client_address)
        finally:
            self.owner._slots.release()

    def handle_error(self, request: _Request, client_address: tuple[str, int]) -> None:
        # The default prints a traceback to stderr; a dropped or timed-out client is
        # routine, and the details could echo request content.
        log.debug("HTTP connection from %s ended with an error", client_address[0])


class _Handler(BaseHTTPRequestHandler):
    server: _Server
    protocol_version = "HTTP/1.1"
    server_version = "lightwarden"
    sys_version = ""

    def setup(self) -> None:
        super().setup()
        # Socket timeout for every read and write on this connection; an idle keep-alive
        # connection also ends after it. Set on the socket rather than through the class
        # attribute ``timeout``, which every handler instance shares.
        self.connection.settimeout(self.server.owner.socket_timeout)

    def do_GET(self) -> None:
        self._serve(head=False)

    def do_HEAD(self) -> None:
        self._serve(head=True)

    def _method_not_allowed(self) -> None:
        self._send(
            405,
            "text/plain; charset=utf-8",
            b"method not allowed\n",
            head=False,
            extra={"Allow": "GET, HEAD"},
        )

    do_PUT = do_DELETE = do_PATCH = _method_not_allowed

    def do_POST(self) -> None:
        owner = self.server.owner
        path = urlsplit(self.path).path or "/"
        handler = owner.post_route(path)
        if handler is None:
            self._method_not_allowed()
            return
        # Actions (a reload) are for the machine's own operators: a listener on a
        # public address must not let the network trigger them.
        if not _is_loopback(self.client_address[0]):
            self._send(403, "text/plain; charset=utf-8", b"only from loopback\n", head=False)
            return
        length = int(self.headers.get("Content-Length") or 0)
        if length > 65536:
            self._send(413, "text/plain; charset=utf-8", b"body too large\n", head=False)
            self.close_connection = True
            return
        if length:
            self.rfile.read(length)  # no body is used; read it so keep-alive stays sane
        request = HttpRequest(method="POST", path=path, query={},
                              headers={k: v for k, v in self.headers.items()})
        try:
            status, ctype, body = handler(request)
        except Exception as exc:
            log.error("HTTP route %s failed: %s", path, type(exc).__name__)
            status, ctype, body = 500, "text/plain; charset=utf-8", b"internal error\n"
        self._send(status, ctype, body, head=False)

    def _serve(self, head: bool) -> None:
        owner = self.server.owner
        split = urlsplit(self.path)
        path = split.path or "/"
        gz_ok = accepts_gzip(self.headers.get("Accept-Encoding"))
        if path == owner.metrics_path and owner.exposition is not None:
            exp = owner.exposition
            # The client may ask for OpenMetrics; we always answer in text 0.0.4, which
            # every Prometheus accepts and which promtool can lint.
            self._send(200, CONTENT_TYPE, exp.scrape(compressed=gz_ok), head, gzipped=gz_ok)
            return
        handler = owner.route(path)
        if handler is None:
            self._send(404, "text/plain; charset=utf-8", b"not found\n", head)
            return
        request = HttpRequest(
            method="HEAD" if head else "GET",
            path=path,
            query=parse_qs(split.query),
            headers={k: v for k, v in self.headers.items()},
        )
        try:
            status, ctype, body = handler(request)
        except Exception as exc:
            # Log the kind, not the message: handler errors may quote request content.
            log.error("HTTP route %s failed: %s", path, type(exc).__name__)
            status, ctype, body = 500, "text/plain; charset=utf-8", b"internal error\n"
        if gz_ok and len(body) >= GZIP_MIN_BYTES:
            self._send(
                status, ctype, gzip.compress(body, compresslevel=6, mtime=0), head, gzipped=True
            )
        else:
            self._send(status, ctype, body, head)

    def _send(
        self,
        status: int,
        ctype: str,
        body: bytes | list[bytes],
        head: bool,
        gzipped: bool = False,
        extra: Mapping[str, str] | None = None,
    ) -> None:
        self.send_response(status)
        self.send_header("Content-Type", ctype)
        parts = [body] if isinstance(body, bytes) else body
        self.send_header("Content-Length", str(sum(len(p) for p in parts)))
        if gzipped:
            self.send_header("Content-Encoding", "gzip")
        self.send_header("Vary", "Accept-Encoding")
        self.send_header("Cache-Control", "no-store")
        self.send_header("X-Content-Type-Options", "nosniff")
        for k, v in (extra or {}).items():
            self.send_header(k, v)
        self.end_headers()
        if not head:
            try:
                for p in parts:
                    self.wfile.write(p)
            except (TimeoutError, BrokenPipeError, ConnectionResetError):
                self.close_connection = True

    def log_message(self, format: str, *args: object) -> None:
        # Path only (never the query string: it may carry tokens), at debug level.
        log.debug("HTTP %s %s", self.command, urlsplit(self.path).path)

    def log_request(self, code: int | str = "-", size: int | str = "-") -> None:
        log.debug("HTTP %s %s -> %s", self.command, urlsplit(self.path).path, code)


def _is_loopback(host: str) -> bool:
    try:
        addr = ipaddress.ip_address(host)
    except ValueError:
        return False
    mapped = getattr(addr, "ipv4_mapped", None)
    return bool(addr.is_loopback or (mapped is not None and mapped.is_loopback))


def _healthz(_req: HttpRequest) -> Response:
    return 200, "text/plain; charset=utf-8", b"ok\n"


class HttpServer:
    """The lightwarden HTTP endpoint, serving in a background thread.

    ``port=0`` binds an ephemeral port; :meth:`start` returns the port actually bound.
    """

    def __init__(
        self,
        exposition: Exposition | None = None,
        *,
        host: str = "127.0.0.1",
        port: int = 0,
        metrics_path: str = "/metrics",
        socket_timeout: float = 10.0,
        max_connections: int = 64,
    ) -> None:
        self.exposition = exposition
        self.host = host
        self.port = port
        self.metrics_path = metrics_path
        self.socket_timeout = socket_timeout
        self.max_connections = max_connections
        self._slots = threading.BoundedSemaphore(max_connections)
        self._routes: dict[str, Handler] = {"/healthz": _healthz}
        self._post_routes: dict[str, Handler] = {}
        self._routes_lock = threading.Lock()
        self._server: _Server | None = None
        self._thread: threading.Thread | None = None

    def add_route(self, path: str, handler: Handler) -> None:
        """Serve ``handler(request) -> (status, content_type, body)`` at exactly ``path``."""
        if not path.startswith("/"):
            raise ValueError(f"route path must start with '/': {path!r}")
        if path == self.metrics_path:
            raise ValueError(f"{path} is the metrics path")
        with self._routes_lock:
            self._routes[path] = handler

    def add_post_route(self, path: str, handler: Handler) -> None:
        """An action answered to POST from loopback only (403 from anywhere else)."""
        if not path.startswith("/"):
            raise ValueError(f"route path must start with '/': {path!r}")
        with self._routes_lock:
            self._post_routes[path] = handler

    def post_route(self, path: str) -> Handler | None:
        with self._routes_lock:
            return self._post_routes.get(path)

    def route(self, path: str) -> Handler | None:
        with self._routes_lock:
            return self._routes.get(path)

    def start(self) -> int:
        """Bind and serve in a daemon thread. Returns the bound port."""
        if self._server is not None:
            return self.port
        try:
            self._server = _Server((self.host, self.port), self)
        except OSError as exc:
            raise OSError(
                f"cannot listen for HTTP on {self.host}:{self.port}: {exc.strerror or exc}"
            ) from None
        self.port = int(self._server.server_address[1])
        self._thread = threading.Thread(
            target=self._server.serve_forever,
            kwargs={"poll_interval": 0.2},
            name=f"lightwarden-http-{self.port}",
            daemon=True,
        )
        self._thread.start()
        log.info("serving HTTP on %s:%d", self.host, self.port)
        return self.port

    @property
    def url(self) -> str:
        return f"http://{self.host}:{self.port}"

    def stop(self) -> None:
        """Stop accepting, close the listening socket, wait for the serving thread."""
        server, self._server = self._server, None
        if server is None:
            return
        server.shutdown()
        server.server_close()
        if self._thread is not None:
            self._thread.join(timeout=5.0)
            self._thread = None

    def __enter__(self) -> HttpServer:
        self.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()
