"""Digital signatures on sign-off (PAdES B-B) and countersignature, and their checks.

The reference for every signature is pyHanko's own validator, called here directly; the
certificates' subjects and fingerprints are recomputed with the ``cryptography`` package
from the PEM files, and the ledger is read with plain sqlite3. Keys are throwaway ones
made for the test.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import io
import os
import shutil
from pathlib import Path

import pypdf
import pytest
from cryptography import x509
from cryptography.hazmat.primitives.serialization import Encoding

from tests.conftest import ledger_entries, run_cli

PASS_ENV = "TEST_SIGNER_PASS"
PASSPHRASE = "correct horse"        # a test passphrase, for throwaway keys only
PERIOD = "2026-11-30"
UNSIGNED = f"{PERIOD}/tarnbrook-valley-{PERIOD}.pdf"
SIGNED = f"{PERIOD}/tarnbrook-valley-{PERIOD}-r2.pdf"
COUNTERSIGNED = f"{PERIOD}/tarnbrook-valley-{PERIOD}-r3.pdf"


def _cert(pem_path: Path) -> x509.Certificate:
    return x509.load_pem_x509_certificate(pem_path.read_bytes())


def _tree(folder: Path) -> dict[str, str]:
    return {str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


@pytest.fixture(scope="module")
def keys(tmp_path_factory) -> Path:
    from reporter.archive.keys import make_demo_key

    folder = tmp_path_factory.mktemp("keys")
    secret = PASSPHRASE.encode()
    make_demo_key(folder / "chair.p12", secret, common_name="TEST chair")
    make_demo_key(folder / "secretary.p12", secret, common_name="TEST secretary")
    make_demo_key(folder / "expired.p12", secret, common_name="TEST expired", days=10,
                  not_before=dt.datetime.now(dt.UTC) - dt.timedelta(days=40))
    make_demo_key(folder / "mismatched.p12", secret, common_name="TEST mismatched",
                  mismatched=True)
    return folder


@pytest.fixture(scope="module")
def archive(demo_build, keys, tmp_path_factory) -> tuple[Path, list[str]]:
    """The demo pack signed off without a key (entry 1), again with the chair's key
    (entry 2, --supersedes), then countersigned by the secretary (entry 3). Returns the
    archive and the three commands' standard output."""
    from reporter.cli import main

    arch = tmp_path_factory.mktemp("signed") / "archive"
    common = [str(demo_build), "--archive", str(arch), "--quiet", "--by", "Ruth Okafor"]
    outs = []
    old = os.environ.get(PASS_ENV)
    os.environ[PASS_ENV] = PASSPHRASE
    try:
        import contextlib

        for argv in (["sign-off", *common],
                     ["sign-off", *common, "--supersedes", "--reason", "add a signature",
                      "--key", str(keys / "chair.p12"), "--key-pass-env", PASS_ENV],
                     ["countersign", str(arch / SIGNED), "--archive", str(arch), "--by",
                      "Tomas Lindqvist", "--role", "Secretary", "--key",
                      str(keys / "secretary.p12"), "--key-pass-env", PASS_ENV]):
            buf = io.StringIO()
            with contextlib.redirect_stdout(buf):
                assert main(argv) == 0, argv
            outs.append(buf.getvalue())
    finally:
        if old is None:
            os.environ.pop(PASS_ENV)
        else:
            os.environ[PASS_ENV] = old
    return arch, outs


def _pyhanko_statuses(pdf: bytes, roots: list[Path]):
    """pyHanko's own validation of every signature (the reference)."""
    from asn1crypto import pem
    from asn1crypto import x509 as ax509
    from pyhanko.pdf_utils.reader import PdfFileReader
    from pyhanko.sign.validation import validate_pdf_signature
    from pyhanko_certvalidator import ValidationContext

    trust = [ax509.Certificate.load(pem.unarmor(p.read_bytes())[2]) for p in roots]
    reader = PdfFileReader(io.BytesIO(pdf))
    # skip_diff: pyHanko's difference analysis walks every object of the tagged pack
    # (minutes); what follows a signature is checked by the tool and tested below
    return [validate_pdf_signature(s, ValidationContext(trust_roots=trust,
                                                        allow_fetching=False),
                                   skip_diff=True)
            for s in reader.embedded_signatures]


def test_unsigned_sign_off_says_so(archive):
    arch, outs = archive
    assert "the PDF carries no digital signature" in outs[0]
    last_page = pypdf.PdfReader(arch / UNSIGNED).pages[-1].extract_text()
    assert "this PDF carries no digital signature" in " ".join(last_page.split())
    assert _pyhanko_statuses((arch / UNSIGNED).read_bytes(), []) == []
    assert ledger_entries(arch)[0].get("cert_sha256") is None


def test_signed_entry_records_the_certificate(archive, keys):
    arch, outs = archive
    cert = _cert(keys / "chair.pem")
    digest = hashlib.sha256(cert.public_bytes(Encoding.DER)).hexdigest()
    entry = ledger_entries(arch)[1]
    assert entry["cert_subject"] == cert.subject.rfc4514_string()
    assert "TEST chair" in entry["cert_subject"]
    assert entry["cert_sha256"] == digest
    assert digest in outs[1]
    # the signature's own time: within a minute after the sign-off time the page shows
    signed = dt.datetime.strptime(entry["signed_utc"], "%Y-%m-%dT%H:%M:%SZ")
    in_sig = dt.datetime.strptime(entry["cert_signed_utc"], "%Y-%m-%dT%H:%M:%SZ")
    assert dt.timedelta(0) <= in_sig - signed <= dt.timedelta(minutes=1)
    # ... and on the sign-off page
    text = " ".join(pypdf.PdfReader(arch / SIGNED).pages[-1].extract_text().split())
    assert digest in text.replace(" ", "") or digest in text
    assert "TEST chair" in text


def test_signed_pdf_passes_pyhanko_validation(archive, keys):
    arch, _ = archive
    (status,) = _pyhanko_statuses((arch / SIGNED).read_bytes(), [keys / "chair.pem"])
    assert status.intact and status.valid and status.trusted
    assert status.coverage.name == "ENTIRE_FILE"
    assert status.signing_cert.subject.native["common_name"] == "TEST chair"


def test_countersignature_keeps_the_first_one(archive, keys):
    arch, outs = archive
    first, second = (arch / SIGNED).read_bytes(), (arch / COUNTERSIGNED).read_bytes()
    assert second.startswith(first) and len(second) > len(first)   # an incremental update
    s1, s2 = _pyhanko_statuses(second, [keys / "chair.pem", keys / "secretary.pem"])
    assert s1.intact and s1.valid and s1.trusted and s2.intact and s2.valid and s2.trusted
    assert s1.coverage.name == "ENTIRE_REVISION" and s2.coverage.name == "ENTIRE_FILE"
    # what follows the first signature is only the second signature
    from reporter.archive.signature import check_signatures

    c1, c2 = check_signatures(second)
    assert c1.ok and c1.later_changes is None and not c1.whole_document
    assert c2.ok and c2.whole_document
    assert s2.signing_cert.subject.native["common_name"] == "TEST secretary"
    entries = ledger_entries(arch)
    assert [e["revision"] for e in entries] == [1, 2, 3]
    assert entries[2]["supersedes"] == entries[1]["seq"]
    assert entries[2]["signer"] == "Tomas Lindqvist"
    assert "TEST secretary" in entries[2]["cert_subject"]
    # PDF/A-3a is still declared after both updates
    xmp = pypdf.PdfReader(io.BytesIO(second)).xmp_metadata.rdf_root.toxml()
    assert 'pdfaid:part="3"' in xmp and 'pdfaid:conformance="A"' in xmp


def test_archive_with_signed_entries_verifies(archive, capsys):
    arch, _ = archive
    code, out, _ = run_cli(capsys, "verify", "--archive", arch)
    assert code == 0 and "archive intact: 3 entries" in out


def test_verify_file_reports_each_signer(archive, keys, tmp_path, capsys):
    arch, _ = archive
    roots = tmp_path / "roots.pem"
    roots.write_bytes((keys / "chair.pem").read_bytes() + (keys / "secretary.pem").read_bytes())
    code, out, _ = run_cli(capsys, "verify", arch / COUNTERSIGNED, "--archive", arch,
                           "--trust", roots)
    assert code == 0, out
    lines = [ln for ln in out.splitlines() if ln.startswith("signature ")]
    assert len(lines) == 2
    assert "TEST chair" in lines[0] and "TEST secretary" in lines[1]
    assert all("intact" in ln and "chain to a given root: yes" in ln for ln in lines)
    assert "covers the whole document" in lines[1]
    # only the chair's root trusted: the secretary's chain fails
    code, out, _ = run_cli(capsys, "verify", arch / COUNTERSIGNED, "--archive", arch,
                           "--trust", keys / "chair.pem")
    assert code == 1 and "chain to a given root: NO" in out


def test_changed_and_stripped_pdfs_are_reported(archive, tmp_path, capsys):
    arch, _ = archive
    data = (arch / SIGNED).read_bytes()
    # a byte changed inside the signed range (the document's own producer string)
    at = data.index(b"/Producer")
    changed = tmp_path / "changed.pdf"
    changed.write_bytes(data[:at + 2] + bytes([data[at + 2] ^ 0x20]) + data[at + 3:])
    code, out, _ = run_cli(capsys, "verify", changed, "--archive", arch)
    assert code == 1
    assert "NOT intact" in out and "NOT in the archive" in out
    # the signature's update cut off: the document as it was before signing
    stripped = tmp_path / "stripped.pdf"
    stripped.write_bytes(data[:data.index(b"%%EOF") + 6])
    assert pypdf.PdfReader(stripped).pages       # still a readable PDF
    code, out, _ = run_cli(capsys, "verify", stripped, "--archive", arch)
    assert code == 1
    assert "carries no digital signature" in out and "NOT in the archive" in out


@pytest.mark.parametrize("key, env, message", [
    ("chair.p12", "wrong", "wrong passphrase"),
    ("expired.p12", PASSPHRASE, "certificate expired on"),
    ("mismatched.p12", PASSPHRASE, "does not belong to the certificate"),
    ("absent.p12", PASSPHRASE, "no such key file"),
])
def test_bad_keys_change_nothing(archive, demo_build, keys, key, env, message, monkeypatch,
                                 capsys, tmp_path):
    arch, _ = archive
    copy = tmp_path / "archive"
    shutil.copytree(arch, copy)
    before = _tree(copy)
    monkeypatch.setenv(PASS_ENV, env)
    for argv in (["sign-off", demo_build, "--archive", copy, "--by", "X", "--supersedes",
                  "--reason", "r", "--key", keys / key, "--key-pass-env", PASS_ENV],
                 ["countersign", copy / COUNTERSIGNED, "--archive", copy, "--by", "X",
                  "--key", keys / key, "--key-pass-env", PASS_ENV]):
        code, out, err = run_cli(capsys, *argv)
        assert code == 2
        first = err.splitlines()[0]
        assert first.startswith(str(keys / key)) and message in first
        assert "Traceback" not in err
        assert _tree(copy) == before


def test_no_passphrase_without_terminal(archive, demo_build, keys, capsys, monkeypatch):
    arch, _ = archive
    monkeypatch.setattr("sys.stdin", io.StringIO(""))     # not a terminal
    code, _, err = run_cli(capsys, "countersign", arch / COUNTERSIGNED, "--archive", arch,
                           "--by", "X", "--key", keys / "chair.p12")
    assert code == 2 and "--key-pass-env" in err


def test_ledger_without_signature_columns_still_verifies(tmp_path):
    """An archive made before the signature columns: its entries keep their hashes, and the
    first signed entry adds the columns; blanking a set column is caught."""
    import sqlite3

    from reporter.archive.ledger import append, connect_for_writing
    from reporter.archive.verify import chain_findings, load_entries

    base = {"pack_name": "p", "period_end": PERIOD, "title": "t", "organisation": "o",
            "signer": "s", "role": None, "minute_ref": None, "note": None,
            "signed_utc": "2026-12-01T00:00:00Z", "pdf_path": "x.pdf", "pdf_sha256": "0",
            "files": "{}", "inputs": "{}", "tool_version": "0", "supersedes": None,
            "reason": None}
    con = connect_for_writing(tmp_path)
    con.execute("BEGIN IMMEDIATE")
    old = append(con, dict(base, revision=1))
    con.execute("COMMIT")
    columns = {r[1] for r in con.execute("PRAGMA table_info(entries)")}
    assert "cert_sha256" not in columns           # unsigned-only ledger: the old schema
    con.execute("BEGIN IMMEDIATE")
    append(con, dict(base, revision=2, cert_subject="CN=a", cert_sha256="ab" * 32,
                     cert_signed_utc="2026-12-01T00:00:01Z"))
    con.execute("COMMIT")
    con.close()
    entries = load_entries(tmp_path)
    assert entries[0].entry_hash == old.entry_hash and chain_findings(entries) == []
    con = sqlite3.connect(tmp_path / "ledger.sqlite")
    con.execute("UPDATE entries SET cert_sha256 = NULL WHERE seq = 2")
    con.commit()
    con.close()
    assert [f.kind for f in chain_findings(load_entries(tmp_path))] == ["ledger-edited"]


def test_a_later_change_that_is_not_a_signature_is_reported(archive):
    """An incremental update after the signatures that changes the document itself (here
    the catalog's language) keeps the signed bytes intact but is reported."""
    from pyhanko.pdf_utils import generic
    from pyhanko.pdf_utils.incremental_writer import IncrementalPdfFileWriter

    from reporter.archive.signature import check_signatures

    arch, _ = archive
    writer = IncrementalPdfFileWriter(io.BytesIO((arch / COUNTERSIGNED).read_bytes()))
    writer.root["/Lang"] = generic.pdf_string("fr")
    writer.update_root()
    out = io.BytesIO()
    writer.write(out)
    checks = check_signatures(out.getvalue())
    assert [c.intact for c in checks] == [True, True]
    assert all("the catalog itself was changed" in c.later_changes for c in checks)
    assert not any(c.ok for c in checks)


@pytest.mark.parametrize(("option", "value"), [
    ("--by", "Tomas \u202eLindqvist"), ("--role", "Secretary\u200b"),
    ("--minute-ref", "IC-2026-12/\u206601")])
def test_invisible_characters_in_countersign_options_change_nothing(
        archive, keys, monkeypatch, capsys, tmp_path, option, value):
    arch, _ = archive
    copy = tmp_path / "archive"
    shutil.copytree(arch, copy)
    before = _tree(copy)
    monkeypatch.setenv(PASS_ENV, PASSPHRASE)
    fields = {"--by": "Tomas Lindqvist", option: value}
    code, _, err = run_cli(capsys, "countersign", copy / COUNTERSIGNED, "--archive", copy,
                           *[x for kv in fields.items() for x in kv],
                           "--key", keys / "chair.p12", "--key-pass-env", PASS_ENV)
    assert code == 2
    lines = err.splitlines()
    assert lines[0].startswith(f"{option}: contains an invisible control character U+")
    assert lines[1:] == ["reporter: 1 error(s) in the inputs; nothing was written"]
    assert _tree(copy) == before
