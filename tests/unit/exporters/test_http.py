"""The HTTP endpoint over real loopback sockets: /metrics, gzip, routes, stalled clients.

The last test has a real Prometheus server (Debian package ``prometheus``) scrape us, so
the gzip body (two gzip members: cached device part + fresh alert part) is read by Go's
decoder, not only by Python's.
"""

from __future__ import annotations

import gzip
import json
import socket
import subprocess
import time
import urllib.error
import urllib.request
from pathlib import Path

import pytest
from support.exposition_data import lab_assessment, lab_batch, ok_outcome
from support.procs import require_binary

from lightwarden.collector.readings import Quantity
from lightwarden.exporters.pages.http import HttpRequest, HttpServer, accepts_gzip
from lightwarden.exporters.prometheus.exposition import Exposition
from lightwarden.rules.findings import (
    AlertEvent,
    AlertKind,
    AlertSeverity,
    Condition,
    WindowSource,
)

TIMEOUT = 10.0  # bound on every client operation in these tests (not a speed check)


def _alert() -> AlertEvent:
    return AlertEvent(
        kind=AlertKind.OPEN, key="k1", sequence=1, alertname="OpticRxNearOverload",
        severity=AlertSeverity.WARNING, device="hg-core-1", port="sfp1", lane=1,
        quantity=Quantity.RX_POWER, condition=Condition.NEAR_OVERLOAD, value=-1.0, unit="dBm",
        edge_name="overload", edge_value=0.5, window_source=WindowSource.PMD_TABLE, margin_db=1.5,
        rate_per_day=None, summary="s", advice="a", caution="", starts_at=1.0,
    )  # fmt: skip


@pytest.fixture
def exposition() -> Exposition:
    exp = Exposition(margin_target_overload_db=3.0, margin_target_sensitivity_db=3.0)
    batch = lab_batch("hg-core-1")
    exp.update(ok_outcome(batch), lab_assessment(batch))
    exp.set_alert_source(lambda: [_alert()])
    return exp


@pytest.fixture
def server(exposition: Exposition):
    srv = HttpServer(exposition, port=0, socket_timeout=1.0, max_connections=8)
    srv.start()
    yield srv
    srv.stop()


def get(url: str, headers: dict[str, str] | None = None):
    req = urllib.request.Request(url, headers=headers or {})
    try:
        with urllib.request.urlopen(req, timeout=TIMEOUT) as resp:
            return resp.status, dict(resp.headers), resp.read()
    except urllib.error.HTTPError as err:
        return err.code, dict(err.headers), err.read()


def test_binds_loopback_ephemeral_port(server: HttpServer) -> None:
    assert server.host == "127.0.0.1"
    assert server.port > 0
    assert server.url == f"http://127.0.0.1:{server.port}"


def test_metrics_plain(server: HttpServer, exposition: Exposition) -> None:
    status, headers, body = get(server.url + "/metrics")
    assert status == 200
    assert headers["Content-Type"] == "text/plain; version=0.0.4; charset=utf-8"
    assert "Content-Encoding" not in headers
    assert body == exposition.body()
    assert b"lightwarden_alert_open{" in body


def test_metrics_gzip(server: HttpServer, exposition: Exposition) -> None:
    status, headers, body = get(server.url + "/metrics", {"Accept-Encoding": "gzip"})
    assert status == 200
    assert headers["Content-Encoding"] == "gzip"
    assert gzip.decompress(body) == exposition.body()


def test_openmetrics_request_gets_text(server: HttpServer) -> None:
    accept = "application/openmetrics-text;version=1.0.0,text/plain;version=0.0.4;q=0.5"
    status, headers, _ = get(server.url + "/metrics", {"Accept": accept})
    assert status == 200
    assert headers["Content-Type"].startswith("text/plain; version=0.0.4")


def test_accepts_gzip_header_parsing() -> None:
    # source: RFC 9110 section 12.5.3 (Accept-Encoding; q=0 means "not acceptable")
    assert accepts_gzip("gzip")
    assert accepts_gzip("deflate, gzip;q=0.5")
    assert accepts_gzip("*")
    assert not accepts_gzip("gzip;q=0")
    assert not accepts_gzip("identity")
    assert not accepts_gzip(None)


def test_healthz_routes_and_errors(server: HttpServer) -> None:
    assert get(server.url + "/healthz")[::2] == (200, b"ok\n")
    big = b"<p>Quillmoor Lab</p>" * 200

    def page(req: HttpRequest):
        assert req.query == {"sort": ["worst"]}
        return 200, "text/html; charset=utf-8", big

    def broken(_req: HttpRequest):
        raise RuntimeError("community=s3cret")

    server.add_route("/status", page)
    server.add_route("/broken", broken)
    status, headers, body = get(server.url + "/status?sort=worst", {"Accept-Encoding": "gzip"})
    assert (status, headers["Content-Encoding"], gzip.decompress(body)) == (200, "gzip", big)
    status, _, body = get(server.url + "/broken")
    assert status == 500 and b"s3cret" not in body
    assert get(server.url + "/nope")[0] == 404
    req = urllib.request.Request(server.url + "/metrics", data=b"x", method="POST")
    with pytest.raises(urllib.error.HTTPError) as err:
        urllib.request.urlopen(req, timeout=TIMEOUT)
    assert err.value.code == 405
    with pytest.raises(ValueError):
        server.add_route("/metrics", page)
    with pytest.raises(ValueError):
        server.add_route("status", page)


def test_stalled_clients_do_not_block_scrapes(server: HttpServer, exposition: Exposition) -> None:
    silent = socket.create_connection(("127.0.0.1", server.port), timeout=TIMEOUT)
    half = socket.create_connection(("127.0.0.1", server.port), timeout=TIMEOUT)
    half.sendall(b"GET /metrics HTTP/1.1\r\nHost: x\r\n")  # headers never finished
    try:
        status, _, body = get(server.url + "/metrics")
        assert status == 200 and body == exposition.body()
        # The server gives up on both after its socket timeout (1 s here): the sockets
        # see end-of-stream, well inside our bounded wait.
        for sock in (silent, half):
            sock.settimeout(TIMEOUT)
            assert sock.recv(4096) == b""
    finally:
        silent.close()
        half.close()


def test_connection_cap(exposition: Exposition) -> None:
    with HttpServer(exposition, socket_timeout=5.0, max_connections=1) as srv:
        hog = socket.create_connection(("127.0.0.1", srv.port), timeout=TIMEOUT)
        try:
            time.sleep(0.2)  # let the server take the first connection (not a speed check)
            extra = socket.create_connection(("127.0.0.1", srv.port), timeout=TIMEOUT)
            extra.sendall(b"GET /healthz HTTP/1.1\r\nHost: x\r\n\r\n")
            assert extra.recv(4096) == b""  # closed without an answer
            extra.close()
        finally:
            hog.close()
        # once the hog is gone the slot frees up again
        deadline = time.monotonic() + TIMEOUT
        while True:
            try:
                assert get(srv.url + "/healthz")[0] == 200
                break
            except (urllib.error.URLError, ConnectionError):
                if time.monotonic() > deadline:
                    raise


def test_stop_releases_port(exposition: Exposition) -> None:
    srv = HttpServer(exposition)
    port = srv.start()
    srv.stop()
    with socket.socket() as s:
        s.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        s.bind(("127.0.0.1", port))


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@pytest.mark.external
@pytest.mark.slow
def test_real_prometheus_scrapes_us(server: HttpServer, tmp_path: Path) -> None:
    binary = require_binary("prometheus", "prometheus")
    config = tmp_path / "prometheus.yml"
    config.write_text(
        "global: {scrape_interval: 1s, scrape_timeout: 1s}\n"
        "scrape_configs:\n"
        "  - job_name: lightwarden\n"
        f"    static_configs: [{{targets: ['127.0.0.1:{server.port}']}}]\n"
    )
    # Count gzip answers: Prometheus asks for gzip, so it must read our multi-member body.
    gzip_answers = []
    scrape = server.exposition.scrape

    def counting_scrape(compressed: bool = False) -> list[bytes]:
        gzip_answers.append(compressed)
        return scrape(compressed)

    server.exposition.scrape = counting_scrape
    web = _free_port()
    proc = subprocess.Popen(
        [binary, f"--config.file={config}", f"--storage.tsdb.path={tmp_path / 'data'}",
         f"--web.listen-address=127.0.0.1:{web}"],
        stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
    )  # fmt: skip
    try:
        deadline = time.monotonic() + 60
        result = None
        while time.monotonic() < deadline:
            time.sleep(0.5)
            try:
                q = 'lightwarden_alert_open or lightwarden_bias_amperes{port="sfp1"} or up'
                url = f"http://127.0.0.1:{web}/api/v1/query?query=" + urllib.parse.quote(q)
                with urllib.request.urlopen(url, timeout=TIMEOUT) as resp:
                    result = json.loads(resp.read())["data"]["result"]
            except (urllib.error.URLError, ConnectionError, KeyError):
                continue
            names = {r["metric"].get("__name__") for r in result}
            if {"lightwarden_alert_open", "lightwarden_bias_amperes"} <= names:
                break
        assert result is not None
        assert gzip_answers and all(gzip_answers)
        by_name = {r["metric"]["__name__"]: r for r in result}
        assert by_name["up"]["value"][1] == "1"
        assert by_name["lightwarden_alert_open"]["metric"]["alertname"] == "OpticRxNearOverload"
        # source: standards.md / SFF-8472 worked decode (verified): 0x1770 = 12.000 mA
        assert float(by_name["lightwarden_bias_amperes"]["value"][1]) == pytest.approx(0.012)
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=TIMEOUT)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(timeout=TIMEOUT)


def test_actions_answer_post_from_loopback_only(server: HttpServer) -> None:
    from lightwarden.exporters.pages.http import _is_loopback

    calls: list[str] = []
    server.add_post_route("/-/reload", lambda req: (calls.append(req.method) or
                                                    (200, "text/plain", b"done\n")))
    req = urllib.request.Request(server.url + "/-/reload", method="POST", data=b"x")
    with urllib.request.urlopen(req, timeout=TIMEOUT) as resp:
        assert resp.status == 200 and resp.read() == b"done\n"
    assert calls == ["POST"]
    assert get(server.url + "/-/reload")[0] == 404  # not a page
    bad = urllib.request.Request(server.url + "/metrics", method="POST", data=b"")
    with pytest.raises(urllib.error.HTTPError) as err:
        urllib.request.urlopen(bad, timeout=TIMEOUT)
    assert err.value.code == 405
    # the rule the handler applies to the peer's address
    assert _is_loopback("127.0.0.1") and _is_loopback("::1") and _is_loopback("::ffff:127.0.0.1")
    assert not _is_loopback("192.0.2.7") and not _is_loopback("::ffff:192.0.2.7")
    assert not _is_loopback("not-an-address")
