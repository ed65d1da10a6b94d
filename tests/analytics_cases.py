"""Seeded packs, with and without gaps, and the figures of :func:`analyse` taken from them as
flat arrays: the input of tests/test_analytics_frozen.py and of the script that froze its
reference (``python tests/analytics_cases.py`` rewrites tests/data/analytics_frozen.npz;
run it only from code whose figures are trusted, and say so in the commit). Not a test
module. The data are invented (benchmarks/workloads.py)."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parent.parent
FROZEN = Path(__file__).resolve().parent / "data" / "analytics_frozen.npz"
sys.path.insert(0, str(ROOT / "benchmarks"))

from workloads import write_scheme  # noqa: E402

# name: (holdings, periods, frequency, share listing late, holdings given interior gaps)
CASES = {
    "complete": (60, 400, "daily", 0.0, 0),
    "gaps": (60, 400, "daily", 0.2, 6),
    "monthly": (50, 120, "monthly", 0.05, 0),
    "wide": (600, 700, "daily", 0.05, 20),      # N > 500: the Schur-complement PSD test
}
ROLLING_STRIDE = {"wide": 37}   # keep every k-th rolling row of a large case (file size)


def write_case(folder: Path, name: str) -> Path:
    """Write the pack folder of case ``name``; interior gaps are punched as runs of missing
    rows (3 to 12 periods) in the middle of some holdings' histories."""
    n, periods, freq, late, holed = CASES[name]
    window = periods if freq == "daily" else None
    write_scheme(folder, n, periods, freq, seed=11, label=name[:1].upper(),
                 window=window, late_share=late)
    if holed:
        rng = np.random.default_rng(5)
        r = pd.read_csv(folder / "returns.csv")
        ids = r["security_id"].unique()
        drop = np.zeros(len(r), dtype=bool)
        for sid in rng.choice(ids, holed, replace=False):
            rows = np.flatnonzero(r["security_id"].to_numpy() == sid)
            start = rng.integers(len(rows) // 4, len(rows) // 2)
            drop[rows[start:start + rng.integers(3, 13)]] = True
        r[~drop].to_csv(folder / "returns.csv", index=False)
    return folder


def _columns(prefix: str, frame: pd.DataFrame, out: dict) -> None:
    for col in frame.columns:
        v = frame[col].to_numpy()
        if v.dtype.kind in "fiu":
            out[f"{prefix}/{col}"] = v.astype(float)
        else:
            out[f"{prefix}/{col}"] = np.asarray(v.astype(str), dtype=str)


def figures(folder: Path, name: str) -> dict[str, np.ndarray]:
    """Every column of the securities, risk and rolling tables and every figure of the
    portfolio summary of the pack in ``folder``, as arrays keyed ``case/table/column``."""
    from reporter.analytics.pack import analyse
    from reporter.config import load_settings
    from reporter.validate import validate_pack

    settings = load_settings(folder)
    res = analyse(validate_pack(settings), settings)
    out: dict[str, np.ndarray] = {}
    _columns(f"{name}/securities", res.securities, out)
    _columns(f"{name}/risk", res.risk_table, out)
    rolling = res.rolling_table.iloc[::ROLLING_STRIDE.get(name, 1)]
    _columns(f"{name}/rolling", rolling.assign(date=rolling["date"].astype(str)), out)
    for key, value in res.portfolio_summary().items():
        if isinstance(value, bool) or value is None or isinstance(value, str):
            out[f"{name}/summary/{key}"] = np.asarray(str(value))
        elif isinstance(value, int | float | np.floating | np.integer):
            out[f"{name}/summary/{key}"] = np.asarray(float(value))
        else:
            out[f"{name}/summary/{key}"] = np.asarray(repr(value))
    return out


def all_figures(tmp: Path) -> dict[str, np.ndarray]:
    out: dict[str, np.ndarray] = {}
    for name in CASES:
        out |= figures(write_case(tmp / name, name), name)
    return out


if __name__ == "__main__":
    import tempfile

    with tempfile.TemporaryDirectory() as tmp:
        figs = all_figures(Path(tmp))
    np.savez_compressed(FROZEN, **figs)
    print(f"wrote {FROZEN} ({len(figs)} arrays, {FROZEN.stat().st_size} bytes)")
