"""Re-date the demo pack to an earlier month-end, for the demo archive ``make demo`` builds
(the demo pack signed for three periods in a row; everything in it is invented).

The pack's tables are copied as they are (their histories reach past the earlier period
end, which a build accepts), and ``period_end`` is set. The demo's cash flows are dated in
its own month, so an earlier period has none: the file and its ``[inputs]`` line are left
out (a flow outside the period is bad input, and ``make demo`` had stopped on it).

Run: ``python -m reporter.demo_redate SRC DEST PERIOD_END``
"""

from __future__ import annotations

import datetime as dt
import re
import shutil
import sys
from pathlib import Path

PERIOD_END = re.compile(r"^period_end = .*$", re.M)
CASH_FLOWS = re.compile(r"^cash_flows = .*\n", re.M)


def redate(src: Path, dest: Path, period_end: str) -> Path:
    """Write a copy of the pack in ``src`` into the new folder ``dest``, ending at
    ``period_end`` (an ISO date), without its cash flows; returns ``dest``."""
    dt.date.fromisoformat(period_end)            # a bad date stops here, not in the build
    text = (src / "pack.toml").read_text(encoding="utf-8")
    if not PERIOD_END.search(text):
        raise ValueError(f"{src / 'pack.toml'}: no period_end line to re-date")
    dest.mkdir(parents=True)
    for csv in sorted(src.glob("*.csv")):
        if csv.name != "cash_flows.csv":
            shutil.copyfile(csv, dest / csv.name)
    text = CASH_FLOWS.sub("", PERIOD_END.sub(f"period_end = {period_end}", text))
    (dest / "pack.toml").write_text(text, encoding="utf-8", newline="\n")
    return dest


if __name__ == "__main__":
    if len(sys.argv) != 4:
        sys.exit("usage: python -m reporter.demo_redate SRC DEST PERIOD_END")
    redate(Path(sys.argv[1]), Path(sys.argv[2]), sys.argv[3])
