"""Sign-off, the ledger's hash chain, verify and repair.

The signed PDF is opened with pypdf (an independent PDF reader); hashes are recomputed with
hashlib and the ledger is read with plain sqlite3 queries, not through the tool's modules.
"""

from __future__ import annotations

import hashlib
import io
import json
import shutil
import sqlite3
import stat
from pathlib import Path

import pypdf
import pytest

from tests.conftest import DEMO, SIGNER, ledger_entries, run_cli

PERIOD = "2026-11-30"
FIRST = f"{PERIOD}/tarnbrook-valley-{PERIOD}.pdf"
SECOND = f"{PERIOD}/tarnbrook-valley-{PERIOD}-r2.pdf"
INPUT_FILES = ["holdings.csv", "returns.csv", "market.csv", "risk_free.csv", "factors.csv",
               "benchmark_sectors.csv", "cash_flows.csv"]


def sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()




@pytest.fixture
def archive_copy(signed_archive, tmp_path) -> Path:
    dest = tmp_path / "archive"
    shutil.copytree(signed_archive, dest)
    return dest


@pytest.fixture(scope="module")
def signed_pdf(signed_archive) -> pypdf.PdfReader:
    return pypdf.PdfReader(io.BytesIO((signed_archive / FIRST).read_bytes()))


# --- the signed document --------------------------------------------------------------

def test_signed_pdf_declares_pdfa_3a(signed_pdf):
    # ISO 19005-3 identification schema: pdfaid:part = 3, pdfaid:conformance = A (tagged)
    xmp = signed_pdf.xmp_metadata.rdf_root.toxml()
    ns = "http://www.aiim.org/pdfa/ns/id/"
    assert f'xmlns:pdfaid="{ns}"' in xmp
    assert 'pdfaid:part="3"' in xmp and 'pdfaid:conformance="A"' in xmp
    # PDF/A needs an output intent (the colour space the document is printed in)
    assert "/OutputIntents" in signed_pdf.trailer["/Root"]


def test_signed_pdf_meets_the_pdfa_rules_we_can_check_without_verapdf(signed_pdf):
    """veraPDF is not in the package registries this project can reach, so these are the
    ISO 19005 requirements checked here with pypdf: no encryption; an output intent with an
    embedded ICC profile; every font used on a page embedded; every embedded file listed in
    the catalogue's /AF array with an /AFRelationship (PDF/A-3, clause 6.8)."""
    assert not signed_pdf.is_encrypted
    root = signed_pdf.trailer["/Root"]
    intent = root["/OutputIntents"][0].get_object()
    assert intent["/S"] == "/GTS_PDFA1" and "/DestOutputProfile" in intent
    for i, page in enumerate(signed_pdf.pages):
        for name, font in (page["/Resources"].get("/Font") or {}).items():
            font = font.get_object()
            desc = font.get("/FontDescriptor") or \
                font["/DescendantFonts"][0].get_object()["/FontDescriptor"]
            desc = desc.get_object()
            assert {"/FontFile", "/FontFile2", "/FontFile3"} & set(desc), (i, name)
    # WeasyPrint 70 lists each file specification twice in /AF (the same objects)
    af = [a.get_object() for a in {a.idnum: a for a in root["/AF"]}.values()]
    assert sorted(a["/F"] for a in af) == sorted(signed_pdf.attachments)
    assert {a["/AFRelationship"] for a in af} == {"/Source", "/Data"}


def test_attachments_carry_the_exact_inputs_and_results(signed_pdf, demo_build):
    att = {name: data[0] for name, data in signed_pdf.attachments.items()}
    assert att["pack.toml"] == (DEMO / "pack.toml").read_bytes()
    for name in INPUT_FILES:
        assert att[f"inputs/{name}"] == (DEMO / name).read_bytes(), name
    results = sorted(p.relative_to(demo_build).as_posix()
                     for p in (demo_build / "results").iterdir())
    assert len(results) >= 4
    for rel in results:
        assert att[rel] == (demo_build / rel).read_bytes(), rel
    # the commentary files are inputs too (hashed into the fingerprint)
    commentary = sorted(p.relative_to(DEMO).as_posix() for p in (DEMO / "commentary").rglob("*")
                        if p.is_file())
    assert commentary
    for rel in commentary:
        assert att[rel] == (DEMO / rel).read_bytes(), rel
    # the action log is an input too
    assert att["actions.csv"] == (DEMO / "actions.csv").read_bytes()
    assert len(att) == 1 + len(INPUT_FILES) + len(results) + len(commentary) + 1


def test_sign_off_page_states_who_when_and_the_input_hashes(signed_pdf, signed_archive):
    last = " ".join(signed_pdf.pages[-1].extract_text().split())
    assert "Sign-off record" in last
    for value in (SIGNER["by"], SIGNER["role"], SIGNER["minute_ref"], SIGNER["note"]):
        assert value in last, value
    entry = ledger_entries(signed_archive)[0]
    assert entry["signed_utc"].replace("T", " ").replace("Z", " UTC") in last
    for name in ["pack.toml", *INPUT_FILES]:
        assert sha(DEMO / name) in last.replace(" ", ""), name
    cover = " ".join(signed_pdf.pages[0].extract_text().split())
    assert f"Signed off by {SIGNER['by']}" in cover and "Draft" not in cover


def test_signed_pdf_keeps_the_reviewed_pages(signed_pdf, demo_build):
    reviewed = pypdf.PdfReader(demo_build / "pack.pdf")
    assert len(signed_pdf.pages) == len(reviewed.pages) + 1
    # every page after the cover is the reviewed page, word for word, except the page
    # count in the footer ("Page 2 of 15" where the draft said "Page 2 of 14")
    n = len(reviewed.pages)
    for i in range(1, n):
        signed = signed_pdf.pages[i].extract_text().replace(f"of {n + 1}", f"of {n}")
        assert signed == reviewed.pages[i].extract_text(), i


# --- the archive and its ledger ---------------------------------------------------------

def test_archive_layout_is_read_only_copies_of_the_build(signed_archive, demo_build):
    base = signed_archive / PERIOD / f"tarnbrook-valley-{PERIOD}"
    assert (base / "pack.html").read_bytes() == (demo_build / "pack.html").read_bytes()
    for p in (demo_build / "results").iterdir():
        assert (base / "results" / p.name).read_bytes() == p.read_bytes()
    for p in signed_archive.rglob("*"):
        if p.is_file() and p.name != "ledger.sqlite":
            assert not p.stat().st_mode & (stat.S_IWUSR | stat.S_IWGRP | stat.S_IWOTH), p


def test_ledger_entries_and_hash_chain_recomputed_independently(signed_archive, demo_build):
    entries = ledger_entries(signed_archive)
    assert [e["seq"] for e in entries] == [1, 2]
    first, second = entries
    assert first["signer"] == SIGNER["by"] and first["role"] == SIGNER["role"]
    assert first["minute_ref"] == SIGNER["minute_ref"] and first["revision"] == 1
    assert first["pdf_path"] == FIRST and first["pdf_sha256"] == sha(signed_archive / FIRST)
    assert second["supersedes"] == 1 and second["reason"] == "Minute reference corrected"
    assert second["pdf_path"] == SECOND and second["pdf_sha256"] == sha(signed_archive / SECOND)
    manifest = json.loads((demo_build / "results/manifest.json").read_text())
    assert json.loads(first["inputs"]) == manifest["input_sha256"]
    assert json.loads(first["inputs"])["returns"] == sha(DEMO / "returns.csv")
    for e in entries:
        for rel, digest in json.loads(e["files"]).items():
            assert sha(signed_archive / rel) == digest, rel
        # the trustees' edition is signed and archived beside the full pack, and recorded
        trustees = e["pdf_path"].removesuffix(".pdf") + "-trustees.pdf"
        assert trustees in json.loads(e["files"])
        reader = pypdf.PdfReader(signed_archive / trustees)
        assert "Trustees' edition" in reader.pages[0].extract_text()
        assert "Sign-off record" in reader.pages[-1].extract_text()
        assert len(reader.pages) < len(pypdf.PdfReader(signed_archive / e["pdf_path"]).pages)
    # the chain, computed here from the stored columns: sha256 of canonical JSON
    prev = "0" * 64
    for e in entries:
        body = {k: v for k, v in e.items() if k != "entry_hash"}
        text = json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
        assert e["prev_hash"] == prev
        assert hashlib.sha256(text.encode()).hexdigest() == e["entry_hash"]
        prev = e["entry_hash"]


def test_verify_intact_archive_and_files(signed_archive, demo_build, capsys):
    # per entry: the PDF, the trustees' edition, pack.html and each results file of the build
    per_entry = 3 + len(list((demo_build / "results").iterdir()))
    code, out, _ = run_cli(capsys, "verify", "--archive", signed_archive)
    assert code == 0 and f"archive intact: 2 entries, {2 * per_entry} files" in out
    assert ledger_entries(signed_archive)[-1]["entry_hash"] in out
    code, out, _ = run_cli(capsys, "verify", signed_archive / FIRST, "--archive", signed_archive)
    assert code == 0 and "ledger entry 1" in out and "superseded by entry 2" in out
    code, out, _ = run_cli(capsys, "verify", signed_archive / SECOND, "--archive", signed_archive)
    assert code == 0 and "ledger entry 2" in out and "superseded" not in out
    # the unsigned draft is not the signed document
    code, out, _ = run_cli(capsys, "verify", demo_build / "pack.pdf", "--archive", signed_archive)
    assert code == 1 and "NOT in the archive" in out


def test_second_sign_off_refused_without_supersedes(archive_copy, demo_build, capsys):
    before = ledger_entries(archive_copy)
    code, _, err = run_cli(capsys, "sign-off", demo_build, "--archive", archive_copy, "--by", "A N",
                       "--quiet")
    assert code == 1
    assert "already signed off: entry 2" in err and "--supersedes --reason" in err
    assert ledger_entries(archive_copy) == before
    code, _, err = run_cli(capsys, "sign-off", demo_build, "--archive", archive_copy, "--by", "A N",
                       "--supersedes", "--quiet")
    assert code == 2 and "--supersedes: needs --reason" in err
    assert ledger_entries(archive_copy) == before


# --- tampering is caught ------------------------------------------------------------------

def _writable(path: Path) -> Path:
    path.chmod(0o644)
    return path


def test_flipped_byte_is_caught(archive_copy, capsys):
    pdf = _writable(archive_copy / FIRST)
    data = bytearray(pdf.read_bytes())
    data[len(data) // 2] ^= 0x01
    pdf.write_bytes(bytes(data))
    code, out, _ = run_cli(capsys, "verify", "--archive", archive_copy)
    assert code == 1 and f"{FIRST}: changed: sha256 differs from entry 1" in out
    code, out, _ = run_cli(capsys, "verify", pdf, "--archive", archive_copy)
    assert code == 1 and "NOT in the archive" in out


def test_edited_signer_is_caught(archive_copy, capsys):
    con = sqlite3.connect(archive_copy / "ledger.sqlite")
    con.execute("UPDATE entries SET signer = 'Someone Else' WHERE seq = 1")
    con.commit()
    con.close()
    code, out, _ = run_cli(capsys, "verify", "--archive", archive_copy)
    assert code == 1 and "entry 1: ledger-edited" in out


def test_deleted_ledger_row_is_caught(archive_copy, capsys):
    con = sqlite3.connect(archive_copy / "ledger.sqlite")
    con.execute("DELETE FROM entries WHERE seq = 1")
    con.commit()
    con.close()
    code, out, _ = run_cli(capsys, "verify", "--archive", archive_copy)
    assert code == 1
    assert "entry 2: ledger-chain: entries 1 to 1 are missing (deleted)" in out
    # the deleted entry's files are now files with no entry
    assert f"{FIRST}: unrecorded" in out


def test_deleted_last_row_leaves_unrecorded_files(archive_copy, capsys):
    con = sqlite3.connect(archive_copy / "ledger.sqlite")
    con.execute("DELETE FROM entries WHERE seq = 2")
    con.commit()
    con.close()
    code, out, _ = run_cli(capsys, "verify", "--archive", archive_copy)
    assert code == 1 and f"{SECOND}: unrecorded" in out


def test_removed_file_is_caught(archive_copy, capsys):
    rel = f"{PERIOD}/tarnbrook-valley-{PERIOD}/results/securities.csv"
    (archive_copy / rel).unlink()
    code, out, _ = run_cli(capsys, "verify", "--archive", archive_copy)
    assert code == 1 and f"{rel}: missing: recorded by entry 1" in out
    code, out, _ = run_cli(capsys, "repair", "--archive", archive_copy)
    assert code == 1 and "cannot repair" in out and rel in out


def test_unreadable_archive_exits_2(tmp_path, capsys):
    code, _, err = run_cli(capsys, "verify", "--archive", tmp_path / "nowhere")
    assert code == 2 and "no such archive folder" in err
    (tmp_path / "ledger.sqlite").write_bytes(b"not a database at all" * 100)
    code, _, err = run_cli(capsys, "verify", "--archive", tmp_path)
    assert code == 2 and "cannot be read as a ledger" in err


def test_unrecorded_file_is_quarantined_by_repair_never_deleted(archive_copy, capsys):
    stray = archive_copy / PERIOD / "unexpected.pdf"
    stray.write_bytes(b"%PDF-1.7 a file nobody signed")
    code, out, _ = run_cli(capsys, "verify", "--archive", archive_copy)
    assert code == 1 and f"{PERIOD}/unexpected.pdf: unrecorded" in out
    code, out, _ = run_cli(capsys, "repair", "--archive", archive_copy)
    assert code == 0 and f"moved {PERIOD}/unexpected.pdf -> quarantine/" in out
    kept = list((archive_copy / "quarantine").rglob("unexpected.pdf"))
    assert len(kept) == 1 and kept[0].read_bytes() == b"%PDF-1.7 a file nobody signed"
    code, out, _ = run_cli(capsys, "verify", "--archive", archive_copy)
    assert code == 0 and "archive intact" in out


def test_repair_holds_the_ledger_write_lock_and_changes_no_entry(archive_copy, monkeypatch):
    """While repair looks for what to move, no sign-off can begin a write (the ledger's
    BEGIN IMMEDIATE is refused at once here, with no wait); afterwards the lock is free and
    the entries are as they were."""
    from reporter.archive import verify as verify_module

    before = ledger_entries(archive_copy)
    seen = []
    real = verify_module.verify_archive

    def verify_while_locked(archive):
        other = sqlite3.connect(archive / "ledger.sqlite", timeout=0, isolation_level=None)
        try:
            with pytest.raises(sqlite3.OperationalError, match="locked"):
                other.execute("BEGIN IMMEDIATE")
            seen.append("locked")
        finally:
            other.close()
        return real(archive)

    monkeypatch.setattr(verify_module, "verify_archive", verify_while_locked)
    verify_module.repair(archive_copy)
    assert seen == ["locked"]
    free = sqlite3.connect(archive_copy / "ledger.sqlite", timeout=0, isolation_level=None)
    free.execute("BEGIN IMMEDIATE")
    free.execute("ROLLBACK")
    free.close()
    assert ledger_entries(archive_copy) == before


# --- refusals before anything is signed -----------------------------------------------------

def _build_copy(demo_build: Path, tmp_path: Path) -> Path:
    dest = tmp_path / "build"
    shutil.copytree(demo_build, dest)
    return dest


def test_build_altered_after_review_is_refused(demo_build, tmp_path, capsys):
    build = _build_copy(demo_build, tmp_path)
    html = build / "pack.html"
    html.write_text(html.read_text().replace("Cautions", "Caution"))
    code, _, err = run_cli(capsys, "sign-off", build, "--archive", tmp_path / "a", "--by", "A N")
    assert code == 2 and "pack.html: changed since the build" in err
    assert not (tmp_path / "a" / "ledger.sqlite").exists()


def test_inputs_changed_since_build_are_refused(demo_build, tmp_path, capsys):
    build = _build_copy(demo_build, tmp_path)
    manifest = build / "results/manifest.json"
    m = json.loads(manifest.read_text())
    m["input_sha256"]["returns"] = "0" * 64       # as if returns.csv was edited after
    manifest.write_text(json.dumps(m))
    code, _, err = run_cli(capsys, "sign-off", build, "--archive", tmp_path / "a", "--by", "A N")
    assert code == 2 and "returns.csv: changed since the pack was built" in err


def test_rerender_that_differs_from_the_review_is_refused(demo_build, tmp_path, capsys):
    build = _build_copy(demo_build, tmp_path)
    manifest = build / "results/manifest.json"
    m = json.loads(manifest.read_text())
    m["built_utc"] = "2026-12-01T09:00:00Z"       # the cover would then show another time
    manifest.write_text(json.dumps(m))
    code, _, err = run_cli(capsys, "sign-off", build, "--archive", tmp_path / "a", "--by", "A N",
                       "--quiet")
    assert code == 2
    # both files that show the build time are named, each on its own line
    lines = err.splitlines()
    for rel in ("pack.html", "results/manifest.json"):
        assert any(ln.startswith(f"{build / rel}: rebuilding from the inputs does not "
                                 "reproduce it byte for byte") for ln in lines), (rel, err)
    assert not (tmp_path / "a" / "ledger.sqlite").exists()


def test_not_a_build_and_not_an_archive(demo_build, tmp_path, capsys):
    code, _, err = run_cli(capsys, "sign-off", tmp_path, "--archive", tmp_path / "a", "--by", "A")
    assert code == 2 and "not a pack build" in err
    other = tmp_path / "papers"
    other.mkdir()
    (other / "minutes.docx").write_bytes(b"x")
    code, _, err = run_cli(capsys, "sign-off", demo_build, "--archive", other, "--by", "A")
    assert code == 2 and "not an archive" in err
    assert sorted(p.name for p in other.iterdir()) == ["minutes.docx"]


# --- invisible characters in what is signed --------------------------------------------------

@pytest.mark.parametrize(("option", "args"), [
    ("--by", ["--by", "Ruth \u202eRELIAM"]),                   # reads "Ruth MAILER"
    ("--by", ["--by", "Ruth\u200b Okafor"]),
    ("--by", ["--by", "Ruth\u200dOkafor"]),     # every format character, as in text cells
    ("--role", ["--by", "A N", "--role", "Chair\u2066"]),
    ("--minute-ref", ["--by", "A N", "--minute-ref", "IC-2026-11/\u202e10"]),
    ("--note", ["--by", "A N", "--note", "approved\u200f"]),
    ("--reason", ["--by", "A N", "--supersedes", "--reason", "corrected\u202e"]),
])
def test_invisible_characters_in_sign_off_options_are_refused(demo_build, tmp_path, capsys,
                                                              option, args):
    archive = tmp_path / "a"
    code, _, err = run_cli(capsys, "sign-off", demo_build, "--archive", archive, "--quiet",
                           *args)
    assert code == 2
    lines = err.splitlines()
    assert lines[0].startswith(f"{option}: contains an invisible control character U+")
    assert lines[1:] == ["reporter: 1 error(s) in the inputs; nothing was written"]
    assert not archive.exists()


@pytest.mark.parametrize("text", ["Ruth\x85Okafor", "Ruth\x7fOkafor", "Ruth\x9bOkafor"])
def test_c1_and_del_controls_in_sign_off_options_are_refused(demo_build, tmp_path, capsys,
                                                             text):
    """NEL (U+0085, a line break to some readers), DEL and the C1 range are control
    characters as much as a line feed is."""
    archive = tmp_path / "a"
    code, _, err = run_cli(capsys, "sign-off", demo_build, "--archive", archive, "--quiet",
                           "--by", text)
    assert code == 2
    assert err.splitlines() == ["--by: contains a control character or line break",
                                "reporter: 1 error(s) in the inputs; nothing was written"]
    assert not archive.exists()
