"""Changes since the last pack: the demo against its own earlier build with three holdings
swapped (and one holding's returns raised so that it crosses the security market line),
the archive lookup, and an earlier build without limits.json.

Expected values are worked out from how the modified pack is made, not copied from output.
"""

from __future__ import annotations

import datetime as dt
import json
import re
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pypdf
import pytest
from scipy import stats

from reporter.build import assemble
from reporter.changes import latest_signed_pack
from reporter.config import load_settings
from reporter.errors import InputError
from tests.conftest import DEMO, build_at_fixed_epoch, demo_holdings

SWAPPED = {"TVX010": "TVX901", "TVX020": "TVX902", "TVX050": "TVX903"}
RAISED = "TVX012"        # its returns are raised by 2% a month in the new pack
RAISE = 0.02


def make_swapped(folder, previous: str, limits_edit: tuple[str, str] | None = None):
    """The demo with three holdings replaced by new securities (same weights, same return
    histories under new ids and names) and one holding's returns raised."""
    shutil.copytree(DEMO, folder)
    h = pd.read_csv(folder / "holdings.csv", dtype={"security_id": str})
    r = pd.read_csv(folder / "returns.csv", dtype={"security_id": str})
    for old, new in SWAPPED.items():
        h.loc[h["security_id"] == old, ["security_id", "name"]] = [new, f"{new} Newco plc"]
        r.loc[r["security_id"] == old, "security_id"] = new
    r.loc[r["security_id"] == RAISED, "return"] += RAISE
    h.to_csv(folder / "holdings.csv", index=False)
    r.to_csv(folder / "returns.csv", index=False, float_format="%.6f")
    toml = (folder / "pack.toml").read_text()
    if limits_edit:
        toml = toml.replace(*limits_edit)
    (folder / "pack.toml").write_text(toml + f'\n[compare]\nprevious = "{previous}"\n')
    return folder


@pytest.fixture(scope="module")
def swapped_build(demo_build, tmp_path_factory):
    base = tmp_path_factory.mktemp("changes")
    # a tighter holding limit in the new pack: the largest holding (7.4%, after the 3%
    # cash line) goes from watch (limit 8%) to breach (limit 7%)
    pack = make_swapped(base / "pack", str(demo_build),
                        ("max_holding_weight = 0.08", "max_holding_weight = 0.07"))
    out = base / "out"
    assert build_at_fixed_epoch(pack, out) == 0
    return out


def test_new_removed_and_weight_changes(demo_build, swapped_build):
    ch = json.loads((swapped_build / "results/changes.json").read_text())
    h = demo_holdings().set_index("security_id")["weight"]
    assert ch["previous"]["period_end"] == "2026-11-30"
    assert ch["previous"]["source"] == "build"
    assert [x["security_id"] for x in ch["new_holdings"]] == sorted(SWAPPED.values())
    assert [x["security_id"] for x in ch["removed_holdings"]] == sorted(SWAPPED)
    for old, new in SWAPPED.items():
        got_new = next(x for x in ch["new_holdings"] if x["security_id"] == new)
        got_old = next(x for x in ch["removed_holdings"] if x["security_id"] == old)
        assert got_new["weight"] == pytest.approx(h[old])
        assert got_old["weight_before"] == pytest.approx(h[old])
    # only the six swapped ids changed weight: +w for the new, -w for the removed
    want = {new: h[old] for old, new in SWAPPED.items()} | {old: -h[old] for old in SWAPPED}
    got = {x["security_id"]: x["change"] for x in ch["weight_changes"]}
    assert got.keys() == want.keys()
    for k, v in want.items():
        assert got[k] == pytest.approx(v)
    changes = [abs(x["change"]) for x in ch["weight_changes"]]
    assert changes == sorted(changes, reverse=True)


def test_sml_crossing(demo_build, swapped_build):
    ch = json.loads((swapped_build / "results/changes.json").read_text())
    before = pd.read_csv(demo_build / "results/securities.csv").set_index("security_id")
    now = pd.read_csv(swapped_build / "results/securities.csv").set_index("security_id")
    # raising every return by 2% a month raises the mean excess return by 0.02 and leaves
    # beta and the line unchanged, so the distance from the line rises by 0.02 (CAPM algebra)
    assert now.loc[RAISED, "sml_residual"] == pytest.approx(
        before.loc[RAISED, "sml_residual"] + RAISE, abs=2e-6)
    # the demo's RAISED holding sits below the line by less than 2% a month: it crosses,
    # and no other holding (same returns in both packs) does
    assert -RAISE < before.loc[RAISED, "sml_residual"] < 0
    (crossed,) = ch["crossed_sml"]
    assert crossed["security_id"] == RAISED and crossed["direction"] == "now above the line"


def test_beta_change_and_its_error(demo_build, swapped_build):
    ch = json.loads((swapped_build / "results/changes.json").read_text())["beta"]
    p0 = json.loads((demo_build / "results/portfolio.json").read_text())
    p1 = json.loads((swapped_build / "results/portfolio.json").read_text())
    assert ch["before"] == pytest.approx(p0["beta_regression"])
    assert ch["change"] == pytest.approx(p1["beta_regression"] - p0["beta_regression"])
    # the same return histories under other ids, plus a constant: beta hardly moves
    assert abs(ch["change"]) < 1e-4 and ch["beyond_error"] is False
    se = np.hypot(p0["beta_se_hac"], p1["beta_se_hac"])     # the packs use Newey-West
    assert ch["se_change"] == pytest.approx(se)
    assert ch["critical"] == pytest.approx(stats.norm.ppf(0.975))   # scipy


def test_limit_status_change(swapped_build):
    ch = json.loads((swapped_build / "results/changes.json").read_text())
    assert ch["limits_compared"] is True
    assert [(c["limit"], c["status_before"], c["status_now"]) for c in ch["limit_changes"]] \
        == [("max_holding_weight", "watch", "breach")]


def test_since_last_pack_section(swapped_build):
    reader = pypdf.PdfReader(swapped_build / "pack.pdf")
    text = ""
    for page in reader.pages:                     # the contents and the section, no further
        text += " " + re.sub(r"\s+", " ", page.extract_text())
        if "Crossings of the security market line" in text:
            break
    assert "Since last pack" in text.split("Market risk")[0]    # listed in the contents
    for phrase in ("3 new holdings and 3 removed", "TVX901 Newco plc",
                   "within estimation error", "Largest weight changes",
                   "Crossings of the security market line"):
        assert phrase in text, phrase


def test_previous_build_without_limits_json(demo_build, tmp_path):
    old = tmp_path / "old"
    shutil.copytree(demo_build, old)
    (old / "results/limits.json").unlink()
    a = assemble(load_settings(make_swapped(tmp_path / "pack", str(old))))
    assert a.changes.limits_compared is False and a.changes.limit_changes == []
    assert "no record of limits" in a.html()
    assert len(a.changes.new_holdings) == 3


def test_not_a_build_is_an_input_error(tmp_path):
    (tmp_path / "empty").mkdir()
    with pytest.raises(InputError) as exc:
        assemble(load_settings(make_swapped(tmp_path / "pack", str(tmp_path / "empty"))))
    assert [str(p) for p in exc.value.problems] == [
        f"pack.toml:compare.previous: {tmp_path / 'empty'} is not a pack build: "
        "results/manifest.json is missing"]


def _sign(archive, pack_name: str, period_end: str, revision: int = 1) -> Path:
    """A ledger entry for a sign-off (the ledger's own columns; no files are made: the
    choice reads only the ledger), and the pack folder it names."""
    from reporter.archive.ledger import append, ledger_transaction

    stem = f"{pack_name}-{period_end}" + (f"-r{revision}" if revision > 1 else "")
    with ledger_transaction(archive) as con:
        append(con, {"pack_name": pack_name, "period_end": period_end, "revision": revision,
                     "title": "t", "organisation": "o", "signer": "s", "role": None,
                     "minute_ref": None, "note": None, "signed_utc": "2026-12-01T00:00:00Z",
                     "pdf_path": f"{period_end}/{stem}.pdf", "pdf_sha256": "0" * 64,
                     "files": "{}", "inputs": "{}", "tool_version": "0", "supersedes": None,
                     "reason": None})
    return archive / period_end / stem


def test_latest_signed_pack_is_the_same_packs_latest_revision(tmp_path):
    # by the ledger: the pack's own name only (another scheme's pack of a later period in
    # the same archive was chosen, as the folder sorting last), and revision 10 after 9
    # (folder names sort "-r10" before "-r2")
    a = tmp_path / "archive"
    a.mkdir()
    _sign(a, "equity", "2026-09-30")
    for revision in range(1, 11):
        want = _sign(a, "equity", "2026-10-31", revision)
    _sign(a, "zz-other", "2026-10-31")
    _sign(a, "zz-other", "2026-11-15")
    _sign(a, "equity", "2026-11-30")                  # this period: not "before"
    assert latest_signed_pack(a, dt.date(2026, 11, 30), "equity") == want
    assert want.name == "equity-2026-10-31-r10"
    assert latest_signed_pack(a, dt.date(2026, 10, 31), "equity").name == "equity-2026-09-30"
    assert latest_signed_pack(a, dt.date(2026, 9, 30), "equity") is None
    assert latest_signed_pack(a, dt.date(2026, 12, 31), "zz-other").name == \
        "zz-other-2026-11-15"


def test_archive_form(site_archive, tmp_path):
    """The latest signed pack before 2026-11-30 in an archive that verifies: 2026-10-31 (the
    archive also holds 2026-09-30 and 2026-11-30 itself, which is not "before")."""
    (signed,) = [p for p in (site_archive / "2026-10-31").iterdir() if p.is_dir()]
    a = assemble(load_settings(make_swapped(tmp_path / "pack", f"archive:{site_archive}")))
    assert a.changes.previous_source == "archive"
    assert a.changes.previous_period_end == "2026-10-31"
    assert a.changes.previous_folder == str(signed)


def test_archive_with_nothing_earlier(signed_archive, tmp_path):
    # the archive holds only 2026-11-30, this pack's own period
    a = assemble(load_settings(make_swapped(tmp_path / "pack", f"archive:{signed_archive}")))
    assert a.changes is None
    assert [p.severity for p in a.compare_warnings] == ["warning"]
    assert "no signed pack named 'tarnbrook-valley' with a period end before 2026-11-30" \
        in a.compare_warnings[0].message
    assert "no signed pack named &#39;tarnbrook-valley&#39; with a period end" in a.html()
    with pytest.raises(InputError):
        assemble(load_settings(tmp_path / "pack"), strict=True)


def test_archive_without_ledger_is_refused(demo_build, tmp_path):
    """A build copied into a folder laid out like an archive, with no ledger: nothing to
    check it against, so it is not compared with."""
    archive = tmp_path / "archive"
    signed = archive / "2026-10-31" / "equity"
    shutil.copytree(demo_build, signed)
    m = json.loads((signed / "results/manifest.json").read_text())
    m["period_end"] = "2026-10-31"
    (signed / "results/manifest.json").write_text(json.dumps(m))
    with pytest.raises(InputError) as exc:
        assemble(load_settings(make_swapped(tmp_path / "pack", f"archive:{archive}")))
    (problem,) = exc.value.problems
    assert problem.where == "pack.toml:compare.previous"
    assert problem.message.startswith(f"{archive / 'ledger.sqlite'}: cannot be read as a "
                                      "ledger")


def _tamper(archive, rel: str, edit) -> None:
    """Edit an archived (read-only) file the way a tester would: make it writable, change
    it, make it read-only again."""
    path = archive / rel
    path.chmod(0o644)
    path.write_text(edit(path.read_text()))
    path.chmod(0o444)


def test_tampered_archive_is_refused(site_archive, tmp_path, capsys):
    """An archived earlier pack's portfolio.json edited after sign-off (a beta of 0.42 that
    would show as a significant change): check and build refuse the archive as bad input,
    naming the file, and the build writes nothing."""
    from reporter.cli import main

    archive = tmp_path / "archive"
    shutil.copytree(site_archive, archive)
    (signed,) = [p for p in (archive / "2026-10-31").iterdir() if p.is_dir()]
    rel = f"2026-10-31/{signed.name}/results/portfolio.json"

    def fake_beta(text):
        doc = json.loads(text)
        assert doc["beta_regression"] != 0.42
        doc["beta_regression"] = 0.42
        return json.dumps(doc)

    _tamper(archive, rel, fake_beta)
    pack = make_swapped(tmp_path / "pack", f"archive:{archive}")
    capsys.readouterr()
    assert main(["check", str(pack)]) == 2
    err = capsys.readouterr().err
    assert f"{archive / rel}: changed: sha256 differs from entry 4" in err
    assert "Traceback" not in err
    out = tmp_path / "out"
    assert main(["build", str(pack), "--out", str(out), "--quiet"]) == 2
    assert f"{archive / rel}: changed:" in capsys.readouterr().err
    assert not out.exists()
    with pytest.raises(InputError) as exc:
        assemble(load_settings(pack))
    assert [p.where for p in exc.value.problems] == [str(archive / rel)]


def test_unrecorded_pack_in_archive_is_refused(site_archive, tmp_path):
    """A pack folder put into the archive by hand (no ledger entry records it) would be the
    latest before 2026-11-30; it is refused rather than compared with."""
    archive = tmp_path / "archive"
    shutil.copytree(site_archive, archive)
    (signed,) = [p for p in (archive / "2026-10-31").iterdir() if p.is_dir()]
    shutil.copytree(signed, archive / "2026-11-15" / signed.name)
    with pytest.raises(InputError) as exc:
        assemble(load_settings(make_swapped(tmp_path / "pack", f"archive:{archive}")))
    assert any(p.message.startswith("unrecorded:") and "2026-11-15" in p.where
               for p in exc.value.problems)


@pytest.mark.parametrize("b0,b1,se0,se1,beyond", [
    (1.00, 1.10, 0.03, 0.04, True),      # z = 0.10 / 0.05 = 2.0 > 1.96
    (1.00, 1.09, 0.03, 0.04, False),     # z = 1.8
    (1.20, 0.95, 0.06, 0.08, True),      # z = -0.25 / 0.10 = -2.5
    (1.20, 1.05, 0.06, 0.08, False),     # z = -1.5
])
def test_beta_change_test(b0, b1, se0, se1, beyond):
    from reporter.analytics.changes import beta_change

    now = {"beta_regression": b1, "beta_se": 9.0, "beta_se_hac": se1, "errors": "hac"}
    # an older build that used OLS errors: its own OLS error is the one taken
    before = {"beta_regression": b0, "beta_se": se0, "beta_se_hac": 9.0, "errors": "ols"}
    got = beta_change(now, before, 0.95)
    se = np.hypot(se0, se1)                    # 3-4-5 triangles: 0.05 and 0.10
    z = (b1 - b0) / se
    assert got.se == pytest.approx(se) and got.z == pytest.approx(z)
    assert got.critical == pytest.approx(stats.norm.ppf(0.975))   # scipy, 1.959964
    assert got.beyond_error == bool(abs(z) > stats.norm.ppf(0.975)) == beyond


def test_unreadable_previous_weight_is_an_input_error(demo_build, tmp_path):
    old = tmp_path / "old"
    shutil.copytree(demo_build, old)
    sec = (old / "results/securities.csv").read_text().splitlines()
    cells = sec[3].split(",")
    cells[3] = "n/a"                      # the weight of the third holding: line 4
    sec[3] = ",".join(cells)
    (old / "results/securities.csv").write_text("\n".join(sec) + "\n")
    with pytest.raises(InputError) as exc:
        assemble(load_settings(make_swapped(tmp_path / "pack", str(old))))
    assert [str(p) for p in exc.value.problems] == [
        f"{old / 'results/securities.csv'}:4:weight: not a number: 'n/a'"]


def test_a_fund_builds_bad_number_is_placed_on_its_own_line(tmp_path):
    """An earlier fund build's securities.csv holds the total fund's rows and each mandate's:
    the file is checked as a whole before it is split, so a bad value names its line in the
    file (here line 5, a mandate's row after the total fund's), whichever part it is in."""
    from reporter.changes import read_build

    results = tmp_path / "old" / "results"
    results.mkdir(parents=True)
    (results / "manifest.json").write_text(json.dumps({"period_end": "2026-10-31"}))
    (results / "portfolio.json").write_text("{}")
    (results / "securities.csv").write_text(
        "mandate,security_id,weight,beta\n"
        "Total fund,QA1,0.6,1.1\n"
        "Total fund,QA2,0.4,0.9\n"
        "Domestic,QA1,1.0,1.1\n"
        "Overseas,QA2,n/a,0.9\n")
    with pytest.raises(InputError) as exc:
        read_build(tmp_path / "old", "build", dt.date(2026, 11, 30))
    assert [str(p) for p in exc.value.problems] == [
        f"{results / 'securities.csv'}:5:weight: not a number: 'n/a'"]
    # the same file with the value mended: the total fund's rows, typed, and no mandate
    # (this build wrote no mandate_portfolio.json)
    (results / "securities.csv").write_text(
        (results / "securities.csv").read_text().replace("n/a", "1.0"))
    prev = read_build(tmp_path / "old", "build", dt.date(2026, 11, 30))
    assert prev.securities["security_id"].tolist() == ["QA1", "QA2"]
    assert prev.securities["weight"].tolist() == [0.6, 0.4] and prev.mandates == {}
