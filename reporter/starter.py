"""``reporter init FOLDER``: a new pack folder with a commented ``pack.toml`` and empty CSV
files with the right headers, ready to be filled in.

The folder must be new or empty; the files are written into a staging folder beside it and
moved into place in one rename, so an interrupted init leaves nothing half-written.
"""

from __future__ import annotations

import datetime as dt
import os
import re
import shutil
from pathlib import Path

from reporter.errors import OutputError

# the header of each input file (see README, "Inputs"); one example row is described in
# pack.toml's comments, never written as data
CSV_HEADERS = {
    "holdings.csv": "security_id,name,sector,asset_class,currency,country,market_value",
    "returns.csv": "date,security_id,return",
    "market.csv": "date,return",
    "risk_free.csv": "date,rate",
}

PACK_TOML = """\
# A pack folder: this file and the data files it names. Fill in the four CSV files (their
# headers are already written), set the [pack] fields, then run
#   reporter check {folder}      to validate the inputs and see what was found
#   reporter build {folder} --out build/{name}   to write pack.html, pack.pdf and results/
# Lines starting with '#' are comments; the README's "Inputs" section lists every key.

[pack]
name = "{name}"                       # short id used in archive file names (a-z, 0-9, '-')
title = "Investment Committee Pack"   # shown on the cover
organisation = "Your scheme's name"
period_end = {period_end}               # the last period the pack covers (a TOML date)
frequency = "monthly"                 # monthly | weekly | daily
currency = "GBP"                      # ISO 4217 code

[inputs]                              # paths relative to this file, inside this folder
# holdings.csv: one row per holding at period_end, e.g.
#   ABC001,Example Holdings plc,Energy,Equity,GBP,United Kingdom,1250000.00
#   market_value is in [pack] currency (the weights are the shares of the total); a cash line
#   has asset_class "cash" and earns the risk-free rate. A weight column (decimal shares
#   summing to 1) may replace market_value; asset_class, currency and country are optional
holdings = "holdings.csv"
# returns.csv: each holding's return per period, e.g.  2026-10-31,ABC001,0.0123  (1.23%)
returns = "returns.csv"
# market.csv: the market proxy's return per period, e.g.  2026-10-31,0.0087
market = "market.csv"
# risk_free.csv: the risk-free rate per period (not annualised), e.g.  2026-10-31,0.0031
risk_free = "risk_free.csv"
# benchmark = "benchmark.csv"         # optional: tracking error against a benchmark

[analysis]
window = 60                           # the last N periods up to period_end
min_obs = 24                          # holdings with fewer observations are listed, not fitted
# confidence = 0.95                   # level of the confidence intervals

# The investment policy's limits, each optional (see the README, "Policy limits").
# [limits]
# beta_min = 0.85
# beta_max = 1.05
# max_holding_weight = 0.08
# max_sector_weight = {{ "*" = 0.15 }}
# min_effective_n = 25
"""

_NAME = re.compile(r"[^a-z0-9]+")


def _pack_name(folder: Path) -> str:
    name = _NAME.sub("-", folder.resolve().name.lower()).strip("-")
    return name or "my-scheme"


def _last_month_end(today: dt.date) -> dt.date:
    return today.replace(day=1) - dt.timedelta(days=1)


def init_pack(folder: Path | str, today: dt.date | None = None) -> list[str]:
    """Write a starter pack into ``folder`` (new or empty; its parent must exist) and return
    the names written. Raises :class:`OutputError` (exit 2) for a folder that is not empty,
    is a file or a link, or cannot be written."""
    folder = Path(folder)
    if folder.is_symlink():
        raise OutputError(f"{folder}: is a symbolic link; choose a new folder")
    if folder.exists() and not folder.is_dir():
        raise OutputError(f"{folder}: is a file, not a folder; choose a new folder")
    if folder.is_dir() and any(folder.iterdir()):
        raise OutputError(f"{folder}: is not empty; 'reporter init' only writes into a new "
                          "or empty folder, so nothing of yours is overwritten")
    parent = folder.absolute().parent
    if not parent.is_dir():
        above = next((p for p in (parent, *parent.parents) if os.path.lexists(p)), None)
        if above is not None and not above.is_dir():      # /etc/passwd/x: passwd is a file
            what = "a file, not a folder" if above.is_file() else "not a folder"
            raise OutputError(f"{folder}: {above} is {what}")
        raise OutputError(f"{folder}: the folder {parent} does not exist")
    period_end = _last_month_end(today or dt.date.today())
    files = {"pack.toml": PACK_TOML.format(folder=folder, name=_pack_name(folder),
                                           period_end=period_end.isoformat())}
    files |= {name: header + "\n" for name, header in CSV_HEADERS.items()}
    staging = parent / f".{folder.name}.init-{os.getpid()}"
    made = False
    try:
        staging.mkdir()
        made = True
        for name, text in files.items():
            (staging / name).write_text(text, encoding="utf-8")
        # onto a new name, or onto an empty folder (rename refuses one that is not empty)
        os.rename(staging, folder)
    except OSError as exc:
        if made:                        # only ever the staging folder this call made
            shutil.rmtree(staging, ignore_errors=True)
        raise OutputError(f"{folder}: cannot be written ({exc.strerror or exc})") from None
    return sorted(files)
