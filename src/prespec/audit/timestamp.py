"""Trusted time-stamps (RFC 3161) of a lock version or a run: the request, the check of the
response, and the check of a stored token.

The hash chain proves that nothing changed after an entry was written, not *when* it was
written: its ``at`` is the clock of the machine that wrote it. A time-stamping authority (TSA)
signs, with its own clock, a statement that a digest existed at a time; prespec sends it the
digest of what an entry records and keeps the signed answer (the *token*):

- a ``lock`` or ``amend``: the version digest its entry carries (``details.record``, the SHA-256
  of the canonical form of the whole lock version);
- a ``run`` or ``look``: the SHA-256 of its report's ``results.json`` (the manifest the entry
  names lists that file's hash).

The request (RFC 3161 section 2.4.1) carries that SHA-256 as the message imprint, a random
nonce and ``certReq`` true, so that the token holds the TSA's certificate. The token is a CMS
``SignedData`` (RFC 5652) whose content is a ``TSTInfo``: the imprint, the TSA's time
(``genTime``), the nonce. It is stored beside the plan in ``<stem>.timestamps/`` and the SHA-256
of its DER in the entry's ``details.timestamp`` (with the file's name and the authority's
URL, never a credential), so the chain and any signature of the entry cover it.

Checking a token: its content type is ``id-ct-TSTInfo``; the imprint is SHA-256 of the digest
the entry records; the signer's signed attributes hold that content type and the message
digest of the ``TSTInfo`` bytes; the signature over the DER of the signed attributes verifies
with the public key of the signer's certificate (found in the token by its issuer and serial
number or its key identifier) and the ESS signing-certificate attribute names that certificate;
the certificate was valid at ``genTime`` and carries the time-stamping extended key usage.
With trusted certificates (``verify --tsa-cert``) the signer must also chain to one of them,
each link's signature checked and each certificate valid at ``genTime``.

References: RFC 3161, Internet X.509 PKI Time-Stamp Protocol (2001), and RFC 5816 (ESSCertIDv2,
2010); RFC 5652, Cryptographic Message Syntax (2009), section 5.4 (the signed attributes are
signed as a DER ``SET OF``); RFC 5280, section 4.2.1.12 (``id-kp-timeStamping``). The ASN.1
structures are asn1crypto's (``tsp``, ``cms``); the signatures are checked with cryptography.
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import http.client
import os
import re
import secrets
import urllib.error
import urllib.parse
import urllib.request
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any, ClassVar

from asn1crypto import cms, core, tsp
from cryptography import x509
from cryptography.exceptions import InvalidSignature
from cryptography.hazmat.primitives import hashes
from cryptography.hazmat.primitives.asymmetric import ec, ed448, ed25519, padding, rsa
from cryptography.x509.oid import ExtendedKeyUsageOID

from prespec.common.canonical import sha256_tag
from prespec.errors import BadInput

from .files import fsync_dir, log_path, replace_atomically
from .log import read_log

#: The environment variable that names the authority when ``--timestamp`` is not given.
URL_VARIABLE = "PRESPEC_TSA_URL"
#: The key of ``details`` that holds a token's digest, file and authority (only when one exists).
DETAILS_KEY = "timestamp"
TIMEOUT_SECONDS = 30.0
MAX_RESPONSE = 1 << 20  # a response is a few kilobytes; more is not an answer to our request
_FILE_NAME = re.compile(r"(version-[1-9][0-9]*|run-[A-Za-z0-9._-]+)\.tsr")
_HASHES = {"sha1": hashes.SHA1, "sha224": hashes.SHA224, "sha256": hashes.SHA256,
           "sha384": hashes.SHA384, "sha512": hashes.SHA512}


class TokenProblem(Exception):
    """Why a token does not hold (one line)."""


@dataclass(frozen=True)
class TokenInfo:
    """What a checked token says."""

    time: datetime  # genTime, the authority's clock (UTC)
    serial: int
    policy: str
    nonce: int | None
    signer: str  # the signer certificate's subject (RFC 4514)
    chained_to: str | None  # the subject of the trusted certificate reached, with trust given


@dataclass(frozen=True)
class Stamp:
    """A token just obtained: its DER, the authority as recorded, and its time."""

    der: bytes
    url: str
    time: datetime

    def details(self, file: str) -> dict[str, str]:
        """The entry's ``details.timestamp``: the token's digest, its file, the authority."""
        return {"token": sha256_tag(self.der), "file": file, "authority": self.url}


# --- the authority's URL ---

def authority_url(given: str | None, environ: dict[str, str] | None = None) -> str | None:
    """``--timestamp URL``, else ``PRESPEC_TSA_URL``, else None (no time-stamp)."""
    env = os.environ if environ is None else environ
    url = given if given is not None else env.get(URL_VARIABLE) or None
    if url is None:
        return None
    url = url.strip()
    parts = urllib.parse.urlsplit(url)
    if parts.scheme not in ("http", "https") or not parts.hostname:
        raise BadInput(f"--timestamp {recorded_url(url)!r}: give the http:// or https:// URL of a "
                       f"time-stamping authority (or set {URL_VARIABLE})")
    return url


def recorded_url(url: str) -> str:
    """The URL as recorded and printed: without a user name, password, query or fragment
    (where a credential could sit)."""
    parts = urllib.parse.urlsplit(url)
    host = parts.hostname or ""
    if ":" in host:
        host = f"[{host}]"
    try:
        port = parts.port
    except ValueError:
        port = None
    netloc = host + (f":{port}" if port is not None else "")
    return urllib.parse.urlunsplit((parts.scheme, netloc, parts.path, "", ""))


# --- the request ---

def _imprint(digest: str) -> bytes:
    """The 32 bytes of a ``sha256:<hex>`` digest (what the authority stamps)."""
    if not re.fullmatch(r"sha256:[0-9a-f]{64}", digest):
        raise ValueError(f"not a sha256: digest: {digest!r}")
    return bytes.fromhex(digest.removeprefix("sha256:"))


def request_der(digest: str, nonce: int) -> bytes:
    """The DER of a ``TimeStampReq`` for ``digest`` (SHA-256 imprint, the nonce, certReq)."""
    return tsp.TimeStampReq({
        "version": "v1",
        "message_imprint": {"hash_algorithm": {"algorithm": "sha256"},
                            "hashed_message": _imprint(digest)},
        "nonce": nonce,
        "cert_req": True,
    }).dump()


def _post(url: str, body: bytes, timeout: float) -> bytes:
    parts = urllib.parse.urlsplit(url)
    headers = {"Content-Type": "application/timestamp-query",
               "Accept": "application/timestamp-reply", "User-Agent": "prespec"}
    if parts.username is not None:  # user:password@ in the URL: sent, never recorded
        pair = f"{urllib.parse.unquote(parts.username)}:{urllib.parse.unquote(parts.password or '')}"
        headers["Authorization"] = "Basic " + base64.b64encode(pair.encode()).decode("ascii")
        host = parts.hostname or ""
        netloc = (f"[{host}]" if ":" in host else host) + (f":{parts.port}" if parts.port else "")
        url = urllib.parse.urlunsplit(parts._replace(netloc=netloc))
    request = urllib.request.Request(url, data=body, headers=headers, method="POST")
    with urllib.request.urlopen(request, timeout=timeout) as answer:
        data = answer.read(MAX_RESPONSE + 1)
    if len(data) > MAX_RESPONSE:
        raise TokenProblem(f"the answer is larger than {MAX_RESPONSE} bytes")
    return data


def request_token(url: str, digest: str, *, timeout: float = TIMEOUT_SECONDS) -> Stamp:
    """Ask the authority at ``url`` to time-stamp ``digest`` (``sha256:<hex>``) and check its
    answer: status granted, a token whose imprint and nonce are ours, a valid signature by a
    certificate valid at its time with the time-stamping usage. Anything else is a one-line
    ``BadInput`` (exit status 2) naming the reason; nothing is written here."""
    shown = recorded_url(url)
    nonce = secrets.randbits(63) | 1  # never 0, so it is always encoded and compared
    try:
        body = _post(url, request_der(digest, nonce), timeout)
    except urllib.error.HTTPError as exc:
        raise BadInput(f"--timestamp {shown}: the time-stamping authority answered HTTP "
                       f"{exc.code} {exc.reason}; nothing was written") from None
    except (urllib.error.URLError, http.client.HTTPException, OSError, ValueError) as exc:
        reason = getattr(exc, "reason", None) or exc
        raise BadInput(f"--timestamp {shown}: the time-stamping authority could not be reached "
                       f"({reason}); nothing was written") from None
    except TokenProblem as exc:
        raise BadInput(f"--timestamp {shown}: {exc}; nothing was written") from None
    try:
        der = token_from_response(body)
        info = check_token(der, digest, nonce=nonce)
    except TokenProblem as exc:
        raise BadInput(f"--timestamp {shown}: a bad response: {exc}; nothing was written"
                       ) from None
    return Stamp(der, shown, info.time)


class TimeStampResponse(core.Sequence):
    """``TimeStampResp`` as RFC 3161 section 2.4.2 declares it: the token is OPTIONAL (absent
    from a rejection). asn1crypto's ``tsp.TimeStampResp`` requires it."""

    _fields: ClassVar = [("status", tsp.PKIStatusInfo),
               ("time_stamp_token", cms.ContentInfo, {"optional": True})]


def token_from_response(body: bytes) -> bytes:
    """The DER of the token in a ``TimeStampResp``; its status must be granted."""
    try:
        response = TimeStampResponse.load(body, strict=True)
        status = response["status"]
        state = status["status"].native
    except (ValueError, TypeError, KeyError) as exc:
        raise TokenProblem(f"not a time-stamp response ({_short(exc)})") from None
    if state not in ("granted", "granted_with_mods"):
        texts = status["status_string"].native if status["status_string"].native else []
        fail = status["fail_info"].native if status["fail_info"].native else set()
        said = "; ".join(str(t) for t in texts)
        why = ", ".join(sorted(str(f) for f in fail))
        raise TokenProblem(f"the authority answered {state!r}"
                           + (f" ({said})" if said else "") + (f" [{why}]" if why else ""))
    token = response["time_stamp_token"]
    if not isinstance(token, cms.ContentInfo) or token.contents is None:
        raise TokenProblem("the answer is granted but holds no token")
    return token.dump()


def _short(exc: BaseException) -> str:
    return str(exc).splitlines()[0][:200] if str(exc) else type(exc).__name__


# --- reading and checking a token ---

@dataclass(frozen=True)
class _Parsed:
    signed: cms.SignedData
    content: bytes  # the DER of the TSTInfo, as signed
    info: tsp.TSTInfo


def _parse(der: bytes) -> _Parsed:
    try:
        token = cms.ContentInfo.load(der, strict=True)
        if token["content_type"].native != "signed_data":
            raise TokenProblem(f"a {token['content_type'].native} CMS object, not signed data")
        signed = token["content"]
        if not isinstance(signed, cms.SignedData):
            raise TokenProblem("not signed data")
        encap = signed["encap_content_info"]
        if encap["content_type"].native != "tst_info":
            raise TokenProblem(f"its content is {encap['content_type'].native}, not a TSTInfo")
        content = encap["content"].contents
        if content is None:
            raise TokenProblem("it holds no TSTInfo")
        info = tsp.TSTInfo.load(content, strict=True)
        info.native  # noqa: B018 - parses every field now, so a malformed one fails here
    except TokenProblem:
        raise
    except (ValueError, TypeError, KeyError, AttributeError) as exc:
        raise TokenProblem(f"not a time-stamp token ({_short(exc)})") from None
    return _Parsed(signed, content, info)


def token_time(der: bytes) -> datetime:
    """The authority's time (``genTime``, UTC) in a token; reads it without checking the
    signature (``check_token`` does). Raises ``TokenProblem`` for what is not a token."""
    return _gen_time(_parse(der).info)


def _gen_time(info: tsp.TSTInfo) -> datetime:
    when = info["gen_time"].native
    if not isinstance(when, datetime):
        raise TokenProblem("its time is unreadable")
    return when.astimezone(UTC) if when.tzinfo else when.replace(tzinfo=UTC)


def _certificates(signed: cms.SignedData) -> list[tuple[bytes, x509.Certificate]]:
    out = []
    for choice in signed["certificates"] or []:
        if choice.name != "certificate":
            continue
        der = choice.chosen.dump()
        try:
            out.append((der, x509.load_der_x509_certificate(der)))
        except ValueError:
            continue
    return out


def _signer_certificate(signer: cms.SignerInfo, certs: list[tuple[bytes, x509.Certificate]]
                        ) -> tuple[bytes, x509.Certificate]:
    sid = signer["sid"]
    for der, cert in certs:
        parsed = cms.Certificate.load(der)
        if sid.name == "issuer_and_serial_number":
            if (parsed.issuer == sid.chosen["issuer"]
                    and parsed.serial_number == sid.chosen["serial_number"].native):
                return der, cert
        elif sid.name == "subject_key_identifier" \
                and parsed.key_identifier == sid.chosen.native:
            return der, cert
    raise TokenProblem("it does not hold the signer's certificate (certReq was asked)")


def _attribute(attrs: cms.CMSAttributes, name: str) -> Any:
    found = [a for a in attrs if a["type"].native == name]
    if len(found) != 1 or len(found[0]["values"]) != 1:
        return None
    return found[0]["values"][0]


def _check_signature(signer: cms.SignerInfo, cert: x509.Certificate, signed_bytes: bytes
                     ) -> None:
    algorithm = signer["signature_algorithm"]
    name = algorithm.signature_algo
    signature = signer["signature"].native
    key = cert.public_key()
    try:
        chosen = _HASHES[algorithm.hash_algo]() if name not in ("ed25519", "ed448") else None
    except (ValueError, KeyError):
        try:
            chosen = _HASHES[signer["digest_algorithm"]["algorithm"].native]()
        except KeyError:
            raise TokenProblem(f"an unsupported signature algorithm ({algorithm['algorithm'].native})"
                               ) from None
    try:
        if name == "rsassa_pkcs1v15" and isinstance(key, rsa.RSAPublicKey):
            key.verify(signature, signed_bytes, padding.PKCS1v15(), chosen)
        elif name == "rsassa_pss" and isinstance(key, rsa.RSAPublicKey):
            params = algorithm["parameters"]
            pss_hash = _HASHES[params["hash_algorithm"]["algorithm"].native]()
            mgf_hash = _HASHES[params["mask_gen_algorithm"]["parameters"]["algorithm"].native]()
            key.verify(signature, signed_bytes,
                       padding.PSS(padding.MGF1(mgf_hash), params["salt_length"].native),
                       pss_hash)
        elif name == "ecdsa" and isinstance(key, ec.EllipticCurvePublicKey):
            key.verify(signature, signed_bytes, ec.ECDSA(chosen))
        elif name == "ed25519" and isinstance(key, ed25519.Ed25519PublicKey) or name == "ed448" and isinstance(key, ed448.Ed448PublicKey):
            key.verify(signature, signed_bytes)
        else:
            raise TokenProblem(f"its signature algorithm ({name}) does not fit the signer's key")
    except InvalidSignature:
        raise TokenProblem("its signature does not verify with the signer's certificate "
                           "(the token was altered)") from None
    except (KeyError, ValueError, TypeError) as exc:
        raise TokenProblem(f"its signature cannot be checked ({_short(exc)})") from None


def _names_certificate(attrs: cms.CMSAttributes, cert_der: bytes) -> bool:
    """The ESS signing-certificate attribute (RFC 2634 / RFC 5816) names the signer's
    certificate by its hash; one of the two must be present."""
    v2 = _attribute(attrs, "signing_certificate_v2")
    if v2 is not None:
        first = v2["certs"][0]
        algo = first["hash_algorithm"]["algorithm"].native
        return hmac.compare_digest(hashlib.new(algo, cert_der).digest(),
                                   first["cert_hash"].native)
    v1 = _attribute(attrs, "signing_certificate")
    if v1 is not None:
        return hmac.compare_digest(hashlib.sha1(cert_der).digest(),
                                   v1["certs"][0]["cert_hash"].native)
    return False


def _valid_at(cert: x509.Certificate, when: datetime) -> bool:
    return cert.not_valid_before_utc <= when <= cert.not_valid_after_utc


def _subject(cert: x509.Certificate) -> str:
    return cert.subject.rfc4514_string() or "(no subject)"


def _is_time_stamping(cert: x509.Certificate) -> bool:
    try:
        usage = cert.extensions.get_extension_for_class(x509.ExtendedKeyUsage).value
    except x509.ExtensionNotFound:
        return False
    return ExtendedKeyUsageOID.TIME_STAMPING in usage


def _is_ca(cert: x509.Certificate) -> bool:
    try:
        return bool(cert.extensions.get_extension_for_class(x509.BasicConstraints).value.ca)
    except x509.ExtensionNotFound:
        return False


def _chain(signer: x509.Certificate, pool: list[x509.Certificate],
           trusted: list[x509.Certificate], when: datetime) -> x509.Certificate:
    """The trusted certificate the signer chains to: each link issued (and signed) by the
    next, every certificate valid at ``when``, every issuer below the anchor a CA."""
    anchors = {t.fingerprint(hashes.SHA256()): t for t in trusted}
    current, seen = signer, set()
    for _ in range(10):
        fp = current.fingerprint(hashes.SHA256())
        if fp in anchors:
            return anchors[fp]
        seen.add(fp)
        issuers = []
        for candidate in [*trusted, *pool]:
            cfp = candidate.fingerprint(hashes.SHA256())
            if cfp in seen or candidate.subject != current.issuer:
                continue
            try:
                current.verify_directly_issued_by(candidate)
            except (ValueError, TypeError, InvalidSignature):
                continue
            if _valid_at(candidate, when) and (cfp in anchors or _is_ca(candidate)):
                issuers.append((cfp not in anchors, candidate))  # an anchor first
        issuer = min(issuers, key=lambda pair: pair[0])[1] if issuers else None
        if issuer is None:
            break
        current = issuer
    raise TokenProblem(f"its signer ({_subject(signer)}) does not chain to any --tsa-cert "
                       "certificate")


def check_token(der: bytes, digest: str, *, nonce: int | None = None,
                trusted: list[x509.Certificate] | None = None) -> TokenInfo:
    """Check a token against the digest it must stamp (``sha256:<hex>``); see the module's
    docstring for what is checked. ``nonce``: the request's (a fresh answer); ``trusted``:
    the certificates the signer must chain to. Raises ``TokenProblem`` naming the first
    thing that does not hold."""
    try:
        return _check_token(der, digest, nonce, trusted)
    except TokenProblem:
        raise
    except (ValueError, TypeError, KeyError, IndexError, AttributeError) as exc:
        raise TokenProblem(f"a malformed token ({_short(exc)})") from None


def token_signer(der: bytes) -> str:
    """The subject of the certificate that signed a token (read, not checked)."""
    parsed = _parse(der)
    return _subject(_signer_certificate(parsed.signed["signer_infos"][0],
                                        _certificates(parsed.signed))[1])


def _check_token(der: bytes, digest: str, nonce: int | None,
                 trusted: list[x509.Certificate] | None) -> TokenInfo:
    parsed = _parse(der)
    info = parsed.info
    imprint = info["message_imprint"]
    if imprint["hash_algorithm"]["algorithm"].native != "sha256":
        raise TokenProblem(f"its imprint is {imprint['hash_algorithm']['algorithm'].native}, "
                           "not the SHA-256 asked for")
    if not hmac.compare_digest(imprint["hashed_message"].native, _imprint(digest)):
        raise TokenProblem(f"its imprint is not {digest} (a token of something else)")
    if nonce is not None and info["nonce"].native != nonce:
        raise TokenProblem("its nonce is not the request's (an answer to another request)")
    when = _gen_time(info)
    signers = parsed.signed["signer_infos"]
    if len(signers) != 1:
        raise TokenProblem(f"it has {len(signers)} signers, not one")
    signer = signers[0]
    certs = _certificates(parsed.signed)
    cert_der, cert = _signer_certificate(signer, certs)
    attrs = signer["signed_attrs"]
    if not attrs:
        raise TokenProblem("it has no signed attributes")
    content_type = _attribute(attrs, "content_type")
    if content_type is None or content_type.native != "tst_info":
        raise TokenProblem("its signed content type is not a TSTInfo")
    message_digest = _attribute(attrs, "message_digest")
    algo = signer["digest_algorithm"]["algorithm"].native
    if algo not in _HASHES or message_digest is None:
        raise TokenProblem("its signed attributes hold no usable message digest")
    if not hmac.compare_digest(hashlib.new(algo, parsed.content).digest(), message_digest.native):
        raise TokenProblem("its signed message digest does not match its TSTInfo (the token "
                           "was altered)")
    signed_bytes = b"\x31" + attrs.dump()[1:]  # [0] IMPLICIT → SET OF (RFC 5652, 5.4)
    _check_signature(signer, cert, signed_bytes)
    if not _names_certificate(attrs, cert_der):
        raise TokenProblem("its signing-certificate attribute does not name the signer's "
                           "certificate")
    if not _valid_at(cert, when):
        raise TokenProblem(f"its signer's certificate ({_subject(cert)}) was not valid at the "
                           f"token's time {stamp_text(when)} (expired or not yet valid)")
    if not _is_time_stamping(cert):
        raise TokenProblem(f"its signer's certificate ({_subject(cert)}) lacks the "
                           "time-stamping extended key usage")
    chained = None
    if trusted is not None:
        pool = [c for _, c in certs]
        chained = _subject(_chain(cert, pool, trusted, when))
    return TokenInfo(when, int(info["serial_number"].native), str(info["policy"].native),
                     info["nonce"].native, _subject(cert), chained)


def stamp_text(when: datetime) -> str:
    """``2027-03-02 10:14:07Z``: a token's time as printed (fractions of a second dropped)."""
    return when.astimezone(UTC).strftime("%Y-%m-%d %H:%M:%SZ")


def load_trusted(paths: list[str | Path]) -> list[x509.Certificate]:
    """The certificates of ``--tsa-cert`` files (PEM, one or more each)."""
    out: list[x509.Certificate] = []
    for given in paths:
        path = Path(given)
        try:
            data = path.read_bytes()
        except FileNotFoundError:
            raise BadInput(f"--tsa-cert {path}: no such file") from None
        except OSError as exc:
            raise BadInput(f"--tsa-cert {path}: cannot read it ({exc.strerror})") from None
        try:
            certs = x509.load_pem_x509_certificates(data)
        except ValueError:
            raise BadInput(f"--tsa-cert {path}: not a PEM certificate") from None
        out.extend(certs)
    return out


# --- where tokens are kept ---

def folder(plan: Path) -> Path:
    """``<stem>.timestamps/`` beside the plan."""
    return plan.with_name(f"{plan.stem}.timestamps")


def version_file(plan: Path, version: int) -> str:
    """The name (relative to the plan's folder) of a lock version's token."""
    return f"{folder(plan).name}/version-{version}.tsr"


def run_file(plan: Path, report_rel: str) -> str:
    """The name of a run's token: ``run-<report folder name>.tsr``, numbered on a clash."""
    base = re.sub(r"[^A-Za-z0-9._-]", "_", report_rel.rstrip("/").rsplit("/", 1)[-1]) or "report"
    name, n = f"run-{base}.tsr", 1
    while (plan.parent / folder(plan).name / name).exists():
        n += 1
        name = f"run-{base}-{n}.tsr"
    return f"{folder(plan).name}/{name}"


def write_token(plan: Path, file: str, der: bytes) -> Path:
    """Write a token to ``file`` (as :func:`version_file` or :func:`run_file` name it)."""
    target = plan.parent / file
    made = not target.parent.exists()
    target.parent.mkdir(exist_ok=True)
    if made:
        fsync_dir(plan.parent)
    replace_atomically(target, der)
    return target


def remove_token(plan: Path, file: str) -> None:
    """Undo :func:`write_token` (the step was not recorded); the folder goes when empty."""
    target = plan.parent / file
    target.unlink(missing_ok=True)
    try:
        target.parent.rmdir()
    except OSError:
        pass


def read_token(plan: Path, details: dict[str, Any]) -> bytes:
    """The token an entry's ``details.timestamp`` names, checked against its digest."""
    named = details.get(DETAILS_KEY)
    if not isinstance(named, dict):
        raise TokenProblem("no time-stamp recorded")
    file = named.get("file")
    if not isinstance(file, str) or file.count("/") != 1:
        raise TokenProblem(f"its token file {file!r} is not a file of {folder(plan).name}/")
    place, name = file.split("/")
    if place != folder(plan).name or not _FILE_NAME.fullmatch(name):
        raise TokenProblem(f"its token file {file!r} is not a file of {folder(plan).name}/")
    path = plan.parent / file
    if path.is_symlink() or path.parent.is_symlink():
        raise TokenProblem(f"{file}: a symbolic link, not the token prespec wrote")
    try:
        der = path.read_bytes()
    except FileNotFoundError:
        raise TokenProblem(f"{file}: missing") from None
    except OSError as exc:
        raise TokenProblem(f"{file}: cannot be read ({exc.strerror})") from None
    if sha256_tag(der) != named.get("token"):
        raise TokenProblem(f"{file}: is not the token the log recorded (its SHA-256 differs)")
    return der


def version_token(plan: str | Path, version: int) -> bytes | None:
    """The stored token of lock version ``version`` of ``plan``, or None when that version
    was not time-stamped. The token's digest is checked against its log entry; the log's
    chain is not (``prespec verify`` does that). Raises ``TokenProblem`` for a recorded
    token that is missing or differs."""
    plan = Path(plan)
    for entry in read_log(log_path(plan)):
        details = entry.get("details")
        if entry.get("action") in ("lock", "amend") and isinstance(details, dict) \
                and details.get("version") == version:
            if DETAILS_KEY not in details:
                return None
            return read_token(plan, details)
    return None


def results_digest(results_bytes: bytes) -> str:
    """What a run's token stamps: the SHA-256 of its ``results.json``."""
    return sha256_tag(results_bytes)


__all__ = ["DETAILS_KEY", "URL_VARIABLE", "Stamp", "TokenInfo", "TokenProblem",
           "authority_url", "check_token", "load_trusted", "read_token", "recorded_url",
           "request_token", "results_digest", "stamp_text", "token_signer", "token_time",
           "version_token", "write_token"]
