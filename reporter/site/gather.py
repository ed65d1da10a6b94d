"""Read a verified archive into typed records for the site: one :class:`SignedPack` per
ledger entry, with the results files archived beside its PDF.

Only files the ledger records are read (their paths come from the entry's ``files``), so
the site shows exactly what was signed. Nothing here writes.
"""

from __future__ import annotations

import io
import json
import math
from dataclasses import dataclass
from pathlib import Path, PurePosixPath

import pandas as pd

from reporter.analytics.pack import PORTFOLIO_SERIES
from reporter.archive.ledger import Entry
from reporter.config import TOTAL_FUND
from reporter.csvsafe import is_text, unescape_frame
from reporter.errors import InputError, Problem
from reporter.site.limits_view import limit_key, limit_label

LIMIT_STATUSES = ("within", "watch", "breach")

# results/securities.csv columns the site shows (see README, "Results files")
SECURITY_COLUMNS = ("security_id", "name", "sector", "weight", "status", "beta",
                    "beta_ci_low", "beta_ci_high", "alpha_ann", "mean_excess_return_ann",
                    "sml_expected_excess_ann", "sml_residual_ann", "sml_position", "r_squared")
ROLLING_COLUMNS = ("date", "series", "beta", "beta_ci_low", "beta_ci_high")
# results/portfolio.json keys the site shows (reporter.analytics.pack portfolio_summary)
PORTFOLIO_KEYS = ("window_start", "window_end", "n_periods", "periods_per_year",
                  "beta_regression", "beta_ci_low", "beta_ci_high", "beta_weighted",
                  "alpha_ann", "mean_market_premium_ann", "tracking_error_ann",
                  "information_ratio_ann", "volatility_ann", "sharpe_ann", "effective_n",
                  "n_holdings", "n_fitted", "top10_weight", "rolling_window")


@dataclass(frozen=True)
class SignedPack:
    """One ledger entry with the results it archived.

    ``securities`` has the :data:`SECURITY_COLUMNS` (per-period decimals unless ``_ann``);
    ``rolling`` is the portfolio's trailing-window beta (``date`` as ISO text);
    ``limits`` is ``results/limits.json`` (a list of ``limit, scope, kind, value,
    threshold, status, key, label``)
    or ``None`` when the pack has no limit results.
    """

    entry: Entry
    name: str                          # archive name, e.g. tarnbrook-valley-2026-11-30-r2
    pdf_path: str                      # relative to the archive
    html_path: str                     # the archived pack.html, relative to the archive
    portfolio: dict
    securities: pd.DataFrame
    rolling: pd.DataFrame
    limits: list[dict] | None
    superseded_by: Entry | None
    supersedes: Entry | None

    @property
    def current(self) -> bool:
        """True when no later sign-off supersedes this one."""
        return self.superseded_by is None


def _read(archive: Path, rel: str) -> bytes:
    return (archive / rel).read_bytes()


def _results_files(entry: Entry) -> tuple[str, dict[str, str]]:
    """The archived pack.html path and the results files (name -> path) of one entry."""
    name = PurePosixPath(entry.pdf_path).stem
    folder = f"{PurePosixPath(entry.pdf_path).parent}/{name}"
    files = entry.file_hashes
    results = {PurePosixPath(rel).name: rel for rel in files
               if rel.startswith(f"{folder}/results/")}
    return f"{folder}/pack.html", results


def _need(results: dict[str, str], file: str, entry: Entry, problems: list[Problem]) -> str:
    rel = results.get(file)
    if rel is None:
        problems.append(Problem(f"ledger entry {entry.seq}", f"records no results/{file}; "
                                "the site needs it (sign off a build made by this version)"))
    return rel


def _csv(archive: Path, rel: str, columns: tuple[str, ...],
         problems: list[Problem]) -> pd.DataFrame | None:
    try:
        df = pd.read_csv(io.BytesIO(_read(archive, rel)), dtype={"security_id": str,
                                                                  "series": str, "date": str})
    except (ValueError, pd.errors.ParserError) as exc:
        problems.append(Problem(str(archive / rel), f"cannot be read as CSV ({exc})"))
        return None
    unescape_frame(df, [c for c in df.columns if is_text(df[c])])   # CSV-injection escape
    missing = [c for c in columns if c not in df.columns]
    for c in missing:
        problems.append(Problem(f"{archive / rel}:1:{c}", "column missing"))
    if "mandate" in df.columns:         # a fund pack: the site shows the total fund
        df = df[df["mandate"].astype(str) == TOTAL_FUND]
    return None if missing else df.loc[:, list(columns)]


def _portfolio(archive: Path, rel: str, problems: list[Problem]) -> dict | None:
    try:
        data = json.loads(_read(archive, rel))
    except ValueError as exc:
        problems.append(Problem(str(archive / rel), f"not valid JSON ({exc})"))
        return None
    if not isinstance(data, dict):
        problems.append(Problem(str(archive / rel), "is not a JSON object"))
        return None
    missing = [k for k in PORTFOLIO_KEYS if k not in data]
    for k in missing:
        problems.append(Problem(f"{archive / rel}:{k}", "key missing"))
    return None if missing else {k: data[k] for k in PORTFOLIO_KEYS}


def _number(v) -> bool:
    return v is None or (isinstance(v, int | float) and not isinstance(v, bool)
                         and math.isfinite(v))


def read_limits(data: bytes, where: str) -> list[dict]:
    """Parse ``results/limits.json`` (its ``limits`` list, or a bare list): objects with
    ``limit`` (text), ``value`` and ``threshold`` (numbers or null) and ``status`` (within,
    watch or breach), and optionally ``scope`` (a sector, ``*`` or null), ``label`` and
    ``kind`` (``max`` or ``min``). Each item comes back with its ``key`` (limit and scope)
    and the pack's ``label`` (:mod:`reporter.site.limits_view`).
    Raises :class:`InputError` naming the item and key of every problem."""
    problems: list[Problem] = []
    try:
        items = json.loads(data)
    except ValueError as exc:
        raise InputError([Problem(where, f"not valid JSON ({exc})")]) from None
    if isinstance(items, dict) and "limits" in items:
        items = items["limits"]        # the pack's limits.json: {"limits": [...], ...}
    if not isinstance(items, list):
        raise InputError([Problem(where, "must hold a JSON list of limit objects")])
    out = []
    seen: set[str | None] = set()
    for i, item in enumerate(items, start=1):
        if not isinstance(item, dict):
            problems.append(Problem(f"{where}:{i}", "item is not an object"))
            continue
        for key in ("limit", "value", "threshold", "status"):
            if key not in item:
                problems.append(Problem(f"{where}:{i}:{key}", "key missing"))
        if "limit" in item and not (isinstance(item["limit"], str) and item["limit"].strip()):
            problems.append(Problem(f"{where}:{i}:limit", "must be a non-empty text"))
        for key in ("value", "threshold"):
            if key in item and not _number(item[key]):
                problems.append(Problem(f"{where}:{i}:{key}", "must be a number or null"))
        if "status" in item and item["status"] not in LIMIT_STATUSES:
            problems.append(Problem(f"{where}:{i}:status", f"{item['status']!r} is not one of "
                                    + ", ".join(LIMIT_STATUSES)))
        for key in ("scope", "label"):
            if item.get(key) is not None and not isinstance(item[key], str):
                problems.append(Problem(f"{where}:{i}:{key}", "must be a text or null"))
        if item.get("kind") not in (None, "max", "min"):
            problems.append(Problem(f"{where}:{i}:kind", "must be max or min"))
        row = {k: item.get(k) for k in ("limit", "scope", "kind", "value", "threshold",
                                         "status")}
        if isinstance(row["limit"], str) and (row["scope"] is None
                                              or isinstance(row["scope"], str)):
            row["key"] = limit_key(row["limit"], row["scope"])
            row["label"] = limit_label(row["limit"], row["scope"], item.get("label"))
        out.append(row)
        if "key" in row and row["key"] in seen:
            problems.append(Problem(f"{where}:{i}", f"limit {row['key']!r} is listed twice"))
        seen.add(row.get("key"))
    if problems:
        raise InputError(problems)
    return out


def read_packs(archive: Path, entries: list[Entry]) -> list[SignedPack]:
    """Every entry's results, in ledger order; :class:`InputError` lists every file, row and
    key the site cannot use (nothing is written then)."""
    archive = Path(archive)
    later = {e.supersedes: e for e in entries if e.supersedes is not None}
    by_seq = {e.seq: e for e in entries}
    problems: list[Problem] = []
    packs = []
    for e in entries:
        html, results = _results_files(e)
        sec_rel = _need(results, "securities.csv", e, problems)
        roll_rel = _need(results, "rolling_beta.csv", e, problems)
        port_rel = _need(results, "portfolio.json", e, problems)
        if not (sec_rel and roll_rel and port_rel):
            continue
        sec = _csv(archive, sec_rel, SECURITY_COLUMNS, problems)
        roll = _csv(archive, roll_rel, ROLLING_COLUMNS, problems)
        port = _portfolio(archive, port_rel, problems)
        limits = None
        if "limits.json" in results:
            try:
                limits = read_limits(_read(archive, results["limits.json"]),
                                     str(archive / results["limits.json"]))
            except InputError as exc:
                problems.extend(exc.problems)
        if sec is None or roll is None or port is None:
            continue
        roll = roll[roll["series"] == PORTFOLIO_SERIES].drop(columns="series")
        packs.append(SignedPack(
            entry=e, name=PurePosixPath(e.pdf_path).stem, pdf_path=e.pdf_path,
            html_path=html, portfolio=port,
            securities=sec.reset_index(drop=True),
            rolling=roll.sort_values("date", kind="stable").reset_index(drop=True),
            limits=limits, superseded_by=later.get(e.seq),
            supersedes=by_seq.get(e.supersedes) if e.supersedes is not None else None))
    if problems:
        raise InputError(problems)
    return packs


def newest_first(packs: list[SignedPack]) -> list[SignedPack]:
    """The index order: latest period first; within a period, the latest sign-off first."""
    return sorted(packs, key=lambda p: (p.entry.period_end, p.entry.seq), reverse=True)


def current_by_period(packs: list[SignedPack]) -> list[SignedPack]:
    """For the trends: per pack name and period, the latest sign-off that nothing
    supersedes; ordered by pack name, then period."""
    best: dict[tuple[str, str], SignedPack] = {}
    for p in packs:
        if not p.current:
            continue
        key = (p.entry.pack_name, p.entry.period_end)
        if key not in best or p.entry.seq > best[key].entry.seq:
            best[key] = p
    return [best[k] for k in sorted(best)]
