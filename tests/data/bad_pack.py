"""The small valid pack every bad-input case starts from, and how a pack is written.

Every organisation and security here is fictional. See make_bad_cases.py.
"""

from __future__ import annotations

import datetime as dt
import io
import re
import zipfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

SEED = 20260630
N_PERIODS = 30
PERIOD_END = "2026-06-30"
WINDOW = 24
MIN_OBS = 12
SECURITIES = [
    # security_id, name, sector, weight, beta
    ("FWX01", "Ashwardine Pumps plc", "Industrials", 0.40, 1.10),
    ("FWX02", "Brindlecote Foods plc", "Consumer Staples", 0.30, 0.60),
    ("FWX03", "Quellmoor Instruments plc", "Technology", 0.20, 1.40),
    ("FWX04", "Thistlebank Shipping plc", "Industrials", 0.10, 0.90),
]
HERE = Path(__file__).resolve().parent
BAD_DIR = HERE / "bad"


@dataclass
class Pack:
    """A pack in memory: TOML sections (key -> TOML literal) and CSV tables (header, rows)."""

    toml: dict[str, dict[str, str]]
    tables: dict[str, tuple[list[str], list[list[str]]]]
    raw: dict[str, str] = field(default_factory=dict)   # files written verbatim
    binary: dict[str, bytes] = field(default_factory=dict)   # files written byte for byte

    def column(self, fname: str, name: str) -> int:
        return self.tables[fname][0].index(name)

    def rows(self, fname: str) -> list[list[str]]:
        return self.tables[fname][1]


def month_ends() -> list[str]:
    return [d.strftime("%Y-%m-%d")
            for d in pd.date_range(end=PERIOD_END, periods=N_PERIODS, freq="ME")]


def base_pack() -> Pack:
    """The valid small pack every case starts from (single-index returns, seeded)."""
    rng = np.random.default_rng(SEED)
    dates = month_ends()
    rf = np.round(0.0030 + rng.normal(0, 0.0002, N_PERIODS), 6)
    market = np.round(0.006 + rng.normal(0, 0.04, N_PERIODS), 6)
    toml = {
        "pack": {
            "title": '"Investment Committee Pack: Test Portfolio"',
            "organisation": '"Fernwhistle Staff Pension Scheme"',
            "period_end": PERIOD_END,
            "frequency": '"monthly"',
            "currency": '"GBP"',
        },
        "inputs": {
            "holdings": '"holdings.csv"',
            "returns": '"returns.csv"',
            "market": '"market.csv"',
            "risk_free": '"risk_free.csv"',
        },
        "analysis": {"window": str(WINDOW), "min_obs": str(MIN_OBS)},
    }
    holdings = [[sid, name, sector, f"{w:.6f}"] for sid, name, sector, w, _ in SECURITIES]
    returns = []
    for t, date in enumerate(dates):
        for sid, _, _, _, beta in SECURITIES:
            r = rf[t] + beta * (market[t] - rf[t]) + rng.normal(0, 0.03)
            returns.append([date, sid, f"{r:.6f}"])
    return Pack(toml=toml, tables={
        "holdings.csv": (["security_id", "name", "sector", "weight"], holdings),
        "returns.csv": (["date", "security_id", "return"], returns),
        "market.csv": (["date", "return"], [[d, f"{v:.6f}"] for d, v in zip(dates, market,
                                                                            strict=True)]),
        "risk_free.csv": (["date", "rate"], [[d, f"{v:.6f}"] for d, v in zip(dates, rf,
                                                                           strict=True)]),
    })


def toml_text(toml: dict[str, dict[str, str]]) -> str:
    out = ["# A small invented pack for the input tests; every name here is fictional."]
    for section, keys in toml.items():
        out.append(f"\n[{section}]")
        out.extend(f"{k} = {v}" for k, v in keys.items())
    return "\n".join(out) + "\n"


def write_pack(pack: Pack, folder: Path) -> None:
    """Write ``pack`` into ``folder`` (created; must not hold other files)."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "pack.toml").write_text(toml_text(pack.toml), encoding="utf-8", newline="\n")
    for fname, (header, rows) in pack.tables.items():
        lines = [",".join(header)] + [",".join(r) for r in rows]
        (folder / fname).write_text("\n".join(lines) + "\n", encoding="utf-8", newline="\n")
    for fname, text in pack.raw.items():
        (folder / fname).write_text(text, encoding="utf-8", newline="\n")
    for fname, data in pack.binary.items():
        (folder / fname).write_bytes(data)


def returns_row(pack: Pack, period: int, security: int) -> list[str]:
    """The long returns row of 0-based ``period`` and ``security`` (file line = index + 2)."""
    return pack.rows("returns.csv")[period * len(SECURITIES) + security]


def set_weights(pack: Pack, weights: list[float]) -> None:
    for row, w in zip(pack.rows("holdings.csv"), weights, strict=True):
        row[3] = f"{w:.6f}"


def drop_column(pack: Pack, fname: str, name: str) -> None:
    header, rows = pack.tables[fname]
    j = header.index(name)
    pack.tables[fname] = ([c for c in header if c != name], [r[:j] + r[j + 1:] for r in rows])




def xlsx_bytes(sheets: list[tuple[str, list[list], str]]) -> bytes:
    """An .xlsx workbook of ``(title, rows, sheet_state)`` sheets, made by openpyxl, with
    fixed timestamps (in the document properties and the zip entries), so that the same
    sheets give the same bytes on every run."""
    from openpyxl import Workbook

    wb = Workbook()
    wb.remove(wb.active)
    for title, rows, state in sheets:
        ws = wb.create_sheet(title)
        for row in rows:
            ws.append(row)
        ws.sheet_state = state
    visible = [i for i, (_, _, state) in enumerate(sheets) if state == "visible"]
    forced = not visible       # openpyxl will not save a book with every sheet hidden:
    if forced:                 # save the last one visible, then hide it in workbook.xml
        wb.worksheets[-1].sheet_state = "visible"
        visible = [len(sheets) - 1]
    wb.active = visible[0]
    wb.properties.created = wb.properties.modified = dt.datetime(2026, 6, 30)
    made = io.BytesIO()
    wb.save(made)                            # (openpyxl stamps "modified" with the time now)
    out = io.BytesIO()
    with zipfile.ZipFile(made) as zin, zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as zout:
        for info in zin.infolist():
            data = zin.read(info.filename)
            if info.filename == "docProps/core.xml":
                data = re.sub(rb"(<dcterms:modified[^>]*>)[^<]*", rb"\g<1>2026-06-30T00:00:00Z",
                              data)
            if forced and info.filename == "xl/workbook.xml":
                data = data.replace(b'state="visible"', b'state="hidden"')
            zout.writestr(zipfile.ZipInfo(info.filename, (1980, 1, 1, 0, 0, 0)), data,
                          compress_type=zipfile.ZIP_DEFLATED)
    return out.getvalue()
