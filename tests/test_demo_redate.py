"""``make demo`` signs the demo pack for three periods in a row, the two earlier ones being
the demo re-dated by :mod:`reporter.demo_redate`. Each re-dated pack must pass every check
a build runs: the demo's cash flows are dated in its own month, and copied into an earlier
period they stopped ``make demo`` with "cash flow ... outside the period"."""

from __future__ import annotations

import re
import shutil

import pytest

from reporter.demo_redate import redate
from reporter.errors import InputError
from reporter.summary import check_pack
from tests.conftest import REPO

DEMO = REPO / "inputs" / "demo"


def demo_periods() -> list[str]:
    """The earlier periods ``make demo`` signs (DEMO_PERIODS in the Makefile)."""
    text = (REPO / "Makefile").read_text(encoding="utf-8")
    assert "python -m reporter.demo_redate inputs/demo" in text     # how make demo re-dates
    return re.search(r"^DEMO_PERIODS := (.+)$", text, re.M).group(1).split()


@pytest.mark.parametrize("period", demo_periods())
def test_each_redated_demo_period_passes_every_check(tmp_path, period):
    before = (DEMO / "pack.toml").read_bytes()
    dest = redate(DEMO, tmp_path / f"inputs-{period}", period)
    summary = check_pack(dest)
    assert summary.text.endswith("ok: the inputs pass every check")
    assert f"period ending {period}" in summary.text
    assert "cash_flows" not in (dest / "pack.toml").read_text(encoding="utf-8")
    assert not (dest / "cash_flows.csv").exists()
    assert (DEMO / "pack.toml").read_bytes() == before          # the source is untouched


def test_the_old_copy_with_the_cash_flows_fails_the_check(tmp_path):
    """What make demo did before: every CSV copied and period_end replaced; the check
    names each flow dated outside the earlier period (so the test above can fail)."""
    period = demo_periods()[0]
    dest = tmp_path / "old"
    dest.mkdir()
    for csv in DEMO.glob("*.csv"):
        shutil.copyfile(csv, dest / csv.name)
    text = (DEMO / "pack.toml").read_text(encoding="utf-8")
    (dest / "pack.toml").write_text(re.sub(r"^period_end = .*$", f"period_end = {period}",
                                           text, flags=re.M), encoding="utf-8")
    with pytest.raises(InputError) as err:
        check_pack(dest)
    lines = [str(p) for p in err.value.problems]
    assert lines and all("cash flow dated" in line and "outside the period" in line
                         for line in lines)


def test_a_bad_date_or_an_existing_folder_is_refused(tmp_path):
    with pytest.raises(ValueError):
        redate(DEMO, tmp_path / "a", "2026-13-01")
    assert not (tmp_path / "a").exists()
    (tmp_path / "b").mkdir()
    (tmp_path / "b" / "mine.txt").write_text("keep", encoding="utf-8")
    with pytest.raises(FileExistsError):
        redate(DEMO, tmp_path / "b", "2026-10-31")
    assert (tmp_path / "b" / "mine.txt").read_text(encoding="utf-8") == "keep"
