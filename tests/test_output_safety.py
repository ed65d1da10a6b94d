"""The writer replaces only what it wrote (issue 17, item 2; the output parts of item 8).

Each test plays one way a build or a site could have deleted something that was not its
own, and asserts that the victim's files are still there byte for byte, with the exit code
and the one-line message. The refusals happen before anything is computed, so most of these
run no build at all; the writer itself is tested on small output sets."""

from __future__ import annotations

import errno
import json
import os
import shutil
import sqlite3
from pathlib import Path

import pytest

import reporter.build as build
import reporter.writer as writer
from reporter.errors import OutputError, WriteFailed
from reporter.output_folder import (
    ARCHIVE_MARKER,
    BUILD_MARKER,
    LEGACY_TEXT,
    check_target,
    list_hash,
    marker_bytes,
    read_marker,
)
from reporter.writer import OutputSet, commit
from tests.conftest import DEMO, REPO, run_cli


def snapshot(folder: Path) -> dict[str, bytes | str]:
    """Every file under ``folder`` (its bytes) and every link (where it points)."""
    out: dict[str, bytes | str] = {}
    for root, dirs, files in os.walk(folder):
        for name in [*dirs, *files]:
            path = Path(root) / name
            rel = path.relative_to(folder).as_posix()
            if path.is_symlink():
                out[rel] = "-> " + os.readlink(path)
            elif path.is_file():
                out[rel] = path.read_bytes()
    return out


def beside(folder: Path) -> list[str]:
    """Hidden entries beside ``folder``: staging or swapped-out folders left behind."""
    return sorted(p.name for p in folder.parent.iterdir() if p.name.startswith("."))


def earlier_output(out: Path, kind: str = "pack", files: dict | None = None) -> Path:
    """A folder written by the writer (a valid marker listing exactly its files)."""
    fs = OutputSet()
    for rel, text in (files or {"pack.html": "<p>the earlier pack</p>",
                                "results/securities.csv": "security_id,beta\nX,1.0\n"}).items():
        fs.add(rel, text)
    commit(fs, out, kind=kind)
    return out


def plant_archive(folder: Path) -> None:
    """A sign-off archive: a real SQLite ledger and a signed PDF beside it."""
    folder.mkdir(parents=True)
    con = sqlite3.connect(folder / ARCHIVE_MARKER)
    con.execute("CREATE TABLE entries (seq INTEGER PRIMARY KEY, entry_hash TEXT)")
    con.execute("INSERT INTO entries VALUES (1, 'ab12')")
    con.commit()
    con.close()
    (folder / "2026-11-30").mkdir()
    (folder / "2026-11-30" / "demo.pdf").write_bytes(b"%PDF-1.7 the signed pack\n")


# --- archives are never deleted -----------------------------------------------------------

def test_build_onto_an_earlier_build_that_holds_an_archive(tmp_path, capsys):
    out = earlier_output(tmp_path / "out")
    plant_archive(out / "signed")
    before = snapshot(out)
    code, _, err = run_cli(capsys, "build", DEMO, "--out", out, "--quiet")
    assert code == 2 and "Traceback" not in err
    assert err.splitlines() == [
        f"reporter: {out}: holds a sign-off archive (signed/{ARCHIVE_MARKER}); signed packs "
        "are never deleted: choose another --out"]
    assert snapshot(out) == before
    assert beside(out) == []


def test_a_marker_that_lists_the_archive_does_not_save_it(tmp_path):
    """Even a marker that lists the archive's files (forged, or made by hand) never lets the
    folder go: a ledger anywhere inside refuses it."""
    out = tmp_path / "out"
    plant_archive(out / "deep" / "archive")
    names = sorted(snapshot(out))
    (out / BUILD_MARKER).write_bytes(marker_bytes("pack", names))
    before = snapshot(out)
    with pytest.raises(OutputError, match="holds a sign-off archive"):
        commit(_one_file(), out)
    assert snapshot(out) == before and beside(out) == []


def test_site_onto_an_earlier_site_that_holds_an_archive(tmp_path, capsys):
    site = earlier_output(tmp_path / "site", "site", {"index.html": "<p>signed packs</p>"})
    plant_archive(site / "kept-archive")
    before = snapshot(site)
    # the archive given is checked later; the output folder is refused first
    code, _, err = run_cli(capsys, "site", "--archive", tmp_path / "other", "--out", site)
    assert code == 2 and "Traceback" not in err
    assert err.splitlines() == [
        f"reporter: {site}: holds a sign-off archive (kept-archive/{ARCHIVE_MARKER}); signed "
        "packs are never deleted: choose another --out"]
    assert snapshot(site) == before


# --- a marker must be the tool's own and list every file -------------------------------------

@pytest.mark.parametrize("marker", [b"", b"committee-pack-reporter\n", b"{}", b"\xff\xfe"])
def test_an_empty_or_foreign_marker_beside_other_files_is_not_a_build(tmp_path, capsys, marker):
    out = tmp_path / "papers"
    out.mkdir()
    (out / BUILD_MARKER).write_bytes(marker)
    (out / "minutes.docx").write_bytes(b"the committee's minutes")
    (out / "letters").mkdir()
    (out / "letters" / "trustee.txt").write_text("dear trustee\n", encoding="utf-8")
    before = snapshot(out)
    code, _, err = run_cli(capsys, "build", DEMO, "--out", out, "--quiet")
    assert code == 2 and "Traceback" not in err
    assert err.splitlines() == [
        f"reporter: {out}: folder exists, is not empty and is not a pack build; refusing to "
        f"replace it (choose another --out); in the way: {BUILD_MARKER}, "
        "letters/trustee.txt, minutes.docx"]
    assert snapshot(out) == before
    code, _, err = run_cli(capsys, "site", "--archive", tmp_path / "a", "--out", out)
    assert code == 2 and "is not a trustees' site" in err
    assert snapshot(out) == before


def test_a_forged_marker_with_a_wrong_list_hash_is_not_a_marker(tmp_path):
    out = tmp_path / "papers"
    out.mkdir()
    (out / "minutes.docx").write_bytes(b"the committee's minutes")
    body = json.loads(marker_bytes("pack", ["minutes.docx"]))
    assert body["files_sha256"] == list_hash(["minutes.docx"])
    body["files_sha256"] = list_hash(["pack.html"])          # the hash of another list
    (out / BUILD_MARKER).write_text(json.dumps(body), encoding="utf-8")
    assert read_marker(out) is None
    before = snapshot(out)
    with pytest.raises(OutputError, match=r"is not a pack build.*in the way: .*minutes\.docx"):
        commit(_one_file(), out)
    # a list edited by hand after the build (a name added, the hash left) is refused alike
    body = json.loads(marker_bytes("pack", ["pack.html"]))
    body["files"].append("zz-minutes.docx")
    (out / BUILD_MARKER).write_text(json.dumps(body), encoding="utf-8")
    assert read_marker(out) is None
    with pytest.raises(OutputError, match="is not a pack build"):
        commit(_one_file(), out)
    assert snapshot(out)["minutes.docx"] == before["minutes.docx"] and beside(out) == []


def test_files_the_marker_does_not_list_are_named_and_kept(tmp_path):
    out = earlier_output(tmp_path / "out")
    for i in range(7):
        (out / "results" / f"notes-{i}.txt").write_text(f"note {i}\n", encoding="utf-8")
    before = snapshot(out)
    with pytest.raises(OutputError) as caught:
        commit(_one_file(), out)
    assert str(caught.value) == (
        f"{out}: holds 7 file(s) this tool did not write there (results/notes-0.txt, "
        "results/notes-1.txt, results/notes-2.txt, results/notes-3.txt, results/notes-4.txt "
        "and 2 more); refusing to replace it (move them, or choose another --out)")
    assert snapshot(out) == before and beside(out) == []


def test_a_listed_name_that_is_a_link_is_refused(tmp_path):
    """A listed file replaced by a link (to anything) is not what the tool wrote."""
    out = earlier_output(tmp_path / "out")
    elsewhere = tmp_path / "elsewhere.txt"
    elsewhere.write_bytes(b"someone's file")
    (out / "pack.html").unlink()
    (out / "pack.html").symlink_to(elsewhere)
    with pytest.raises(OutputError, match=r"did not write there \(pack\.html\)"):
        commit(_one_file(), out)
    assert (out / "pack.html").is_symlink() and elsewhere.read_bytes() == b"someone's file"


def test_a_second_build_replaces_its_own_earlier_output(tmp_path):
    out = earlier_output(tmp_path / "out")
    fs = OutputSet()
    fs.add("pack.html", "<p>this month</p>")
    fs.add("results/portfolio.json", "{}\n")
    commit(fs, out)
    assert snapshot(out) == {BUILD_MARKER: marker_bytes("pack", fs.paths),
                             "pack.html": b"<p>this month</p>",
                             "results/portfolio.json": b"{}\n"}
    assert read_marker(out).files == {"pack.html", "results/portfolio.json"}
    assert beside(out) == []


def test_a_real_builds_marker_lists_exactly_its_files(demo_build):
    marker = read_marker(demo_build)
    on_disk = set(snapshot(demo_build)) - {BUILD_MARKER}
    assert marker.kind == "pack" and marker.files == on_disk
    assert {"pack.html", "pack.pdf", "results/manifest.json"} <= marker.files
    check_target(demo_build, "pack")            # a rebuild onto it is allowed


# --- inputs and outputs never nest -----------------------------------------------------------

def test_a_pack_folder_inside_its_own_out_is_refused(tmp_path, capsys):
    out = tmp_path / "out"
    pack = out / "scheme"
    shutil.copytree(DEMO, pack)
    # a valid marker listing the pack's files: the nesting rule alone must stop the build
    (out / BUILD_MARKER).write_bytes(marker_bytes("pack", sorted(snapshot(out))))
    before = snapshot(out)
    code, _, err = run_cli(capsys, "build", pack, "--out", out, "--quiet")
    assert code == 2 and "Traceback" not in err
    assert err.splitlines() == [
        f"reporter: {out}: holds the pack folder {pack}; the output folder is replaced whole, "
        "so choose an --out outside the pack folder"]
    assert snapshot(out) == before
    code, _, err = run_cli(capsys, "build", pack, "--out", pack, "--quiet")
    assert code == 2 and "holds the pack folder" in err
    assert snapshot(out) == before and beside(out) == []


def test_an_out_inside_the_pack_folder_is_refused(tmp_path, capsys):
    pack = tmp_path / "scheme"
    shutil.copytree(DEMO, pack)
    before = snapshot(pack)
    code, _, err = run_cli(capsys, "build", pack / "pack.toml", "--out", pack / "build",
                           "--quiet")
    assert code == 2 and "Traceback" not in err
    assert err.splitlines() == [f"reporter: {pack / 'build'}: is inside the pack folder "
                                f"{pack}; choose an --out outside the pack folder"]
    assert snapshot(pack) == before


def test_build_all_refuses_nesting_with_the_folder_of_schemes(tmp_path, capsys):
    outer = tmp_path / "outer"
    schemes = outer / "schemes"
    shutil.copytree(DEMO, schemes / "alpha")
    before = snapshot(outer)
    code, _, err = run_cli(capsys, "build-all", schemes, "--out", schemes / "out", "--quiet")
    assert code == 2 and "is inside the folder of schemes" in err
    code, _, err = run_cli(capsys, "build-all", schemes, "--out", outer, "--quiet")
    assert code == 2 and "holds the folder of schemes" in err
    assert snapshot(outer) == before


# --- links, and an out that cannot be written ------------------------------------------------

def test_a_symlinked_out_is_refused_and_left_alone(tmp_path, capsys):
    real = earlier_output(tmp_path / "real")
    shutil.copytree(DEMO, tmp_path / "schemes" / "alpha")
    link = tmp_path / "link"
    link.symlink_to(real, target_is_directory=True)
    before = snapshot(tmp_path)
    code, _, err = run_cli(capsys, "build", DEMO, "--out", link, "--quiet")
    assert code == 2 and "Traceback" not in err
    assert err.splitlines() == [
        f"reporter: {link}: is a symbolic link (to {real}); an output folder is replaced "
        "whole, so a link is never followed or replaced: give the folder itself as --out"]
    code, _, err = run_cli(capsys, "site", "--archive", tmp_path / "a", "--out", link)
    assert code == 2 and "is a symbolic link" in err
    with pytest.raises(OutputError, match="symbolic link"):
        commit(_one_file(), link)
    assert snapshot(tmp_path) == before                # no .link.tmp-... left either
    code, _, err = run_cli(capsys, "build-all", tmp_path / "schemes", "--out", link, "--quiet")
    assert code == 2 and "is a symbolic link" in err
    assert snapshot(tmp_path) == before


@pytest.mark.parametrize("code", [errno.ENOSPC, errno.EROFS, errno.EACCES])
def test_a_failed_write_is_one_line_and_leaves_the_earlier_output(tmp_path, monkeypatch, code):
    """Tests run as root, where a chmod'ed folder does not stop a write: the system's error is
    raised from the writer's file write instead, after half the bytes are on disk."""
    out = earlier_output(tmp_path / "out")
    before = snapshot(out)

    def failing_write(dest, data):
        Path(dest).write_bytes(bytes(data)[: len(data) // 2])
        raise OSError(code, os.strerror(code), str(dest))

    monkeypatch.setattr(writer, "_write_new", failing_write)
    with pytest.raises(WriteFailed) as caught:
        commit(_one_file(), out)
    assert caught.value.exit_code == 1
    message = str(caught.value)
    assert message.startswith(f"{out}: cannot write ({os.strerror(code)} "
                              f"({errno.errorcode[code]}), at {tmp_path}/.out.tmp-")
    assert message.endswith("; nothing was replaced") and "\n" not in message
    assert snapshot(out) == before and beside(out) == []


def test_a_full_disk_while_streaming_a_large_file_leaves_nothing(tmp_path):
    out = earlier_output(tmp_path / "out")
    before = snapshot(out)
    fs = OutputSet(writer.open_staging(out))

    def fill(sink):
        sink.write(b"x" * 1000)
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    with pytest.raises(WriteFailed, match=r"rolling_beta\.csv: cannot write \(No space"):
        fs.add_written("results/rolling_beta.csv", fill)
    fs.discard()                                # what finish_build does on any failure
    assert snapshot(out) == before and beside(out) == []


def test_a_read_only_disk_through_the_cli_is_one_line_exit_1(tmp_path, monkeypatch, capsys):
    """The whole command: the pack is computed, then the disk refuses the write. The PDF
    renderer is replaced by a stand-in (the write fails after it in any case)."""
    out = earlier_output(tmp_path / "out")
    before = snapshot(out)
    monkeypatch.setattr(build, "render_pdf", lambda *a, **k: b"%PDF-1.7 stand-in")

    def read_only(dest, data):
        raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(dest))

    monkeypatch.setattr(writer, "_write_new", read_only)
    code, _, err = run_cli(capsys, "build", DEMO, "--out", out, "--quiet")
    assert code == 1 and "Traceback" not in err
    lines = err.splitlines()
    assert len(lines) == 1
    assert lines[0].startswith(f"reporter: {out}: cannot write (Read-only file system "
                               f"(EROFS), at {tmp_path}/.out.tmp-")
    assert lines[0].endswith(f"/{BUILD_MARKER}); nothing was replaced")
    assert snapshot(out) == before and beside(out) == []


def test_a_folder_that_cannot_be_made_is_one_line(tmp_path, monkeypatch):
    parent = tmp_path / "ro"
    real_mkdir = Path.mkdir

    def mkdir(self, *args, **kwargs):
        if self.parent == parent or self == parent:
            raise OSError(errno.EACCES, os.strerror(errno.EACCES), str(self))
        return real_mkdir(self, *args, **kwargs)

    monkeypatch.setattr(Path, "mkdir", mkdir)
    with pytest.raises(WriteFailed, match=r"/ro/out: cannot write \(Permission denied "
                                          r"\(EACCES\), at .*/ro\); nothing was replaced"):
        commit(_one_file(), parent / "out")
    monkeypatch.undo()
    assert not parent.exists()


# --- outputs of earlier versions -------------------------------------------------------------

def test_an_earlier_versions_build_is_replaced_only_with_its_own_names(tmp_path):
    out = tmp_path / "out"
    (out / "results").mkdir(parents=True)
    (out / BUILD_MARKER).write_bytes(LEGACY_TEXT["pack"])
    for rel in ("pack.html", "pack.pdf", "results/securities.csv", "results/manifest.json"):
        (out / rel).write_bytes(b"earlier")
    check_target(out, "pack")
    (out / "results" / "my-notes.csv").write_bytes(b"someone's notes")
    before = snapshot(out)
    with pytest.raises(OutputError, match=r"did not write there \(results/my-notes\.csv\)"):
        commit(_one_file(), out)
    assert snapshot(out) == before
    (out / "results" / "my-notes.csv").unlink()
    commit(_one_file(), out)
    assert read_marker(out).files == {"pack.html"}


def test_the_repositorys_site_folder_may_be_replaced_by_a_site(tmp_path):
    """``make demo`` ends with ``reporter site --out site``: on a fresh clone site/ holds its
    README and marker only; an older clone holds the one-line marker of earlier versions."""
    check_target(REPO / "site", "site")
    assert read_marker(REPO / "site").kind == "site"
    fresh = tmp_path / "fresh" / "site"             # the two files under version control
    fresh.mkdir(parents=True)
    for name in ("README.md", BUILD_MARKER):
        shutil.copy(REPO / "site" / name, fresh / name)
    check_target(fresh, "site")
    assert "README.md" in read_marker(fresh).files
    older = tmp_path / "site"
    older.mkdir()
    shutil.copy(REPO / "site" / "README.md", older / "README.md")
    (older / BUILD_MARKER).write_bytes(LEGACY_TEXT["site"])
    check_target(older, "site")
    with pytest.raises(OutputError, match="not a pack build"):
        check_target(older, "pack")


def _one_file() -> OutputSet:
    fs = OutputSet()
    fs.add("pack.html", "<p>new</p>")
    return fs


def test_an_out_onto_the_earlier_build_it_compares_with_is_refused(demo_build, tmp_path,
                                                                  capsys):
    """``[compare] previous`` names an earlier build, which the build reads: an --out that
    is it, or lies inside it, would replace that input with the new pack."""
    previous = tmp_path / "october"
    shutil.copytree(demo_build, previous)
    pack = tmp_path / "scheme"
    shutil.copytree(DEMO, pack)
    with open(pack / "pack.toml", "a", encoding="utf-8") as fh:
        fh.write(f'\n[compare]\nprevious = "{previous}"\n')
    before = snapshot(previous)
    code, _, err = run_cli(capsys, "build", pack, "--out", previous, "--quiet")
    assert code == 2 and "Traceback" not in err
    assert err.splitlines() == [
        f"reporter: {previous}: holds the earlier build ([compare] previous) "
        f"{previous}; the output folder is replaced whole, so choose an --out outside the "
        "earlier build ([compare] previous)"]
    code, _, err = run_cli(capsys, "build", pack, "--out", previous / "results", "--quiet")
    assert code == 2 and "is inside the earlier build ([compare] previous)" in err
    assert snapshot(previous) == before and beside(previous) == []
