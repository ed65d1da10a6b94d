"""Random damage to a valid small pack: never an internal error, and a broken rule never passes.

Hypothesis applies a few harmless changes (shuffled rows, a missing return, an extra
column, a blank line...) and then at most one change that breaks a stated error rule
(a dropped required column, a repeated row, percentages, a bad date, a negative weight...).
``reporter check`` must then exit 2 if a rule was broken, 0 if only harmless changes were
made, and never 1 or with a traceback.
"""

from __future__ import annotations

import string
import tempfile
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from reporter.cli import main
from tests.data.make_bad_cases import MIN_OBS, N_PERIODS, WINDOW, Pack, base_pack, write_pack

DATED = ("returns.csv", "market.csv", "risk_free.csv")
REQUIRED = {
    "holdings.csv": ("security_id", "name", "sector", "weight"),
    "returns.csv": ("date", "security_id", "return"),
    "market.csv": ("date", "return"),
    "risk_free.csv": ("date", "rate"),
}
NUMBER = {"holdings.csv": "weight", "returns.csv": "return", "market.csv": "return",
          "risk_free.csv": "rate"}
BAD_DATES = ["2026-02-30", "2025-13-01", "31/12/2025", "12/31/2025", "2025/01/31", "20250131",
             "2025-01-31T00:00:00", "Jan 2025", "", "  ", "n/a", "0000-00-00"]


@dataclass
class Edits:
    """Changes applied after the tables are written (they need the file's text)."""

    blank_lines: dict[str, int]
    spaced_header: set[str]


@dataclass(frozen=True)
class Mutation:
    name: str
    apply: Callable[[Pack, Edits, st.DataObject], None]


def column(p: Pack, fname: str, name: str) -> int:
    return p.tables[fname][0].index(name)


def pick_row(p: Pack, data, fname: str, rows: range | None = None) -> list[str]:
    table = p.rows(fname)
    i = data.draw(st.sampled_from(rows) if rows else st.integers(0, len(table) - 1))
    return table[i]


# --------------------------------------------------------------------------- harmless changes

def shuffle_rows(p, e, data):
    fname = data.draw(st.sampled_from(sorted(p.tables)))
    rows = p.rows(fname)
    rows[:] = data.draw(st.permutations(rows))


def drop_some_returns(p, e, data):
    # at most 5 of a holding's 30 returns: it keeps at least min_obs periods
    rows = p.rows("returns.csv")
    sid = data.draw(st.sampled_from(["FWX01", "FWX02", "FWX03", "FWX04"]))
    mine = [r for r in rows if r[1] == sid]
    gone = data.draw(st.lists(st.sampled_from(range(len(mine))), max_size=5, unique=True))
    assert len(mine) - len(gone) >= MIN_OBS
    drop = {id(mine[i]) for i in gone}
    rows[:] = [r for r in rows if id(r) not in drop]


def add_unknown_column(p, e, data):
    fname = data.draw(st.sampled_from(["holdings.csv", "market.csv", "risk_free.csv"]))
    header, rows = p.tables[fname]
    header.append(data.draw(st.sampled_from(["comment", "source", "analyst_note"])))
    for r in rows:
        r.append(data.draw(st.sampled_from(["", "x", "1.5"])))


def add_unheld_security(p, e, data):
    dates = sorted({r[0] for r in p.rows("returns.csv")})
    for d in dates[: data.draw(st.integers(1, len(dates)))]:
        p.rows("returns.csv").append([d, "FWX99", "0.010000"])


def stale_run(p, e, data):
    rows = [r for r in p.rows("returns.csv") if r[1] == "FWX03"]
    start = data.draw(st.integers(0, len(rows) - 5))
    for r in rows[start:start + data.draw(st.integers(3, 5))]:
        r[2] = "0.000000"


def drop_history_before_window(p, e, data):
    fname = data.draw(st.sampled_from(["market.csv", "risk_free.csv"]))
    rows = p.rows(fname)
    early = sorted(r[0] for r in rows)[: N_PERIODS - WINDOW]     # rows may have been shuffled
    day = data.draw(st.sampled_from(early))
    rows[:] = [r for r in rows if r[0] != day]


def blank_line(p, e, data):
    fname = data.draw(st.sampled_from(sorted(p.tables)))
    e.blank_lines[fname] = data.draw(st.integers(1, 5))


def spaced_header(p, e, data):
    e.spaced_header.add(data.draw(st.sampled_from(sorted(p.tables))))


def one_large_value(p, e, data):
    """Not a broken rule: one return of 3.1 is large but not impossible."""
    pick_row(p, data, "returns.csv")[2] = "3.100000"


HARMLESS = [Mutation(f.__name__, f) for f in (
    shuffle_rows, drop_some_returns, add_unknown_column, add_unheld_security, stale_run,
    drop_history_before_window, blank_line, spaced_header, one_large_value)]


# --------------------------------------------------------------------------- broken rules

def drop_required_column(p, e, data):
    fname = data.draw(st.sampled_from(sorted(REQUIRED)))
    name = data.draw(st.sampled_from(REQUIRED[fname]))
    header, rows = p.tables[fname]
    j = header.index(name)
    p.tables[fname] = (header[:j] + header[j + 1:], [r[:j] + r[j + 1:] for r in rows])


def duplicate_row(p, e, data):
    fname = data.draw(st.sampled_from(sorted(p.tables)))
    row = list(pick_row(p, data, fname))
    if data.draw(st.booleans()) and fname != "holdings.csv":
        row[column(p, fname, NUMBER[fname])] = "0.001234"    # same key, other value
    p.rows(fname).insert(data.draw(st.integers(0, len(p.rows(fname)))), row)


def not_a_number(p, e, data):
    fname = data.draw(st.sampled_from(sorted(NUMBER)))
    text = data.draw(st.text(alphabet=string.ascii_letters + " %#!/", min_size=1, max_size=8)
                     | st.sampled_from(["1,2", "1.2.3", "--0.1", "0.1%", "#DIV/0!", "NA"]))
    pick_row(p, data, fname)[column(p, fname, NUMBER[fname])] = text


def empty_required_value(p, e, data):
    fname = data.draw(st.sampled_from(sorted(REQUIRED)))
    name = data.draw(st.sampled_from(REQUIRED[fname]))
    pick_row(p, data, fname)[column(p, fname, name)] = ""


def corrupt_date(p, e, data):
    fname = data.draw(st.sampled_from(DATED))
    pick_row(p, data, fname)[0] = data.draw(st.sampled_from(BAD_DATES))


def return_below_minus_100(p, e, data):
    fname = data.draw(st.sampled_from(["returns.csv", "market.csv"]))
    value = data.draw(st.floats(-50, -1.0001))
    pick_row(p, data, fname)[column(p, fname, "return")] = f"{value:.6f}"


def percentages(p, e, data):
    fname = data.draw(st.sampled_from(DATED))
    if fname == "returns.csv":
        sid = data.draw(st.sampled_from(["FWX01", "FWX02", "FWX03", "FWX04"]))
        rows = [r for r in p.rows(fname) if r[1] == sid]
    else:
        rows = p.rows(fname)
    j = column(p, fname, NUMBER[fname])
    for r in rows:
        r[j] = f"{float(r[j]) * 100:.4f}"


def negate_weight(p, e, data):
    row = pick_row(p, data, "holdings.csv")
    row[3] = f"{-float(row[3]):.6f}"


def scale_weights(p, e, data):
    factor = data.draw(st.sampled_from([100.0, 0.5, 0.99, 1.01, 2.0]))
    for r in p.rows("holdings.csv"):
        r[3] = f"{float(r[3]) * factor:.6f}"


def duplicate_holding_id(p, e, data):
    rows = p.rows("holdings.csv")
    i, j = data.draw(st.lists(st.integers(0, len(rows) - 1), min_size=2, max_size=2,
                              unique=True))
    rows[j][0] = rows[i][0]


def gap_in_window(p, e, data):
    fname = data.draw(st.sampled_from(["market.csv", "risk_free.csv"]))
    rows = p.rows(fname)
    window = sorted(r[0] for r in rows)[-WINDOW:]
    day = data.draw(st.sampled_from(window))
    rows[:] = [r for r in rows if r[0] != day]


def second_date_in_a_month(p, e, data):
    fname = data.draw(st.sampled_from(DATED))
    row = list(pick_row(p, data, fname))
    row[0] = row[0][:8] + "15"                     # the 15th of the same month
    p.rows(fname).append(row)


def period_end_after_data(p, e, data):
    p.toml["pack"]["period_end"] = data.draw(st.sampled_from(["2026-07-31", "2027-06-30"]))


def bad_setting(p, e, data):
    key, value = data.draw(st.sampled_from([
        ("window", '"24"'), ("window", "2"), ("min_obs", "25"), ("window", "24.0"),
        ("window_length", "24"), ("confidence", "1.5"), ("window", "true"),
    ]))
    p.toml["analysis"][key] = value


def path_out_of_pack(p, e, data):
    role = data.draw(st.sampled_from(["holdings", "returns", "market", "risk_free"]))
    p.toml["inputs"][role] = data.draw(st.sampled_from(['"../x.csv"', '"/etc/hosts"',
                                                        '"sub/../../x.csv"', '"missing.csv"']))


BREAKING = [Mutation(f.__name__, f) for f in (
    drop_required_column, duplicate_row, not_a_number, empty_required_value, corrupt_date,
    return_below_minus_100, percentages, negate_weight, scale_weights, duplicate_holding_id,
    gap_in_window, second_date_in_a_month, period_end_after_data, bad_setting,
    path_out_of_pack)]


def write(pack: Pack, edits: Edits, folder: Path) -> None:
    write_pack(pack, folder)
    for fname in pack.tables:
        path = folder / fname
        lines = path.read_text(encoding="utf-8").split("\n")
        if fname in edits.spaced_header:
            lines[0] = ", ".join(lines[0].split(","))
        if fname in edits.blank_lines:
            lines.insert(edits.blank_lines[fname], "")
        path.write_text("\n".join(lines), encoding="utf-8")


@settings(max_examples=60, deadline=None, derandomize=False,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(data=st.data())
def test_mutated_pack_is_refused_or_passes_never_crashes(data, capsys):
    harmless = data.draw(st.lists(st.sampled_from(HARMLESS), max_size=3, unique=True),
                         label="harmless")
    breaking = data.draw(st.none() | st.sampled_from(BREAKING), label="breaking")
    pack, edits = base_pack(), Edits(blank_lines={}, spaced_header=set())
    for m in harmless:
        m.apply(pack, edits, data)
    if breaking is not None:
        breaking.apply(pack, edits, data)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "pack"
        write(pack, edits, folder)
        code = main(["check", str(folder)])
    out, err = capsys.readouterr()
    assert "Traceback" not in out + err
    assert "internal error" not in err
    assert code in (0, 2)
    if breaking is not None:
        assert code == 2, f"{breaking.name} passed the check:\n{out}\n{err}"
        problems = [ln for ln in err.splitlines() if not ln.startswith("reporter: ")]
        assert any(": warning: " not in ln for ln in problems), err
    else:
        assert code == 0, f"harmless changes {[m.name for m in harmless]} were refused:\n{err}"
        assert out.splitlines()[-1] == "ok: the inputs pass every check"
