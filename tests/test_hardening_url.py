"""Issue #14, item 7: the URL source tightened — allow-list entries that pin scheme,
host, port and path prefix; --https-only; a custom CA bundle; and a forecast whose
``generated`` lies in the future refused instead of passing every ``maxAge``."""

from __future__ import annotations

import datetime as dt
import http.server
import ipaddress
import json
import ssl
import threading
from collections.abc import Iterator
from pathlib import Path

import pandas as pd
import pytest
from cryptography import x509
from cryptography.hazmat.primitives import hashes, serialization
from cryptography.hazmat.primitives.asymmetric import ec
from cryptography.x509.oid import NameOID
from test_reconcile import NOW, cond, forecast, hpa, observed

from floorcast.controller.decide import decide
from floorcast.controller.settings import Settings, parse_url_rule
from floorcast.controller.state import ForecastState
from floorcast.errors import InputError
from floorcast.sources.http import forecast_from_url


def refusal(url: str, *hosts: str, https_only: bool = False) -> str | None:
    return Settings(allowed_url_hosts=hosts, https_only=https_only).url_refusal(url)


def test_a_bare_host_allows_that_host_only_as_before():
    assert refusal("http://fc.example:9999/any/path", "fc.example") is None
    why = refusal("https://x.example/", "fc.example")
    assert why is not None and "not in the operator's --allow-url-host list" in why


@pytest.mark.parametrize(("url", "ok"), [
    ("https://fc.example/shop/web.json", True),
    ("https://fc.example:443/shop/web.json", True),     # the default port, written out
    ("https://FC.example/shop", True),
    ("http://fc.example/shop/web.json", False),         # scheme pinned
    ("https://fc.example:8443/shop/web.json", False),   # port pinned
    ("https://fc.example/shopping/web.json", False),    # prefix on whole segments
    ("https://fc.example/admin", False),
    ("https://fc.example/shop/../admin", False),        # dot segments refused
    ("https://fc.example/shop/%2e%2e/admin", False),
])  # fmt: skip
def test_a_url_entry_pins_scheme_port_and_path_prefix(url, ok):
    assert (refusal(url, "https://fc.example/shop/") is None) is ok


def test_https_only_refuses_plain_http():
    assert "--https-only" in refusal("http://fc.example/f", "fc.example", https_only=True)
    assert refusal("https://fc.example/f", "fc.example", https_only=True) is None


@pytest.mark.parametrize("bad", ["ftp://fc.example/", "https://u:p@fc.example/", "a/b",
                                 "https://fc.example/?q=1", "fc.example:80", ""])
def test_bad_allow_list_entries_are_input_errors(bad):
    with pytest.raises(InputError, match="--allow-url-host"):
        parse_url_rule(bad)


def test_refused_url_is_never_fetched(monkeypatch):
    from floorcast.sources import http

    monkeypatch.setattr(http, "_opener", lambda _: pytest.fail("fetched"))
    s = Settings(allowed_url_hosts=("https://fc.example/shop/",))
    state = forecast_from_url("https://fc.example:8443/shop/f.json", s)
    assert state.reason == "UrlNotAllowed" and "port and path prefix" in state.message


# ---------------------------------------------------------------- custom CA bundle


def _cert(tmp: Path) -> tuple[Path, Path, Path]:
    """A throw-away CA and a 127.0.0.1 server certificate it signs (RFC 5280 fields the
    Python ssl module checks: basicConstraints on the CA, an IP subjectAltName)."""
    now = dt.datetime.now(dt.UTC)
    ca_key, key = ec.generate_private_key(ec.SECP256R1()), ec.generate_private_key(ec.SECP256R1())
    ca_name = x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, "floorcast test CA")])
    ca = (x509.CertificateBuilder().subject_name(ca_name).issuer_name(ca_name)
          .public_key(ca_key.public_key()).serial_number(1)
          .not_valid_before(now - dt.timedelta(hours=1)).not_valid_after(now + dt.timedelta(days=1))
          .add_extension(x509.BasicConstraints(ca=True, path_length=0), critical=True)
          .add_extension(x509.KeyUsage(False, False, False, False, False, True, True, False, False),
                         critical=True)
          .add_extension(x509.SubjectKeyIdentifier.from_public_key(ca_key.public_key()), False)
          .sign(ca_key, hashes.SHA256()))  # fmt: skip
    srv = (x509.CertificateBuilder()
           .subject_name(x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, "127.0.0.1")]))
           .issuer_name(ca_name).public_key(key.public_key()).serial_number(2)
           .not_valid_before(now - dt.timedelta(hours=1))
           .not_valid_after(now + dt.timedelta(days=1))
           .add_extension(x509.SubjectAlternativeName(
               [x509.IPAddress(ipaddress.ip_address("127.0.0.1"))]), critical=False)
           .add_extension(x509.AuthorityKeyIdentifier.from_issuer_public_key(ca_key.public_key()),
                          False)
           .sign(ca_key, hashes.SHA256()))  # fmt: skip
    pem = serialization.Encoding.PEM
    paths = tmp / "ca.pem", tmp / "srv.pem", tmp / "srv.key"
    paths[0].write_bytes(ca.public_bytes(pem))
    paths[1].write_bytes(srv.public_bytes(pem))
    paths[2].write_bytes(key.private_bytes(pem, serialization.PrivateFormat.PKCS8,
                                           serialization.NoEncryption()))  # fmt: skip
    return paths


@pytest.fixture
def https_server(tmp_path: Path) -> Iterator[tuple[str, Path]]:
    ca, crt, key = _cert(tmp_path)
    now = pd.Timestamp.now(tz="UTC").floor("min")
    body = json.dumps({"step": "5m", "generated": now.isoformat(), "points": [
        {"t": (now + i * pd.Timedelta("5m")).isoformat(), "value": 1.0} for i in range(4)]})

    class Handler(http.server.BaseHTTPRequestHandler):
        def log_message(self, *args: object) -> None:
            pass

        def do_GET(self) -> None:
            self.send_response(200)
            self.send_header("Content-Length", str(len(body)))
            self.end_headers()
            self.wfile.write(body.encode())

    httpd = http.server.ThreadingHTTPServer(("127.0.0.1", 0), Handler)
    ctx = ssl.SSLContext(ssl.PROTOCOL_TLS_SERVER)
    ctx.load_cert_chain(crt, key)
    httpd.socket = ctx.wrap_socket(httpd.socket, server_side=True)
    threading.Thread(target=httpd.serve_forever, daemon=True).start()
    try:
        yield f"https://127.0.0.1:{httpd.server_address[1]}/f.json", ca
    finally:
        httpd.shutdown()
        httpd.server_close()


def test_a_custom_ca_bundle_is_trusted_and_only_with_it(https_server):
    url, ca = https_server
    plain = Settings(allowed_url_hosts=("127.0.0.1",), https_only=True, url_timeout_seconds=3)
    untrusted = forecast_from_url(url, plain)
    assert untrusted.reason == "ForecastMissing"
    assert "CERTIFICATE_VERIFY_FAILED" in untrusted.message
    trusted = forecast_from_url(url, Settings(allowed_url_hosts=("127.0.0.1",), https_only=True,
                                              url_timeout_seconds=3, ca_bundle=str(ca)))
    assert trusted.series is not None and len(trusted.series) == 4


# ---------------------------------------------------------------- generated in the future


@pytest.mark.parametrize(("ahead", "refused"), [("4m", False), ("6m", True), ("720h", True)])
def test_a_forecast_from_the_future_is_refused(ahead, refused):
    fc = ForecastState(series=forecast(generated=NOW + pd.Timedelta(ahead)))
    d = decide(observed(h=hpa(7, **{"floorcast.dev/baseline": "2",
                                    "floorcast.dev/applied-floor": "7",
                                    "floorcast.dev/policy": "p"}), fc=fc))  # fmt: skip
    ready = cond(d, "Ready")
    if refused:
        assert ready["reason"] == "ForecastInvalid" and "in the future" in ready["message"]
        assert d.hpa_patch is not None and d.hpa_patch.min_replicas == 2
    else:
        assert ready["reason"] == "FloorApplied"
