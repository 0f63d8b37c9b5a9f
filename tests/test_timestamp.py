"""RFC 3161 time-stamps of locks and runs, against a real authority of the tests' own
(``tests/tsa_server.py``: a throw-away CA and TSA made with cryptography, responses built with
asn1crypto), and checked independently of prespec by ``openssl ts`` (Debian's openssl)."""

from __future__ import annotations

import hashlib
import html
import os
import re
import shutil
import socket
import subprocess
from collections.abc import Callable, Iterator
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import pytest
from asn1crypto import cms, tsp
from tsa_server import Authority, AuthorityServer, make_ca, pem

import prespec.report
from prespec import api, audit, cli
from prespec.audit import timestamp as ts
from prespec.audit.lockfile import version_digest
from prespec.audit.log import entry_hash, entry_line, head_line
from prespec.demo.wound import PLAN_TEXT, demo_data
from prespec.errors import BadInput, IntegrityStop

OPENSSL = shutil.which("openssl")


@pytest.fixture(autouse=True)
def quick_render(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)
    monkeypatch.delenv(ts.URL_VARIABLE, raising=False)


@pytest.fixture(scope="module")
def authority() -> Iterator[AuthorityServer]:
    server = AuthorityServer(Authority())
    yield server
    server.close()


@pytest.fixture
def serve() -> Iterator[Callable[..., AuthorityServer]]:
    """A fresh authority per call (a mode, a key kind, an expired or non-TSA certificate)."""
    made: list[AuthorityServer] = []

    def start(**options: Any) -> AuthorityServer:
        server = AuthorityServer(Authority(**options))
        made.append(server)
        return server

    yield start
    for server in made:
        server.close()


def _digest(text: bytes = b"a version") -> str:
    return "sha256:" + hashlib.sha256(text).hexdigest()


def _study(tmp_path: Path) -> tuple[Path, Path]:
    plan = tmp_path / "trial.yaml"
    plan.write_text(PLAN_TEXT)
    data = tmp_path / "trial.csv"
    data.write_text(demo_data())
    return plan, data


def _ca_file(server: AuthorityServer, tmp_path: Path, name: str = "ca.pem") -> Path:
    return server.authority.write_ca(tmp_path / name)


def _files(folder: Path) -> list[str]:
    return sorted(p.relative_to(folder).as_posix() for p in folder.rglob("*"))


def _rechain(plan: Path, edit: Callable[[list[dict[str, Any]]], None]) -> None:
    """Edit the log's entries, then recompute every hash, link and the head (a forger's
    rebuilt chain)."""
    log = audit.log_path(plan)
    entries = audit.read_log(log)
    edit(entries)
    prev = audit.GENESIS
    for entry in entries:
        entry["prev"] = prev
        entry["hash"] = prev = entry_hash(entry)
    log.write_bytes(b"".join(entry_line(e) for e in entries))
    audit.head_path(plan).write_bytes(head_line(entries[-1]))


# --- the token itself, against the authority ---

@pytest.mark.parametrize("kind", ["ec", "rsa"])
def test_a_token_round_trip_checks_imprint_nonce_signature_and_chain(
        serve: Callable[..., AuthorityServer], kind: str) -> None:
    server = serve(kind=kind)
    before = datetime.now(UTC).replace(microsecond=0)
    stamp = ts.request_token(server.url, _digest())
    after = datetime.now(UTC)
    assert before <= stamp.time <= after
    assert stamp.url == server.url
    info = ts.check_token(stamp.der, _digest(), trusted=[server.authority.ca_cert])
    assert info.time == stamp.time == ts.token_time(stamp.der)
    assert info.serial == 1 and info.policy == "1.3.6.1.4.1.55555.1.1"
    assert info.signer == "CN=prespec test TSA,O=prespec tests"
    assert info.chained_to == "CN=prespec test root CA,O=prespec tests"
    request = tsp.TimeStampReq.load(server.authority.requests[-1])
    assert request["message_imprint"]["hash_algorithm"]["algorithm"].native == "sha256"
    assert request["message_imprint"]["hashed_message"].native == hashlib.sha256(
        b"a version").digest()
    assert request["cert_req"].native is True
    assert request["nonce"].native == info.nonce  # the answer carries the request's nonce


def test_the_authoritys_url_is_recorded_without_a_credential(
        authority: AuthorityServer) -> None:
    host_port = authority.url.removeprefix("http://").removesuffix("/tsa")
    stamp = ts.request_token(f"http://user:secret@{host_port}/tsa?apikey=hidden#x", _digest())
    assert stamp.url == authority.url
    assert ts.recorded_url("https://u:p@[::1]:8443/a/b?k=v") == "https://[::1]:8443/a/b"


@pytest.mark.parametrize(("mode", "reason"), [
    ("rejection", "answered 'rejection' (the policy is not accepted) [unaccepted_policy]"),
    ("wrong-imprint", "its imprint is not sha256:"),
    ("wrong-nonce", "its nonce is not the request's"),
    ("garbage", "not a time-stamp response"),
    ("http-error", "answered HTTP 503"),
    ("truncated", "not a time-stamp response (Insufficient data"),
    ("bad-signature", "its signature does not verify"),
    ("no-certificate", "does not hold the signer's certificate"),
])
def test_a_bad_answer_is_bad_input_naming_the_reason(
        serve: Callable[..., AuthorityServer], mode: str, reason: str) -> None:
    server = serve(mode=mode)
    with pytest.raises(BadInput, match="nothing was written") as caught:
        ts.request_token(server.url, _digest())
    assert reason in str(caught.value)
    assert str(caught.value).startswith(f"--timestamp {server.url}: ")


@pytest.mark.parametrize(("options", "reason"), [
    ({"expired": True}, "was not valid at the token's time"),
    ({"time_stamping": False}, "lacks the time-stamping extended key usage"),
])
def test_an_expired_or_non_tsa_certificate_is_refused(
        serve: Callable[..., AuthorityServer], options: dict[str, bool], reason: str) -> None:
    server = serve(**options)
    with pytest.raises(BadInput, match=reason):
        ts.request_token(server.url, _digest())
    token = _token(server.authority, _digest())  # the same token met later, by verify
    with pytest.raises(ts.TokenProblem, match=reason):
        ts.check_token(token, _digest())


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_an_unreachable_or_unusable_url_is_bad_input() -> None:
    url = f"http://127.0.0.1:{_free_port()}/tsa"  # nothing listens there
    with pytest.raises(BadInput, match="could not be reached"):
        ts.request_token(url, _digest(), timeout=5)
    for bad in ("file:///etc/passwd", "ftp://example.org/tsa", "127.0.0.1:80", "http://"):
        with pytest.raises(BadInput, match="give the http:// or https:// URL"):
            ts.authority_url(bad)
    assert ts.authority_url(None, {}) is None
    assert ts.authority_url(None, {ts.URL_VARIABLE: "http://tsa.example/"}) == \
        "http://tsa.example/"
    assert ts.authority_url("https://a.example/", {ts.URL_VARIABLE: "http://b/"}) == \
        "https://a.example/"


def _token(authority: Authority, digest: str) -> bytes:
    """A token made by the authority directly (no checks on the way)."""
    request = tsp.TimeStampReq({"version": "v1", "message_imprint": {
        "hash_algorithm": {"algorithm": "sha256"},
        "hashed_message": bytes.fromhex(digest.removeprefix("sha256:"))},
        "nonce": 12345, "cert_req": True}).dump()
    return ts.token_from_response(authority.respond(request))


def _flip(der: bytes, old: bytes, new: bytes) -> bytes:
    assert der.count(old) == 1
    return der.replace(old, new)


def test_tampering_with_any_signed_part_of_a_token_is_caught(authority: AuthorityServer) -> None:
    digest = _digest()
    token = _token(authority.authority, digest)
    info = ts.check_token(token, digest)
    # the time inside the TSTInfo: the signed message digest no longer matches
    when = info.time.strftime("%Y%m%d%H%M%SZ").encode()
    later = (info.time + timedelta(days=400)).strftime("%Y%m%d%H%M%SZ").encode()
    with pytest.raises(ts.TokenProblem, match="message digest does not match its TSTInfo"):
        ts.check_token(_flip(token, when, later), digest)
    # a new TSTInfo with its message digest attribute made to match: the signature fails
    forged = _resigned_content(token, info.time + timedelta(days=400))
    assert ts.token_time(forged) == info.time + timedelta(days=400)
    with pytest.raises(ts.TokenProblem, match="signature does not verify"):
        ts.check_token(forged, digest)
    # the signature itself
    parsed = cms.ContentInfo.load(token)
    signature = parsed["content"]["signer_infos"][0]["signature"].native
    bent = signature[:-1] + bytes([signature[-1] ^ 0x80])
    with pytest.raises(ts.TokenProblem, match="signature does not verify"):
        ts.check_token(_flip(token, signature, bent), digest)
    # another digest: a token of something else
    with pytest.raises(ts.TokenProblem, match="its imprint is not sha256:"):
        ts.check_token(token, _digest(b"another version"))
    with pytest.raises(ts.TokenProblem, match="not a time-stamp token"):
        ts.check_token(token[:-5], digest)
    with pytest.raises(ts.TokenProblem, match="not a time-stamp token"):
        ts.token_time(b"\x30\x03\x02\x01\x00")


def _resigned_content(token: bytes, when: datetime) -> bytes:
    """The token with another genTime and the signed message digest updated to it, the
    signature left as it was (what a forger without the TSA's key can do)."""
    info = cms.ContentInfo.load(token)
    signed = info["content"]
    tst = signed["encap_content_info"]["content"].parsed.copy()
    tst["gen_time"] = when
    content = tsp.TSTInfo.load(tst.dump(force=True))
    signed["encap_content_info"] = {"content_type": "tst_info", "content": content}
    attrs = signed["signer_infos"][0]["signed_attrs"]
    for attr in attrs:
        if attr["type"].native == "message_digest":
            attr["values"] = [hashlib.sha256(content.dump()).digest()]
    return info.dump(force=True)


def test_a_chain_to_another_ca_or_a_bad_tsa_cert_file_fails(authority: AuthorityServer,
                                                             tmp_path: Path) -> None:
    token = _token(authority.authority, _digest())
    _, other = make_ca("another root CA")
    with pytest.raises(ts.TokenProblem, match="does not chain to any --tsa-cert"):
        ts.check_token(token, _digest(), trusted=[other])
    pinned = ts.check_token(token, _digest(), trusted=[authority.authority.cert])
    assert pinned.chained_to == "CN=prespec test TSA,O=prespec tests"  # the TSA's own, pinned
    both = tmp_path / "both.pem"
    both.write_bytes(pem(other) + pem(authority.authority.ca_cert))
    assert len(ts.load_trusted([both])) == 2
    assert ts.check_token(token, _digest(), trusted=ts.load_trusted([both])).chained_to == \
        "CN=prespec test root CA,O=prespec tests"
    (tmp_path / "junk.pem").write_text("not a certificate")
    with pytest.raises(BadInput, match="junk.pem: not a PEM certificate"):
        ts.load_trusted([tmp_path / "junk.pem"])
    with pytest.raises(BadInput, match="gone.pem: no such file"):
        ts.load_trusted([tmp_path / "gone.pem"])


@pytest.mark.skipif(OPENSSL is None, reason="openssl is installed by .ci/run")
def test_openssl_reads_and_accepts_the_stored_tokens(authority: AuthorityServer,
                                                      tmp_path: Path) -> None:
    """Independently of prespec: ``openssl ts -reply -text`` parses each stored token and
    ``openssl ts -verify -digest`` accepts it against the authority's CA."""
    plan, data = _study(tmp_path)
    api.lock(plan, timestamp=authority.url)
    out = api.run(plan, data, timestamp=authority.url)
    ca = _ca_file(authority, tmp_path)
    record = audit.read_log(audit.log_path(plan))[0]["details"]["record"]
    results = hashlib.sha256((out.folder / "results.json").read_bytes()).hexdigest()
    for name, digest in (("version-1.tsr", record.removeprefix("sha256:")),
                         (f"run-{out.folder.name}.tsr", results)):
        token = tmp_path / "trial.timestamps" / name
        text = subprocess.run([OPENSSL, "ts", "-reply", "-token_in", "-in", token, "-text"],
                              capture_output=True, text=True, check=True).stdout
        assert "Policy OID: 1.3.6.1.4.1.55555.1.1" in text
        assert "Hash Algorithm: sha256" in text
        assert " ".join(digest[i:i + 2] for i in range(0, 16, 2)) in text  # the imprint
        shown = ts.token_time(token.read_bytes()).strftime("%b %e %H:%M:%S %Y GMT")
        assert f"Time stamp: {shown}" in text
        check = subprocess.run([OPENSSL, "ts", "-verify", "-digest", digest, "-token_in",
                                "-in", token, "-CAfile", ca], capture_output=True, text=True,
                                check=False)
        assert check.returncode == 0 and "Verification: OK" in check.stdout, check.stderr
        wrong = subprocess.run([OPENSSL, "ts", "-verify", "-digest", "00" * 32, "-token_in",
                                "-in", token, "-CAfile", ca], capture_output=True, text=True,
                                check=False)
        assert wrong.returncode != 0  # the same tool refuses another digest


# --- lock, amend, run and verify ---

def test_lock_run_verify_round_trip_with_the_checklist(authority: AuthorityServer,
                                                       tmp_path: Path) -> None:
    plan, data = _study(tmp_path)
    locked = api.lock(plan, timestamp=authority.url)
    assert locked.timestamp is not None and locked.timestamp.url == authority.url
    out = api.run(plan, data, timestamp=authority.url)
    entries = audit.read_log(audit.log_path(plan))
    lock_stamp = entries[0]["details"]["timestamp"]
    token = (tmp_path / lock_stamp["file"]).read_bytes()
    assert lock_stamp == {"token": "sha256:" + hashlib.sha256(token).hexdigest(),
                          "file": "trial.timestamps/version-1.tsr",
                          "authority": authority.url}
    lock_doc = audit.read_lock(audit.lock_path(plan))
    assert ts.check_token(token, version_digest(lock_doc["versions"][0])).time == \
        locked.timestamp.time
    assert ts.version_token(plan, 1) == token  # what the plan document shows
    assert ts.token_signer(token) == "CN=prespec test TSA,O=prespec tests"
    assert entries[1]["details"]["timestamp"]["file"] == f"trial.timestamps/run-{out.folder.name}.tsr"
    res = api.verify(plan, tsa_certs=[_ca_file(authority, tmp_path)])
    stamps = [line for line in res.passed if line.startswith("time-stamps:")]
    assert stamps == [
        (f"time-stamps: 2 tokens (version 1, run 1) from {authority.url}, each stamping its "
        "entry's digest, signatures valid, signed by CN=prespec test TSA,O=prespec tests with "
        "the time-stamping usage, chained to --tsa-cert CN=prespec test root CA,O=prespec tests")]
    lock_time = ts.stamp_text(locked.timestamp.time)
    run_time = ts.stamp_text(out.timestamp.time)
    assert [line for line in res.passed if line.startswith("when:")] == [
        (f"when: version 1 locked at {lock_time} (time-stamped by CN=prespec test TSA,O=prespec "
        f"tests; machine clock {entries[0]['at']}); first run (run 1) at "
        f"{run_time} (time-stamped; machine clock {entries[1]['at']}), after the lock's "
        "time-stamp")]
    assert res.summary == "verified: files intact; the run was the locked analysis"
    assert res.notes == []


def test_an_unstamped_study_verifies_as_before_and_has_no_timestamp_key(tmp_path: Path) -> None:
    plan, data = _study(tmp_path)
    api.lock(plan)
    api.run(plan, data)
    assert all("timestamp" not in e["details"] for e in audit.read_log(audit.log_path(plan)))
    assert not (tmp_path / "trial.timestamps").exists()
    res = api.verify(plan)
    assert not [line for line in res.passed if line.startswith(("time-stamps", "when"))]


def test_the_environment_variable_names_the_authority(authority: AuthorityServer,
                                                      tmp_path: Path,
                                                      monkeypatch: pytest.MonkeyPatch) -> None:
    plan, _ = _study(tmp_path)
    requests_before = len(authority.authority.requests)
    monkeypatch.setenv(ts.URL_VARIABLE, authority.url)
    api.lock(plan)
    (entry,) = audit.read_log(audit.log_path(plan))
    assert entry["details"]["timestamp"]["authority"] == authority.url
    again = api.lock(plan)  # already locked: nothing asked, and it says so
    assert not again.created and again.timestamp is None
    assert again.note == ("no time-stamp was asked for: a version is time-stamped when it is "
                          "locked")
    assert len(authority.authority.requests) == 1 + requests_before


@pytest.mark.parametrize("mode", ["rejection", "garbage", "unreachable"])
def test_a_failed_stamp_locks_nothing_and_writes_nothing(
        serve: Callable[..., AuthorityServer], tmp_path: Path, mode: str) -> None:
    plan, data = _study(tmp_path)
    url = (f"http://127.0.0.1:{_free_port()}/tsa" if mode == "unreachable" else
           serve(mode=mode).url)
    before = _files(tmp_path)
    assert cli.main(["lock", str(plan), "--timestamp", url]) == 2
    assert _files(tmp_path) == before  # no lock, no log, no token folder
    api.lock(plan)
    api.run(plan, data)
    before = {p: p.read_bytes() for p in tmp_path.rglob("*") if p.is_file()}
    with pytest.raises(BadInput, match="nothing was written"):
        api.run(plan, data, timestamp=url)
    assert {p: p.read_bytes() for p in tmp_path.rglob("*") if p.is_file()} == before
    assert len(list((tmp_path / "reports" / "trial").iterdir())) == 1
    plan.write_text(PLAN_TEXT.replace("alpha: 0.05", "alpha: 0.025"))
    with pytest.raises(BadInput, match="nothing was written"):
        api.amend(plan, reason="a stricter alpha", timestamp=url)
    assert audit.read_lock(audit.lock_path(plan))["versions"][-1]["version"] == 1
    assert len(audit.read_log(audit.log_path(plan))) == 2


def test_a_stamp_whose_entry_fails_leaves_no_token(authority: AuthorityServer, tmp_path: Path,
                                                   monkeypatch: pytest.MonkeyPatch) -> None:
    """The token is written just before the entry; when the entry is not written (here a
    failing append), the token goes with everything else the step made."""
    from prespec.audit import record

    plan, data = _study(tmp_path)

    def broken(*args: Any, **kwargs: Any) -> Any:
        raise OSError(28, "No space left on device")

    with monkeypatch.context() as patched:
        patched.setattr(record, "append", broken)
        with pytest.raises(BadInput, match="no space left"):
            api.lock(plan, timestamp=authority.url)
    assert _files(tmp_path) == ["trial.csv", "trial.yaml"]
    api.lock(plan, timestamp=authority.url)
    before = _files(tmp_path)
    with monkeypatch.context() as patched:
        patched.setattr(record, "append", broken)
        with pytest.raises(BadInput, match="no space left"):
            api.run(plan, data, timestamp=authority.url)
    assert _files(tmp_path) == before
    assert _files(tmp_path / "trial.timestamps") == ["version-1.tsr"]


def test_an_amendment_is_stamped_and_each_version_gets_its_line(authority: AuthorityServer,
                                                                tmp_path: Path) -> None:
    plan, data = _study(tmp_path)
    api.lock(plan, timestamp=authority.url)
    plan.write_text(PLAN_TEXT.replace("alpha: 0.05", "alpha: 0.025"))
    amended = api.amend(plan, reason="a stricter alpha", timestamp=authority.url)
    assert amended.version == 2 and amended.timestamp is not None
    assert (tmp_path / "trial.timestamps" / "version-2.tsr").is_file()
    api.run(plan, data)  # not time-stamped
    res = api.verify(plan, tsa_certs=[_ca_file(authority, tmp_path)])
    when = [line for line in res.passed if line.startswith("when:")]
    assert len(when) == 2
    assert when[0].startswith("when: version 1 locked at ") and \
        when[0].endswith("; no run of it on record")
    run_at = audit.read_log(audit.log_path(plan))[2]["at"]
    assert when[1].endswith(f"; first run (run 1) at {run_at} by the machine's clock only "
                            "(not time-stamped)")
    assert ts.version_token(plan, 2) == (tmp_path / "trial.timestamps/version-2.tsr").read_bytes()
    assert ts.version_token(plan, 3) is None


def test_verify_with_tsa_cert_requires_every_version_stamped(authority: AuthorityServer,
                                                            tmp_path: Path) -> None:
    plan, _ = _study(tmp_path)
    api.lock(plan)
    with pytest.raises(IntegrityStop, match=r"--tsa-cert: log entry 1 \(version 1\) is not "
                       "time-stamped"):
        api.verify(plan, tsa_certs=[_ca_file(authority, tmp_path)])


def test_verify_fails_on_a_wrong_certificate(authority: AuthorityServer, tmp_path: Path) -> None:
    plan, _ = _study(tmp_path)
    api.lock(plan, timestamp=authority.url)
    other = tmp_path / "other.pem"
    other.write_bytes(pem(make_ca("another root CA")[1]))
    with pytest.raises(IntegrityStop, match=r"log entry 1 \(version 1\): time-stamp: its "
                       "signer .* does not chain to any --tsa-cert certificate"):
        api.verify(plan, tsa_certs=[other])
    assert cli.main(["verify", str(plan), "--tsa-cert", str(tmp_path / "nothing.pem")]) == 3


def test_verify_fails_on_a_swapped_missing_or_foreign_token(authority: AuthorityServer,
                                                           tmp_path: Path) -> None:
    plan, data = _study(tmp_path)
    api.lock(plan, timestamp=authority.url)
    out = api.run(plan, data, timestamp=authority.url)
    folder = tmp_path / "trial.timestamps"
    version_token = folder / "version-1.tsr"
    run_token = folder / f"run-{out.folder.name}.tsr"
    kept = version_token.read_bytes()
    version_token.write_bytes(run_token.read_bytes())  # swapped
    with pytest.raises(IntegrityStop, match="is not the token the log recorded"):
        api.verify(plan)
    version_token.unlink()
    with pytest.raises(IntegrityStop, match="version-1.tsr: missing"):
        api.verify(plan)
    # a forger swaps the token and rebuilds the chain with its digest: the imprint tells
    version_token.write_bytes(run_token.read_bytes())

    def swap(entries: list[dict[str, Any]]) -> None:
        entries[0]["details"]["timestamp"]["token"] = "sha256:" + hashlib.sha256(
            run_token.read_bytes()).hexdigest()

    _rechain(plan, swap)
    with pytest.raises(IntegrityStop, match=r"log entry 1 \(version 1\): time-stamp: its "
                       "imprint is not sha256:"):
        api.verify(plan)
    version_token.write_bytes(kept)

    def back(entries: list[dict[str, Any]]) -> None:
        entries[0]["details"]["timestamp"]["token"] = "sha256:" + hashlib.sha256(
            kept).hexdigest()

    _rechain(plan, back)
    api.verify(plan)

    def outside(entries: list[dict[str, Any]]) -> None:
        entries[0]["details"]["timestamp"]["file"] = "../elsewhere/version-1.tsr"

    _rechain(plan, outside)
    with pytest.raises(IntegrityStop, match="is not a file of trial.timestamps/"):
        api.verify(plan)


def test_a_run_stamped_before_its_lock_fails(serve: Callable[..., AuthorityServer],
                                             tmp_path: Path) -> None:
    server = serve()
    plan, data = _study(tmp_path)
    api.lock(plan, timestamp=server.url)
    server.authority.clock = lambda: datetime.now(UTC) - timedelta(minutes=30)
    api.run(plan, data, timestamp=server.url)
    with pytest.raises(IntegrityStop, match=r"log entry 2 \(run 1\): time-stamped at .*, before "
                       r"its lock \(version 1, time-stamped at "):
        api.verify(plan)
    # an unstamped amendment in between: the run still may not precede version 1's stamp
    other = tmp_path / "other"
    other.mkdir()
    plan, data = _study(other)
    server.authority.clock = None
    api.lock(plan, timestamp=server.url)
    plan.write_text(PLAN_TEXT.replace("alpha: 0.05", "alpha: 0.025"))
    api.amend(plan, reason="a stricter alpha")
    server.authority.clock = lambda: datetime.now(UTC) - timedelta(minutes=30)
    api.run(plan, data, timestamp=server.url)
    with pytest.raises(IntegrityStop, match=r"log entry 3 \(run 1\): time-stamped at .*, before "
                       r"its lock \(version 1, time-stamped at "):
        api.verify(plan)


def test_clocks_that_disagree_get_a_note_and_stray_tokens_are_named(
        serve: Callable[..., AuthorityServer], tmp_path: Path) -> None:
    server = serve()
    server.authority.clock = lambda: datetime.now(UTC) + timedelta(hours=3)
    plan, _ = _study(tmp_path)
    api.lock(plan, timestamp=server.url)
    (tmp_path / "trial.timestamps" / "version-2.tsr").write_bytes(b"left behind")
    res = api.verify(plan)
    assert next(n for n in res.notes if "clock" in n).startswith(
        "version 1: the machine's clock (")
    assert re.search(r"differ by (2 h 59 min|3 h|3 h 1 s);", res.notes[0])  # seconds cut
    assert res.notes[1] == ("trial.timestamps/version-2.tsr: a time-stamp token no log entry "
                            "names (left by a step stopped before its entry); not part of the "
                            "record")


def test_the_command_prints_the_time_stamp(authority: AuthorityServer, tmp_path: Path,
                                           capsys: pytest.CaptureFixture[str]) -> None:
    plan, _data = _study(tmp_path)
    assert cli.main(["lock", str(plan), "--timestamp", authority.url]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[0] == f"locked {plan} as version 1"
    when = ts.stamp_text(ts.token_time((tmp_path / "trial.timestamps/version-1.tsr").read_bytes()))
    assert lines[1] == f"time-stamped at {when} by {authority.url} (the authority's clock)"
    ca = str(_ca_file(authority, tmp_path))
    assert cli.main(["verify", str(plan), "--tsa-cert", ca, "--tsa-cert", ca]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[-2].startswith(f"ok    when: version 1 locked at {when} (time-stamped by ")
    assert os.environ.get(ts.URL_VARIABLE) is None


def test_the_docs_name_the_lines_verify_prints() -> None:
    root = Path(__file__).resolve().parents[1]
    checks = (root / "docs" / "verify.md").read_text("utf-8")
    section = checks[checks.index("## The checks, in order"):checks.index("## Exit statuses")]
    assert "**`time-stamps:`**" in section and "**`when:`**" in section
    assert section.index("**`time-stamps:`**") < section.index("**`expected fingerprint:`**")
    files = (root / "docs" / "files.md").read_text("utf-8")
    assert "## Time-stamp tokens: `<stem>.timestamps/`" in files
    assert "(files.md#time-stamp-tokens-stemtimestamps)" in checks


def test_through_the_command_lock_and_verify(authority: AuthorityServer, tmp_path: Path) -> None:
    """End to end: ``prespec lock`` with PRESPEC_TSA_URL, a run, ``prespec verify --tsa-cert``,
    and an unreachable authority (exit 2, one line, nothing written)."""
    import sys

    plan, data = _study(tmp_path)
    command = [sys.executable, "-m", "prespec"]
    env = {**os.environ, ts.URL_VARIABLE: authority.url}
    down = {**os.environ, ts.URL_VARIABLE: f"http://127.0.0.1:{_free_port()}/tsa"}
    refused = subprocess.run([*command, "lock", "trial.yaml"], cwd=tmp_path, env=down,
                             capture_output=True, text=True, check=False, timeout=300)
    assert refused.returncode == 2 and refused.stdout == ""
    assert refused.stderr.startswith("prespec: --timestamp http://127.0.0.1:")
    assert refused.stderr.endswith("could not be reached ([Errno 111] Connection refused); "
                                   "nothing was written\n")
    assert _files(tmp_path) == ["trial.csv", "trial.yaml"]
    locked = subprocess.run([*command, "lock", "trial.yaml"], cwd=tmp_path, env=env,
                            capture_output=True, text=True, check=True, timeout=300)
    assert locked.stdout.splitlines()[1].startswith("time-stamped at ")
    api.run(plan, data, timestamp=authority.url)
    ca = _ca_file(authority, tmp_path)
    done = subprocess.run([*command, "verify", "trial.yaml", "--tsa-cert", str(ca)],
                          cwd=tmp_path, capture_output=True, text=True, check=True, timeout=300)
    lines = done.stdout.splitlines()
    assert lines[4].startswith("ok    time-stamps: 2 tokens (version 1, run 1) from ")
    assert lines[5].startswith("ok    when: version 1 locked at ")
    assert ", after the lock's time-stamp" in lines[5]
    assert lines[-1] == "verified: files intact; the run was the locked analysis"


# --- the plan document shows the version's trusted time ---

def test_the_plan_document_shows_the_locks_trusted_time(
        authority: AuthorityServer, tmp_path: Path) -> None:
    plan, _ = _study(tmp_path)
    api.lock(plan, actor="ana", timestamp=authority.url)
    der = ts.version_token(plan, 1)
    entry = audit.read_log(audit.log_path(plan))[0]
    info = ts.check_token(der, entry["details"]["record"])  # the authority's own time
    made = api.describe(plan)
    expected = (f"{ts.stamp_text(info.time)} by {info.signer} ({authority.url}; the "
                "authority's clock)")
    assert made.timestamp == expected
    text = html.unescape(re.sub(r"\s+", " ", re.sub(r"<[^>]+>", "",
                                                     made.html.read_text("utf-8"))))
    assert expected in text and "no trusted time-stamp" not in text
    assert api.verify(plan, document=made.html).summary.startswith("verified")
    # a token swapped for another version's is refused, not shown
    other = ts.request_token(authority.url, _digest()).der
    (plan.parent / ts.version_file(plan, 1)).write_bytes(other)
    with pytest.raises(IntegrityStop, match=r"^version 1: its time-stamp token does not hold"):
        api.describe(plan, out=tmp_path / "again.html")
    assert not (tmp_path / "again.html").exists()
