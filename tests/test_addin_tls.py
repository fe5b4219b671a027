"""The certificate of ``sheetnet serve --https``: a leaf for localhost and 127.0.0.1 only, never an authority.

Checked three ways: its extensions; cryptography's X.509 path validation (``cryptography.x509.verification``,
the library's own verifier) with the certificate as the only trusted one, where a certificate for another
name signed with its key must be refused; and a real TLS handshake (OpenSSL through Python's ``ssl``)
with the served add-in over https.
"""

from __future__ import annotations

import datetime as dt
import ipaddress
import ssl
import stat
import threading
import time
from pathlib import Path

import httpx
import pytest
import uvicorn
from cryptography import x509
from cryptography.hazmat.primitives import hashes, serialization
from cryptography.x509.oid import ExtendedKeyUsageOID, NameOID
from cryptography.x509.verification import PolicyBuilder, Store, VerificationError

from sheetnet import cli, server, tls

TOKEN = "tls-test-token-0123456789abcdef"


def _load(path: Path) -> x509.Certificate:
    return x509.load_pem_x509_certificate(path.read_bytes())


def _verify(trusted: x509.Certificate, leaf: x509.Certificate, name: x509.GeneralName) -> None:
    PolicyBuilder().store(Store([trusted])).build_server_verifier(name).verify(leaf, [])


def _signed_for(name: str, trusted: x509.Certificate, key_path: Path) -> x509.Certificate:
    """A certificate for another site, signed with the local certificate's own key, naming it as issuer."""
    from cryptography.hazmat.primitives.asymmetric import ec

    key = serialization.load_pem_private_key(key_path.read_bytes(), password=None)
    other = ec.generate_private_key(ec.SECP256R1())
    now = dt.datetime.now(dt.timezone.utc)
    return (
        x509.CertificateBuilder()
        .subject_name(x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, name)]))
        .issuer_name(trusted.subject)
        .public_key(other.public_key())
        .serial_number(x509.random_serial_number())
        .not_valid_before(now - dt.timedelta(minutes=5))
        .not_valid_after(now + dt.timedelta(days=30))
        .add_extension(x509.BasicConstraints(ca=False, path_length=None), critical=True)
        .add_extension(x509.ExtendedKeyUsage([ExtendedKeyUsageOID.SERVER_AUTH]), critical=False)
        .add_extension(x509.SubjectAlternativeName([x509.DNSName(name)]), critical=False)
        .add_extension(x509.AuthorityKeyIdentifier.from_issuer_public_key(key.public_key()), critical=False)  # type: ignore[arg-type]
        .sign(key, hashes.SHA256())  # type: ignore[arg-type]
    )


def test_the_certificate_is_a_leaf_for_the_local_names_only(tmp_path):
    certificate_path, key_path = tls.local_certificate(tmp_path)
    certificate = _load(certificate_path)
    extensions = certificate.extensions
    constraints = extensions.get_extension_for_class(x509.BasicConstraints)
    assert constraints.critical and constraints.value.ca is False
    usage = extensions.get_extension_for_class(x509.KeyUsage)
    assert usage.critical and usage.value.digital_signature
    assert not (usage.value.key_cert_sign or usage.value.crl_sign or usage.value.key_encipherment or usage.value.content_commitment)
    assert list(extensions.get_extension_for_class(x509.ExtendedKeyUsage).value) == [ExtendedKeyUsageOID.SERVER_AUTH]
    names = extensions.get_extension_for_class(x509.SubjectAlternativeName).value
    assert names.get_values_for_type(x509.DNSName) == ["localhost"]
    assert names.get_values_for_type(x509.IPAddress) == [ipaddress.ip_address("127.0.0.1")]
    assert len(list(names)) == 2  # nothing else: no wildcard, no other address
    assert (certificate.not_valid_after_utc - certificate.not_valid_before_utc) <= dt.timedelta(days=825, minutes=5)
    assert stat.S_IMODE(key_path.stat().st_mode) == 0o600
    assert tls.is_local_leaf(certificate)


def test_trusting_it_vouches_for_the_local_names_and_nothing_signed_with_its_key(tmp_path):
    certificate_path, key_path = tls.local_certificate(tmp_path)
    trusted = _load(certificate_path)
    _verify(trusted, trusted, x509.DNSName("localhost"))
    _verify(trusted, trusted, x509.IPAddress(ipaddress.ip_address("127.0.0.1")))
    with pytest.raises(VerificationError, match="subjectAltName"):
        _verify(trusted, trusted, x509.DNSName("example.com"))
    forged = _signed_for("bank.example", trusted, key_path)
    with pytest.raises(VerificationError):
        _verify(trusted, forged, x509.DNSName("bank.example"))


def test_the_check_above_would_catch_an_authority(tmp_path):
    """The same forged certificate passes when the trusted one is an authority (as sheetnet once made):
    the refusal above comes from CA:FALSE, not from a broken forgery."""
    from cryptography.hazmat.primitives.asymmetric import ec

    key = ec.generate_private_key(ec.SECP256R1())
    name = x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, "an authority")])
    now = dt.datetime.now(dt.timezone.utc)
    authority = (
        x509.CertificateBuilder().subject_name(name).issuer_name(name).public_key(key.public_key())
        .serial_number(x509.random_serial_number())
        .not_valid_before(now - dt.timedelta(minutes=5)).not_valid_after(now + dt.timedelta(days=30))
        .add_extension(x509.BasicConstraints(ca=True, path_length=None), critical=True)
        .add_extension(x509.KeyUsage(True, False, False, False, False, True, True, False, False), critical=True)
        .add_extension(x509.SubjectKeyIdentifier.from_public_key(key.public_key()), critical=False)
        .sign(key, hashes.SHA256())
    )
    key_path = tmp_path / "authority.key"
    key_path.write_bytes(key.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8, serialization.NoEncryption()))
    _verify(authority, _signed_for("bank.example", authority, key_path), x509.DNSName("bank.example"))
    assert not tls.is_local_leaf(authority)


def test_an_authority_left_by_an_older_sheetnet_is_replaced(tmp_path):
    from cryptography.hazmat.primitives.asymmetric import ec

    key = ec.generate_private_key(ec.SECP256R1())
    name = x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, "sheetnet local server")])
    now = dt.datetime.now(dt.timezone.utc)
    old = (
        x509.CertificateBuilder().subject_name(name).issuer_name(name).public_key(key.public_key())
        .serial_number(x509.random_serial_number())
        .not_valid_before(now - dt.timedelta(minutes=5)).not_valid_after(now + dt.timedelta(days=400))
        .add_extension(x509.SubjectAlternativeName([x509.DNSName("localhost"), x509.IPAddress(ipaddress.ip_address("127.0.0.1"))]), critical=False)
        .add_extension(x509.BasicConstraints(ca=True, path_length=None), critical=True)
        .sign(key, hashes.SHA256())
    )
    (tmp_path / "sheetnet-local.crt").write_bytes(old.public_bytes(serialization.Encoding.PEM))
    pem = key.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8, serialization.NoEncryption())
    (tmp_path / "sheetnet-local.key").write_bytes(pem)
    certificate_path, _ = tls.local_certificate(tmp_path)
    made = _load(certificate_path)
    assert made.serial_number != old.serial_number and tls.is_local_leaf(made)
    assert tls.local_certificate(tmp_path)[0].read_bytes() == certificate_path.read_bytes()  # a good one is kept


def test_the_add_in_is_served_over_https_with_it(tmp_path):
    certificate_path, key_path = tls.local_certificate(tmp_path)
    app = server.create_app(TOKEN, origin="https://127.0.0.1")
    config = uvicorn.Config(app, host="127.0.0.1", port=0, log_level="warning", ssl_certfile=str(certificate_path), ssl_keyfile=str(key_path))
    running = uvicorn.Server(config)
    thread = threading.Thread(target=running.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 20
    while not running.started and time.monotonic() < deadline:
        time.sleep(0.05)
    assert running.started, "the https test server did not start"
    port = running.servers[0].sockets[0].getsockname()[1]
    try:
        trusting = ssl.create_default_context(cafile=str(certificate_path))  # OpenSSL, the certificate as the only trusted one
        for host in ("127.0.0.1", "localhost"):
            answer = httpx.get(f"https://{host}:{port}/addin/functions.js", verify=trusting)
            assert answer.status_code == 200
            assert f'const SHEETNET_BASE = "https://127.0.0.1:{port}";' in answer.text
        with pytest.raises(httpx.ConnectError):
            httpx.get(f"https://127.0.0.1:{port}/addin/functions.js", verify=ssl.create_default_context())  # not trusted by default
    finally:
        running.should_exit = True
        thread.join(10)


def test_the_trust_steps_say_what_is_trusted(monkeypatch, capsys, tmp_path):
    monkeypatch.setattr(cli, "serve_forever", lambda app, listening, **kwargs: None)
    monkeypatch.setenv("SHEETNET_TOKEN", TOKEN)
    monkeypatch.setenv("HOME", str(tmp_path))
    assert cli.main(["serve", "--https", "--port", "0", "--cert-dir", str(tmp_path / "tls")]) == 0
    out = " ".join(capsys.readouterr().out.split())  # the words, whatever the line breaks
    assert "not a certificate authority" in out and "cannot vouch for any other site" in out
    assert "never leaves this computer" in out and str(tmp_path / "tls" / "sheetnet-local.crt") in out
