"""Throw-away PKI and kubeconfigs for one local control plane.

kube-apiserver will not start without TLS material: a serving certificate, a client
CA (client certificates are how the admin and kube-controller-manager log in, since
there is no other authenticator to configure) and a service-account key pair (so the
TokenRequest API can mint tokens whose permissions RBAC then decides). Everything is
generated fresh per run with ``cryptography``; nothing here is meant to be kept.

ECDSA P-256 is used for the TLS keys because generating it is instant; the
service-account key is RSA because every JWT consumer understands RS256.
"""

from __future__ import annotations

import base64
import datetime as _dt
import ipaddress
from dataclasses import dataclass
from pathlib import Path

import yaml
from cryptography import x509
from cryptography.hazmat.primitives import hashes, serialization
from cryptography.hazmat.primitives.asymmetric import ec, rsa
from cryptography.x509.oid import ExtendedKeyUsageOID, NameOID

#: Names the API server's serving certificate answers to: how tests reach it
#: (127.0.0.1/localhost) and how in-cluster clients would (the kubernetes service).
SERVING_DNS_NAMES = (
    "localhost",
    "kubernetes",
    "kubernetes.default",
    "kubernetes.default.svc",
    "kubernetes.default.svc.cluster.local",
)

_VALIDITY = _dt.timedelta(days=2)
#: The common name the API server's aggregation proxy presents
#: (``--requestheader-allowed-names``).
FRONT_PROXY_CLIENT = "front-proxy-client"

PrivateKey = ec.EllipticCurvePrivateKey | rsa.RSAPrivateKey


@dataclass(frozen=True)
class CertPair:
    """A PEM certificate and key written to disk (paths for flags, bytes for kubeconfigs)."""

    cert: Path
    key: Path

    def cert_pem(self) -> bytes:
        return self.cert.read_bytes()

    def key_pem(self) -> bytes:
        return self.key.read_bytes()


@dataclass(frozen=True)
class Pki:
    """All the files one control plane needs."""

    ca: CertPair
    apiserver: CertPair
    admin: CertPair
    controller_manager: CertPair
    scheduler: CertPair
    #: The aggregation layer: the API server proxies metrics.k8s.io to metrics-server
    #: with this client certificate, signed by a CA of its own so that no ordinary
    #: client certificate can assert another user's identity through the headers.
    front_proxy_ca: CertPair
    front_proxy_client: CertPair
    sa_private_key: Path
    sa_public_key: Path


def _key_pem(key: PrivateKey) -> bytes:
    return key.private_bytes(
        serialization.Encoding.PEM,
        serialization.PrivateFormat.PKCS8,
        serialization.NoEncryption(),
    )


def _write(path: Path, data: bytes) -> Path:
    path.write_bytes(data)
    path.chmod(0o600)
    return path


def _name(common_name: str, organization: str | None = None) -> x509.Name:
    attrs = [x509.NameAttribute(NameOID.COMMON_NAME, common_name)]
    if organization:
        attrs.append(x509.NameAttribute(NameOID.ORGANIZATION_NAME, organization))
    return x509.Name(attrs)


def _builder(subject: x509.Name, issuer: x509.Name, public_key: object) -> x509.CertificateBuilder:
    # Backdate a little: the components and this process share a clock, but a
    # certificate "not yet valid" by a second is a confusing failure to chase.
    now = _dt.datetime.now(_dt.UTC) - _dt.timedelta(minutes=5)
    return (
        x509.CertificateBuilder()
        .subject_name(subject)
        .issuer_name(issuer)
        .public_key(public_key)  # type: ignore[arg-type]
        .serial_number(x509.random_serial_number())
        .not_valid_before(now)
        .not_valid_after(now + _VALIDITY)
    )


def _leaf(
    ca_key: ec.EllipticCurvePrivateKey,
    ca_cert: x509.Certificate,
    subject: x509.Name,
    usage: x509.ObjectIdentifier,
    sans: list[x509.GeneralName] | None = None,
) -> tuple[x509.Certificate, ec.EllipticCurvePrivateKey]:
    key = ec.generate_private_key(ec.SECP256R1())
    b = (
        _builder(subject, ca_cert.subject, key.public_key())
        .add_extension(x509.BasicConstraints(ca=False, path_length=None), critical=True)
        .add_extension(
            x509.KeyUsage(
                digital_signature=True,
                content_commitment=False,
                key_encipherment=True,
                data_encipherment=False,
                key_agreement=False,
                key_cert_sign=False,
                crl_sign=False,
                encipher_only=False,
                decipher_only=False,
            ),
            critical=True,
        )
        .add_extension(x509.ExtendedKeyUsage([usage]), critical=False)
        .add_extension(
            x509.AuthorityKeyIdentifier.from_issuer_public_key(ca_key.public_key()), critical=False
        )
    )
    if sans:
        b = b.add_extension(x509.SubjectAlternativeName(sans), critical=False)
    return b.sign(ca_key, hashes.SHA256()), key


def _ca(common_name: str) -> tuple[x509.Certificate, ec.EllipticCurvePrivateKey]:
    key = ec.generate_private_key(ec.SECP256R1())
    name = _name(common_name)
    cert = (
        _builder(name, name, key.public_key())
        .add_extension(x509.BasicConstraints(ca=True, path_length=None), critical=True)
        .add_extension(
            x509.KeyUsage(
                digital_signature=True,
                content_commitment=False,
                key_encipherment=False,
                data_encipherment=False,
                key_agreement=False,
                key_cert_sign=True,
                crl_sign=True,
                encipher_only=False,
                decipher_only=False,
            ),
            critical=True,
        )
        .add_extension(x509.SubjectKeyIdentifier.from_public_key(key.public_key()), critical=False)
        .sign(key, hashes.SHA256())
    )
    return cert, key


def generate(directory: Path, service_ip: str = "10.0.0.1") -> Pki:
    """Create a CA and every certificate/key the components need, in ``directory``.

    ``service_ip`` is the first address of the service range: the API server
    advertises itself there as ``kubernetes.default``, so the serving certificate
    must name it for in-cluster clients (kind-style setups) to verify it.
    """
    directory.mkdir(parents=True, exist_ok=True)
    ca_cert, ca_key = _ca("floorcast-e2e-ca")
    fp_cert, fp_key = _ca("floorcast-e2e-front-proxy-ca")

    def save(stem: str, cert: x509.Certificate, key: PrivateKey) -> CertPair:
        return CertPair(
            cert=_write(directory / f"{stem}.crt", cert.public_bytes(serialization.Encoding.PEM)),
            key=_write(directory / f"{stem}.key", _key_pem(key)),
        )

    sans: list[x509.GeneralName] = [x509.DNSName(n) for n in SERVING_DNS_NAMES]
    sans += [x509.IPAddress(ipaddress.ip_address(ip)) for ip in ("127.0.0.1", service_ip)]
    server = _leaf(ca_key, ca_cert, _name("kube-apiserver"), ExtendedKeyUsageOID.SERVER_AUTH, sans)
    # system:masters bypasses RBAC entirely, which is what an admin (and a
    # controller-manager running without per-controller service accounts) needs.
    admin = _leaf(
        ca_key,
        ca_cert,
        _name("floorcast-e2e-admin", "system:masters"),
        ExtendedKeyUsageOID.CLIENT_AUTH,
    )
    kcm = _leaf(
        ca_key,
        ca_cert,
        _name("system:kube-controller-manager", "system:masters"),
        ExtendedKeyUsageOID.CLIENT_AUTH,
    )
    # The scheduler logs in as the user its built-in RBAC role is bound to.
    scheduler = _leaf(
        ca_key, ca_cert, _name("system:kube-scheduler"), ExtendedKeyUsageOID.CLIENT_AUTH
    )
    fp_client = _leaf(
        fp_key, fp_cert, _name(FRONT_PROXY_CLIENT), ExtendedKeyUsageOID.CLIENT_AUTH
    )
    sa_key = rsa.generate_private_key(public_exponent=65537, key_size=2048)
    return Pki(
        ca=save("ca", ca_cert, ca_key),
        apiserver=save("apiserver", *server),
        admin=save("admin", *admin),
        controller_manager=save("kube-controller-manager", *kcm),
        scheduler=save("kube-scheduler", *scheduler),
        front_proxy_ca=save("front-proxy-ca", fp_cert, fp_key),
        front_proxy_client=save("front-proxy-client", *fp_client),
        sa_private_key=_write(directory / "sa.key", _key_pem(sa_key)),
        sa_public_key=_write(
            directory / "sa.pub",
            sa_key.public_key().public_bytes(
                serialization.Encoding.PEM, serialization.PublicFormat.SubjectPublicKeyInfo
            ),
        ),
    )


def _b64(data: bytes) -> str:
    return base64.b64encode(data).decode()


def kubeconfig_dict(
    server: str,
    ca_pem: bytes,
    user: dict[str, str],
    *,
    name: str = "floorcast-e2e",
    namespace: str | None = None,
) -> dict[str, object]:
    """A one-cluster, one-user kubeconfig with everything embedded.

    Embedding (rather than pointing at files) keeps the file valid when copied
    elsewhere, e.g. into an operator's Pod or a demo terminal.
    """
    context: dict[str, str] = {"cluster": name, "user": name}
    if namespace:
        context["namespace"] = namespace
    return {
        "apiVersion": "v1",
        "kind": "Config",
        "clusters": [
            {
                "name": name,
                "cluster": {"server": server, "certificate-authority-data": _b64(ca_pem)},
            }
        ],
        "users": [{"name": name, "user": user}],
        "contexts": [{"name": name, "context": context}],
        "current-context": name,
        "preferences": {},
    }


def write_kubeconfig(path: Path, config: dict[str, object]) -> Path:
    """Write a kubeconfig readable only by us (it holds credentials)."""
    path.write_text(yaml.safe_dump(config, sort_keys=False))
    path.chmod(0o600)
    return path


def client_cert_user(pair: CertPair) -> dict[str, str]:
    """The kubeconfig ``user`` entry for a client certificate."""
    return {
        "client-certificate-data": _b64(pair.cert_pem()),
        "client-key-data": _b64(pair.key_pem()),
    }
