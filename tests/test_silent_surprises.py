"""Inputs that used to pass without a word: what is read, not only what is said.

The messages themselves are pinned in test_bad_inputs.py (one case folder each); here the
values: which sheet's weights were read, which ids were matched, how ``nan`` text is taken,
and the run-length rule against a plain reference.
"""

from __future__ import annotations

import shutil
import unicodedata

import numpy as np
import pyarrow as pa
import pytest

from reporter.cli import main
from reporter.config import load_settings
from reporter.errors import Collector, InputError
from reporter.readers import RawTable
from reporter.validate import as_float, longest_constant_run, validate_pack
from tests.data.bad_pack import SECURITIES, base_pack, write_pack
from tests.data.make_bad_cases import BAD_DIR

TODAY = [w for *_, w, _ in SECURITIES]           # the visible sheet's weights


def test_the_visible_sheet_is_read_not_the_hidden_first_one():
    inputs = validate_pack(load_settings(BAD_DIR / "hidden_first_sheet"))
    np.testing.assert_allclose(inputs.holdings.frame["weight"], TODAY)
    assert [str(w) for w in inputs.warnings] == [
        "holdings.xlsx: warning: skipped hidden sheet 'Last quarter'; read sheet 'Holdings'"]


def test_a_hidden_sheet_named_in_pack_toml_is_read(tmp_path, capsys):
    pack = tmp_path / "pack"
    shutil.copytree(BAD_DIR / "all_sheets_hidden", pack)
    toml = (pack / "pack.toml").read_text()
    (pack / "pack.toml").write_text(toml.replace(
        'holdings = "holdings.xlsx"', 'holdings = { path = "holdings.xlsx", sheet = "Holdings" }'))
    assert main(["check", str(pack), "--strict"]) == 0
    assert capsys.readouterr().err == ""
    inputs = validate_pack(load_settings(pack))
    np.testing.assert_allclose(inputs.holdings.frame["weight"], TODAY)


def test_ids_in_two_unicode_forms_are_one_security():
    case = BAD_DIR / "ids_in_two_unicode_forms"
    held = (case / "holdings.csv").read_text(encoding="utf-8")
    ret = (case / "returns.csv").read_text(encoding="utf-8")
    assert "FWX\u00c901 ," in held and "FWXE\u030101," in ret      # the file is as described
    inputs = validate_pack(load_settings(case))
    sid = unicodedata.normalize("NFC", "FWX\u00c901")
    assert inputs.holdings.ids[0] == sid and inputs.returns.security_ids[0] == sid
    # FWX01's column is the file's FWXE\u0301 01 returns, in date order
    expected = [float(line.split(",")[2]) for line in ret.splitlines()[1:]
                if line.split(",")[1] == "FWXE\u030101"]
    np.testing.assert_array_equal(inputs.returns.values[:, 0], expected)
    assert not np.isnan(inputs.returns.values).any()


def raw_of(values: list) -> RawTable:
    return RawTable("x.csv", pa.table({"v": pa.array(values, type=pa.string())}), 2, "csv")


def test_nan_and_infinity_texts_are_not_finite_numbers():
    coll = Collector()
    texts = ["0.1", " NaN ", "abc", "-Infinity", None, "1e400", "+inf", "nan(1)"]
    values = as_float(raw_of(texts), "v", coll, ".", allow_empty=True)
    assert values[0] == 0.1 and np.isnan(values[1:]).all()
    assert [str(p) for p in coll.problems] == [
        "x.csv:4:v: not a number: 'abc'",
        "x.csv:9:v: not a number: 'nan(1)'",
        "x.csv:3:v: value is not a finite number: ' NaN '",
        "x.csv:5:v: value is not a finite number: '-Infinity'",
        "x.csv:7:v: value is not a finite number: '1e400'",
        "x.csv:8:v: value is not a finite number: '+inf'",
    ]


def test_nan_parsed_by_the_reader_is_not_taken_for_empty():
    raw = RawTable("x.csv", pa.table({"v": pa.array([0.1, float("nan"), None, float("inf")])}),
                   2, "csv")
    coll = Collector()
    as_float(raw, "v", coll, ".", allow_empty=False)
    assert [str(p) for p in coll.problems] == [
        "x.csv:3:v: value is not a finite number: 'nan'",
        "x.csv:5:v: value is not a finite number: 'inf'"
        " as read (written so, or a number too large for a float: beyond about 1.8e308)",
        "x.csv:4:v: value is empty"]


def reference_runs(column: np.ndarray) -> tuple[int, int]:
    """Longest run of equal consecutive values (NaN equals nothing) and where the first such
    run starts, by a plain loop over the values: the reference for the vectorised rule."""
    best, best_start, length, start = 0, 0, 0, 0
    for k, v in enumerate(column):
        if np.isnan(v):
            length = 0
            continue
        if length and v == column[k - 1]:
            length += 1
        else:
            length, start = 1, k
        if length > best:
            best, best_start = length, start
    return best, best_start


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_longest_constant_run_agrees_with_a_plain_count(seed):
    rng = np.random.default_rng(seed)
    m = rng.choice([0.0, 0.01, -0.02, 0.03, np.nan], size=(40, 300), p=[.3, .3, .2, .1, .1])
    run, start = longest_constant_run(m)
    for j in range(m.shape[1]):
        assert (int(run[j]), int(start[j])) == reference_runs(m[:, j]), j
    assert run.max() >= 4          # the draw does hold runs over the default thresholds


def wide_pack(tmp_path, rename: dict[str, str]):
    """The base pack with its returns written wide, columns renamed by ``rename``."""
    pack = base_pack()
    header, rows = pack.tables.pop("returns.csv")
    ids = [s[0] for s in SECURITIES]
    by_date: dict[str, dict[str, str]] = {}
    for d, sid, r in rows:
        by_date.setdefault(d, {})[sid] = r
    pack.tables["returns.csv"] = (["date"] + [rename.get(s, s) for s in ids],
                                  [[d] + [v[s] for s in ids] for d, v in by_date.items()])
    write_pack(pack, tmp_path / "wide")
    return tmp_path / "wide"


def test_wide_headers_are_matched_in_nfc(tmp_path):
    folder = wide_pack(tmp_path, {"FWX02": " FWX02"})
    holdings = (folder / "holdings.csv").read_text(encoding="utf-8")
    (folder / "holdings.csv").write_text(holdings.replace("FWX01", "FWX\u00c901"), "utf-8")
    returns = (folder / "returns.csv").read_text(encoding="utf-8")
    (folder / "returns.csv").write_text(returns.replace("FWX01", "FWXE\u030101", 1), "utf-8")
    inputs = validate_pack(load_settings(folder))
    assert inputs.returns.security_ids[:2] == ("FWX\u00c901", "FWX02")
    assert not np.isnan(inputs.returns.values).any() and inputs.warnings == []


def test_wide_headers_that_clash_are_errors(tmp_path):
    folder = wide_pack(tmp_path, {"FWX03": "fwx02", "FWX04": "FWXE\u030104"})
    text = (folder / "returns.csv").read_text(encoding="utf-8")
    (folder / "returns.csv").write_text(text.replace("FWX01", "FWX\u00c904", 1), "utf-8")
    with pytest.raises(InputError) as err:
        validate_pack(load_settings(folder))
    assert [str(p) for p in err.value.problems if p.severity == "error"] == [
        "returns.csv:1:FWXE\u030104: security id 'FWX\u00c904' repeats column 'FWX\u00c904' "
        "(ids are trimmed and in Unicode NFC)",
        "returns.csv:1:fwx02: security id 'fwx02' differs from 'FWX02' only by case: give one "
        "security one id",
    ]
