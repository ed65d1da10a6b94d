"""A long returns CSV with nothing to report is read in streamed batches straight into its
matrix (``validate.long_stream``); failing that, once read whole, it takes a one-pass route to
its matrix (``validate.long_quick._clean_long_matrix``); anything that might need a message
goes through the full checks. Neither route is a second set of rules: on the same file all
three must give the same panel and the same messages, and bad files must still be caught by
the full checks.

The readers are set to small blocks here, so that each file arrives in many column chunks
(and batches), each with its own dictionary of dates and ids, as a large file does.
"""

from __future__ import annotations

import dataclasses
import sys

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.csv as pacsv
import pytest

import reporter.readers as readers
import reporter.validate as validate
import reporter.validate.long_stream as long_stream
import reporter.validate.pack as pack_route
import reporter.validate.returns as returns_route
from reporter.config import load_settings
from reporter.errors import InputError
from tests.conftest import REPO

sys.path.insert(0, str(REPO / "benchmarks"))
from workloads import write_scheme  # noqa: E402


@pytest.fixture(autouse=True)
def small_blocks(monkeypatch):
    monkeypatch.setattr(readers, "CSV_BLOCK_BYTES", 1 << 14)     # 16 KB: dozens of chunks
    monkeypatch.setattr(long_stream, "STREAM_BLOCK_BYTES", 1 << 14)


@pytest.fixture
def scheme(tmp_path):
    """120 holdings x 300 business days; 10% list part-way through (NaN before)."""
    return write_scheme(tmp_path / "s", 120, 300, "daily", seed=11, label="QX", window=250,
                        late_share=0.1)


def both_routes(folder, monkeypatch):
    """(panel, warnings) as a build gets them (streamed, else quick, else full checks), then
    by the full checks alone; and the route taken, first as a build runs, then with the
    streamed route turned off (whose panel must be the same again)."""
    settings = load_settings(folder)
    taken = []
    stream, quick = pack_route.stream_long_returns, validate._clean_long_matrix

    def stream_spy(*args):
        out = stream(*args)
        taken.append("stream" if out is not None else "whole")
        return out

    def quick_spy(*args):
        out = quick(*args)
        taken[-1] = "quick" if out is not None else "full"
        return out

    monkeypatch.setattr(pack_route, "stream_long_returns", stream_spy)
    monkeypatch.setattr(returns_route, "_clean_long_matrix", quick_spy)
    a = validate.validate_pack(settings)
    monkeypatch.setattr(pack_route, "stream_long_returns", lambda *args: None)
    taken.append("whole")
    quick_only = validate.validate_pack(settings)
    monkeypatch.setattr(returns_route, "_clean_long_matrix", lambda *args: None)
    b = validate.validate_pack(settings)
    assert_same(quick_only, b)
    return a, b, taken


def assert_same(a, b):
    np.testing.assert_array_equal(a.returns.values, b.returns.values)   # NaN == NaN here
    np.testing.assert_array_equal(a.returns.period_keys, b.returns.period_keys)
    assert list(a.returns.security_ids) == list(b.returns.security_ids)
    assert (a.returns.shape, a.returns.n_rows) == (b.returns.shape, b.returns.n_rows)
    assert [str(w) for w in a.warnings] == [str(w) for w in b.warnings]


def rewrite_returns(folder, edit):
    path = folder / "returns.csv"
    table = pd.read_csv(path, dtype=str, keep_default_na=False)
    edit(table)
    table.to_csv(path, index=False)


def test_the_file_arrives_in_many_chunks(scheme):
    settings = load_settings(scheme)
    raw = readers.read_input(settings.inputs["returns"])
    assert raw.table["date"].num_chunks > 20
    # each chunk carries its own dictionary of the dates it holds: the quick route must map
    # each one (the first and last chunks share no date)
    first, last = (set(c.dictionary.to_pylist()) for c in (raw.table["date"].chunk(0),
                                                          raw.table["date"].chunks[-1]))
    assert first and last and not first & last


def test_quick_route_gives_the_full_checks_panel(scheme, monkeypatch):
    a, b, taken = both_routes(scheme, monkeypatch)
    assert taken == ["stream", "quick"]
    assert np.isnan(a.returns.values).any()          # the late listings' gaps
    assert_same(a, b)
    # and the matrix is the file: every row of the CSV at its cell (pandas pivots it)
    frame = pd.read_csv(scheme / "returns.csv").pivot(index="date", columns="security_id",
                                                      values="return")
    frame = frame[list(a.returns.security_ids)]
    np.testing.assert_array_equal(a.returns.values, frame.to_numpy())


def test_rows_in_any_order_and_padded_ids(scheme, monkeypatch):
    def edit(t):
        t["security_id"] = np.where(np.arange(len(t)) % 7 == 0, " " + t["security_id"] + " ",
                                    t["security_id"])
        t[:] = t.sample(frac=1.0, random_state=3).to_numpy()
    rewrite_returns(scheme, edit)
    a, b, taken = both_routes(scheme, monkeypatch)
    assert taken == ["stream", "quick"]
    assert_same(a, b)


def test_a_stale_price_is_placed_at_the_same_row_by_both_routes(scheme, monkeypatch):
    def edit(t):
        rows = np.flatnonzero(t["security_id"] == "QX00007")[100:130]
        t.loc[rows, "return"] = "0.0"
    rewrite_returns(scheme, edit)
    a, b, taken = both_routes(scheme, monkeypatch)
    assert taken == ["stream", "quick"]
    assert_same(a, b)
    stale = [str(w) for w in a.warnings if "exact-zero" in str(w)]
    assert len(stale) == 1
    # the row named is the first zero of the run: line = data row + 2
    t = pd.read_csv(scheme / "returns.csv")
    first = int(np.flatnonzero(t["security_id"] == "QX00007")[100]) + 2
    assert stale[0].startswith(f"returns.csv:{first}:return:")


@pytest.mark.parametrize("case, expected", [
    ("repeat", "duplicate row for"),
    ("bad_date", "not a valid date"),
    ("text", "not a number: 'n/a'"),
    ("empty_id", "value is empty"),
    ("below", "return -1.5 is below -100%"),
    ("percent", "look like percentages"),
    ("case", "differs from 'QX00009' (row "),
    ("invisible", "invisible control character U+200B"),
])
def test_anything_to_report_goes_to_the_full_checks(scheme, monkeypatch, case, expected):
    def edit(t):
        if case == "repeat":
            t.loc[len(t)] = t.loc[500].to_numpy()
        elif case == "bad_date":
            t.loc[900, "date"] = "2026-02-30"
        elif case == "text":
            t.loc[900, "return"] = "n/a"
        elif case == "empty_id":
            t.loc[900, "security_id"] = ""
        elif case == "below":
            t.loc[900, "return"] = "-1.5"
        elif case == "case":
            t.loc[t["security_id"] == "QX00009", "security_id"] = "qx00009"
            t.loc[0, "security_id"] = "QX00009"
        elif case == "invisible":
            t.loc[900, "security_id"] = t.loc[900, "security_id"] + "\u200b"
        elif case == "percent":
            sel = t["security_id"] == "QX00003"
            t.loc[sel, "return"] = (t.loc[sel, "return"].astype(float) * 100).astype(str)
    rewrite_returns(scheme, edit)
    settings = load_settings(scheme)
    raws, _ = validate.read_inputs(settings)
    spec = settings.inputs["returns"]
    assert raws["returns"].clean is None            # not streamed: read whole
    assert long_stream.stream_long_returns(spec, "daily") is None
    assert validate._clean_long_matrix(raws["returns"], spec.date_format, "daily") is None
    with pytest.raises(InputError) as err:
        validate.validate_pack(settings)
    assert any(expected in str(p) for p in err.value.problems)


def test_a_period_no_row_uses_is_not_a_row_of_the_matrix(tmp_path, monkeypatch):
    """Written by pyarrow in one go, then read in chunks: the quick route agrees with the
    full checks on a file whose holdings are on different days (union of dates)."""
    folder = write_scheme(tmp_path / "s", 30, 80, "daily", seed=5, label="PX", window=60,
                          late_share=0.3)
    table = pacsv.read_csv(folder / "returns.csv")
    keep = np.ones(table.num_rows, dtype=bool)
    keep[::5] = False                           # gaps scattered over every holding
    pacsv.write_csv(table.filter(pa.array(keep)), folder / "returns.csv")
    a, b, taken = both_routes(folder, monkeypatch)
    assert taken == ["stream", "quick"]
    assert_same(a, b)


def test_an_id_in_another_unicode_form_takes_the_full_checks(scheme, monkeypatch):
    """An id that NFC changes (here decomposed on some rows, composed on the others) is one
    security; the quick route leaves it to the full checks, which give the panel of the file
    with every id written one way."""
    def edit(t):
        t["security_id"] = t["security_id"].str.replace("QX", "QÉ")          # composed
        rows = np.arange(len(t)) % 5 == 0
        t.loc[rows, "security_id"] = t.loc[rows, "security_id"].str.replace(
            "QÉ", "QE\u0301")                                               # decomposed
    rewrite_returns(scheme, edit)
    holdings = pd.read_csv(scheme / "holdings.csv", dtype=str, keep_default_na=False)
    holdings["security_id"] = holdings["security_id"].str.replace("QX", "QÉ")
    holdings.to_csv(scheme / "holdings.csv", index=False)
    a, b, taken = both_routes(scheme, monkeypatch)
    assert taken == ["full", "full"]
    assert_same(a, b)
    assert len(a.returns.security_ids) == 120 and a.returns.security_ids[0].startswith("QÉ")
    frame = pd.read_csv(scheme / "returns.csv")
    frame["security_id"] = frame["security_id"].str.replace("QE\u0301", "QÉ")
    wide = frame.pivot(index="date", columns="security_id", values="return")
    np.testing.assert_array_equal(a.returns.values,
                                  wide[list(a.returns.security_ids)].to_numpy())


def test_columns_in_another_order_are_streamed_to_the_same_panel(scheme, monkeypatch):
    path = scheme / "returns.csv"
    t = pd.read_csv(path, dtype=str, keep_default_na=False)
    t[["return", "security_id", "date"]].to_csv(path, index=False)
    a, b, taken = both_routes(scheme, monkeypatch)
    assert taken == ["stream", "quick"]
    assert_same(a, b)


@pytest.mark.parametrize("case", ["extra_column", "trailing_delimiter", "blank_line",
                                  "thousands", "prices"])
def test_other_long_files_are_read_whole(scheme, case):
    """Only a CSV of exactly date, security_id and return, of returns, with no blank line, is
    streamed; anything else is read whole and checked as before."""
    path = scheme / "returns.csv"
    text = path.read_text()
    lines = text.splitlines()
    if case == "extra_column":
        lines = [lines[0] + ",note"] + [line + ",x" for line in lines[1:]]
    elif case == "trailing_delimiter":
        lines = [line + "," for line in lines]
    elif case == "blank_line":
        lines.insert(400, "")
    path.write_text("\n".join(lines) + "\n")
    spec = load_settings(scheme).inputs["returns"]
    if case == "thousands":
        spec = dataclasses.replace(spec, thousands=" ")
    elif case == "prices":
        spec = dataclasses.replace(spec, values="prices")
    assert long_stream.stream_long_returns(spec, "daily") is None
    raw = readers.read_input(spec)               # the whole read, as before
    assert raw.clean is None and raw.n_rows == raw.table.num_rows > 30_000
