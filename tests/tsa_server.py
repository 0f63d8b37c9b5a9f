"""A small RFC 3161 time-stamping authority of the tests' own, on 127.0.0.1.

To try ``--timestamp`` by hand: ``python tests/tsa_server.py --ca tsa-ca.pem`` writes the
throw-away CA's certificate (for ``verify --tsa-cert``), prints the URL and serves until
Ctrl-C. It is for tests and trials only: its keys live in memory and vanish with it.

A throw-away CA and a TSA certificate (the time-stamping extended key usage, critical, as
RFC 3161 section 2.3 requires) are made with ``cryptography``; the responses are built with
asn1crypto's ``tsp`` and ``cms`` structures and signed with the TSA's key, so that prespec's
client and checks meet a real authority, and ``openssl ts`` can check its tokens on its own.

``mode`` makes the authority misbehave in one way each (the failure cases of the tests):
``granted`` (honest), ``rejection``, ``wrong-imprint``, ``wrong-nonce``, ``garbage``,
``http-error``, ``truncated`` (the connection closes before the promised length),
``bad-signature``, ``no-certificate``. A certificate that is expired or lacks
the time-stamping usage is a separate ``Authority`` (``expired=True``, ``time_stamping=False``).
"""

from __future__ import annotations

import hashlib
import threading
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path
from typing import Any, ClassVar

from asn1crypto import cms, core, tsp
from cryptography import x509
from cryptography.hazmat.primitives import hashes, serialization
from cryptography.hazmat.primitives.asymmetric import ec, padding, rsa
from cryptography.x509.oid import ExtendedKeyUsageOID, NameOID

POLICY = "1.3.6.1.4.1.55555.1.1"  # a private arc for the tests' policy


class Rejection(core.Sequence):
    """A ``TimeStampResp`` without a token (RFC 3161 section 2.4.2: the token is OPTIONAL;
    asn1crypto's ``tsp.TimeStampResp`` requires one)."""

    _fields: ClassVar = [("status", tsp.PKIStatusInfo)]


def _name(common: str) -> x509.Name:
    return x509.Name([x509.NameAttribute(NameOID.ORGANIZATION_NAME, "prespec tests"),
                      x509.NameAttribute(NameOID.COMMON_NAME, common)])


def _key(kind: str) -> Any:
    if kind == "rsa":
        return rsa.generate_private_key(public_exponent=65537, key_size=2048)
    return ec.generate_private_key(ec.SECP256R1())


def make_ca(common: str = "prespec test root CA", kind: str = "ec") -> tuple[Any, x509.Certificate]:
    key = _key(kind)
    now = datetime.now(UTC)
    cert = (x509.CertificateBuilder().subject_name(_name(common)).issuer_name(_name(common))
            .public_key(key.public_key()).serial_number(x509.random_serial_number())
            .not_valid_before(now - timedelta(days=1)).not_valid_after(now + timedelta(days=30))
            .add_extension(x509.BasicConstraints(ca=True, path_length=None), critical=True)
            .add_extension(x509.KeyUsage(False, False, False, False, False, True, True, False,
                                         False), critical=True)
            .add_extension(x509.SubjectKeyIdentifier.from_public_key(key.public_key()),
                           critical=False)
            .sign(key, hashes.SHA256()))
    return key, cert


def make_tsa(ca_key: Any, ca_cert: x509.Certificate, *, kind: str = "ec",
             common: str = "prespec test TSA", expired: bool = False,
             time_stamping: bool = True) -> tuple[Any, x509.Certificate]:
    key = _key(kind)
    now = datetime.now(UTC)
    start, end = ((now - timedelta(days=20), now - timedelta(days=10)) if expired else
                  (now - timedelta(hours=1), now + timedelta(days=10)))
    builder = (x509.CertificateBuilder().subject_name(_name(common))
               .issuer_name(ca_cert.subject).public_key(key.public_key())
               .serial_number(x509.random_serial_number())
               .not_valid_before(start).not_valid_after(end)
               .add_extension(x509.BasicConstraints(ca=False, path_length=None), critical=True)
               .add_extension(x509.KeyUsage(True, True, False, False, False, False, False, False,
                                            False), critical=True))
    if time_stamping:
        builder = builder.add_extension(
            x509.ExtendedKeyUsage([ExtendedKeyUsageOID.TIME_STAMPING]), critical=True)
    return key, builder.sign(ca_key, hashes.SHA256())


def pem(cert: x509.Certificate) -> bytes:
    return cert.public_bytes(serialization.Encoding.PEM)


@dataclass
class Authority:
    """The CA, the TSA's key and certificate, and how it answers."""

    kind: str = "ec"
    expired: bool = False
    time_stamping: bool = True
    mode: str = "granted"
    clock: Any = None  # a function giving the TSA's time (default: now)
    serial: int = 0
    requests: list[bytes] = field(default_factory=list)

    def __post_init__(self) -> None:
        self.ca_key, self.ca_cert = make_ca(kind=self.kind)
        self.key, self.cert = make_tsa(self.ca_key, self.ca_cert, kind=self.kind,
                                       expired=self.expired, time_stamping=self.time_stamping)

    def write_ca(self, path: Path) -> Path:
        path.write_bytes(pem(self.ca_cert))
        return path

    def _sign(self, data: bytes) -> tuple[bytes, str]:
        if isinstance(self.key, rsa.RSAPrivateKey):
            return self.key.sign(data, padding.PKCS1v15(), hashes.SHA256()), "sha256_rsa"
        return self.key.sign(data, ec.ECDSA(hashes.SHA256())), "sha256_ecdsa"

    def respond(self, body: bytes) -> bytes:
        """The DER of the ``TimeStampResp`` to one request."""
        self.requests.append(body)
        request = tsp.TimeStampReq.load(body)
        if self.mode == "rejection":
            return Rejection({"status": {  # RFC 3161: no token in a rejection
                "status": "rejection", "status_string": ["the policy is not accepted"],
                "fail_info": {"unaccepted_policy"}}}).dump()
        if self.mode == "garbage":
            return b"this is not a time-stamp response"
        self.serial += 1
        imprint = request["message_imprint"]
        if self.mode == "wrong-imprint":
            hashed = bytearray(imprint["hashed_message"].native)
            hashed[0] ^= 0xFF
            imprint = tsp.MessageImprint({"hash_algorithm": {"algorithm": "sha256"},
                                          "hashed_message": bytes(hashed)})
        nonce = request["nonce"].native
        if self.mode == "wrong-nonce":
            nonce = (nonce or 0) + 1
        when = (self.clock() if self.clock else datetime.now(UTC)).replace(microsecond=0)
        tst = {"version": "v1", "policy": POLICY, "message_imprint": imprint,
               "serial_number": self.serial, "gen_time": when}
        if nonce is not None:
            tst["nonce"] = nonce
        tst_info = tsp.TSTInfo(tst)
        content = tst_info.dump()
        cert_der = self.cert.public_bytes(serialization.Encoding.DER)
        attributes = [
            cms.CMSAttribute({"type": "content_type", "values": ["tst_info"]}),
            cms.CMSAttribute({"type": "message_digest",
                              "values": [hashlib.sha256(content).digest()]}),
            cms.CMSAttribute({"type": "signing_certificate_v2", "values": [{
                "certs": [{"hash_algorithm": {"algorithm": "sha256"},
                           "cert_hash": hashlib.sha256(cert_der).digest()}]}]}),
        ]
        attributes.sort(key=lambda a: a.dump())  # DER: a SET OF in the order of its encodings
        signed_attrs = cms.CMSAttributes(attributes)
        signature, algorithm = self._sign(signed_attrs.dump())
        if self.mode == "bad-signature":
            signature = signature[:-1] + bytes([signature[-1] ^ 0x01])
        asn_cert = cms.Certificate.load(cert_der)
        signer = cms.SignerInfo({
            "version": "v1",
            "sid": cms.SignerIdentifier({"issuer_and_serial_number": {
                "issuer": asn_cert.issuer, "serial_number": asn_cert.serial_number}}),
            "digest_algorithm": {"algorithm": "sha256"},
            "signed_attrs": signed_attrs,
            "signature_algorithm": {"algorithm": algorithm},
            "signature": signature,
        })
        signed = {
            "version": "v3",
            "digest_algorithms": [{"algorithm": "sha256"}],
            "encap_content_info": {"content_type": "tst_info", "content": tst_info},
            "signer_infos": [signer],
        }
        if request["cert_req"].native and self.mode != "no-certificate":
            signed["certificates"] = [asn_cert]
        token = cms.ContentInfo({"content_type": "signed_data",
                                 "content": cms.SignedData(signed)})
        return tsp.TimeStampResp({"status": {"status": "granted"},
                                  "time_stamp_token": token}).dump()


class _Handler(BaseHTTPRequestHandler):
    authority: Authority

    def do_POST(self) -> None:
        length = int(self.headers.get("Content-Length", "0"))
        body = self.rfile.read(length)
        if self.server.authority.mode == "http-error":  # type: ignore[attr-defined]
            self.send_error(503, "the authority is down for maintenance")
            return
        answer = self.server.authority.respond(body)  # type: ignore[attr-defined]
        cut = self.server.authority.mode == "truncated"  # type: ignore[attr-defined]
        self.send_response(200)
        self.send_header("Content-Type", "application/timestamp-reply")
        self.send_header("Content-Length", str(len(answer)))
        self.end_headers()
        self.wfile.write(answer[:len(answer) // 2] if cut else answer)  # cut: half, then closed
        if cut:
            self.close_connection = True

    def log_message(self, *args: Any) -> None:  # quiet
        pass


class AuthorityServer:
    """The authority served over HTTP on 127.0.0.1 (a free port), in a thread."""

    def __init__(self, authority: Authority, port: int = 0) -> None:
        self.authority = authority
        self.server = ThreadingHTTPServer(("127.0.0.1", port), _Handler)
        self.server.authority = authority  # type: ignore[attr-defined]
        self.thread = threading.Thread(target=self.server.serve_forever, daemon=True)
        self.thread.start()

    @property
    def url(self) -> str:
        host, port = self.server.server_address[:2]
        return f"http://{host}:{port}/tsa"

    def close(self) -> None:
        self.server.shutdown()
        self.server.server_close()


def main(argv: list[str] | None = None) -> None:
    import argparse
    import time

    parser = argparse.ArgumentParser(description="a throw-away RFC 3161 authority on 127.0.0.1")
    parser.add_argument("--ca", required=True, type=Path, help="where to write the CA (PEM)")
    parser.add_argument("--port", type=int, default=0, help="the port (default: a free one)")
    args = parser.parse_args(argv)
    server = AuthorityServer(Authority(), args.port)
    server.authority.write_ca(args.ca)
    print(server.url, flush=True)
    try:
        while True:
            time.sleep(3600)
    except KeyboardInterrupt:
        server.close()


if __name__ == "__main__":
    main()
