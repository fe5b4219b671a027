"""The certificate for ``sheetnet serve --https``: a self-signed leaf for this computer's own addresses.

What a user trusts when they trust it: one certificate valid for ``localhost`` and ``127.0.0.1`` only
(its subject alternative names, nothing else), usable only to identify a TLS server (key usage:
digital signature; extended key usage: server authentication), and not a certificate authority
(basic constraints ``CA:FALSE``), so nothing signed with its key is accepted for any other name. Its
private key is written readable by the owner only and never leaves the computer. A certificate made
by an older sheetnet (a self-signed authority) is replaced by such a leaf on the next start.
"""

from __future__ import annotations

import datetime as dt
import ipaddress
import os
from pathlib import Path
from typing import Any

LOCAL_DNS_NAMES = ("localhost",)
LOCAL_IP_ADDRESSES = ("127.0.0.1",)
MAX_DAYS = 825  # the longest validity macOS accepts for a TLS server certificate (common practice, no source)
RENEW_DAYS = 7  # a certificate closer than this to its end is made anew


def is_local_leaf(certificate: Any) -> bool:
    """Whether ``certificate`` (a `cryptography.x509.Certificate`) is the leaf this module makes:
    not an authority, for TLS servers only, for exactly the local names."""
    from cryptography import x509
    from cryptography.x509.oid import ExtendedKeyUsageOID

    try:
        constraints = certificate.extensions.get_extension_for_class(x509.BasicConstraints).value
        usage = certificate.extensions.get_extension_for_class(x509.KeyUsage).value
        purposes = certificate.extensions.get_extension_for_class(x509.ExtendedKeyUsage).value
        names = certificate.extensions.get_extension_for_class(x509.SubjectAlternativeName).value
    except x509.ExtensionNotFound:
        return False
    dns = sorted(names.get_values_for_type(x509.DNSName))
    ips = sorted(str(a) for a in names.get_values_for_type(x509.IPAddress))
    return (
        not constraints.ca
        and usage.digital_signature and not usage.key_cert_sign and not usage.crl_sign
        and list(purposes) == [ExtendedKeyUsageOID.SERVER_AUTH]
        and dns == sorted(LOCAL_DNS_NAMES) and ips == sorted(LOCAL_IP_ADDRESSES)
        and len(list(names)) == len(dns) + len(ips)
    )


def _write_private(path: Path, data: bytes) -> None:
    """Written owner-only from the first byte (no moment in which others could read the key)."""
    path.unlink(missing_ok=True)
    descriptor = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    with os.fdopen(descriptor, "wb") as handle:
        handle.write(data)


def local_certificate(folder: Path, days: int = MAX_DAYS) -> tuple[Path, Path]:
    """Certificate and key files (``sheetnet-local.crt``, ``sheetnet-local.key``) in ``folder``,
    made once and reused while valid and of the kind described above."""
    from cryptography import x509
    from cryptography.hazmat.primitives import hashes, serialization
    from cryptography.hazmat.primitives.asymmetric import ec
    from cryptography.x509.oid import ExtendedKeyUsageOID, NameOID

    folder.mkdir(parents=True, exist_ok=True)
    certificate_path, key_path = folder / "sheetnet-local.crt", folder / "sheetnet-local.key"
    now = dt.datetime.now(dt.timezone.utc)
    if certificate_path.exists() and key_path.exists():
        existing = x509.load_pem_x509_certificate(certificate_path.read_bytes())
        if existing.not_valid_after_utc > now + dt.timedelta(days=RENEW_DAYS) and is_local_leaf(existing):
            return certificate_path, key_path
    key = ec.generate_private_key(ec.SECP256R1())
    name = x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, "sheetnet local server (localhost and 127.0.0.1 only)")])
    alternative_names: list[x509.GeneralName] = [x509.DNSName(n) for n in LOCAL_DNS_NAMES]
    alternative_names += [x509.IPAddress(ipaddress.ip_address(a)) for a in LOCAL_IP_ADDRESSES]
    no_other_use = dict(content_commitment=False, key_encipherment=False, data_encipherment=False, key_agreement=False,
                        key_cert_sign=False, crl_sign=False, encipher_only=False, decipher_only=False)
    certificate = (
        x509.CertificateBuilder()
        .subject_name(name)
        .issuer_name(name)
        .public_key(key.public_key())
        .serial_number(x509.random_serial_number())
        .not_valid_before(now - dt.timedelta(minutes=5))
        .not_valid_after(now + dt.timedelta(days=min(days, MAX_DAYS)))
        .add_extension(x509.BasicConstraints(ca=False, path_length=None), critical=True)
        .add_extension(x509.KeyUsage(digital_signature=True, **no_other_use), critical=True)
        .add_extension(x509.ExtendedKeyUsage([ExtendedKeyUsageOID.SERVER_AUTH]), critical=False)
        .add_extension(x509.SubjectAlternativeName(alternative_names), critical=False)
        .add_extension(x509.SubjectKeyIdentifier.from_public_key(key.public_key()), critical=False)
        .add_extension(x509.AuthorityKeyIdentifier.from_issuer_public_key(key.public_key()), critical=False)
        .sign(key, hashes.SHA256())
    )
    _write_private(key_path, key.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8, serialization.NoEncryption()))
    certificate_path.write_bytes(certificate.public_bytes(serialization.Encoding.PEM))
    return certificate_path, key_path
