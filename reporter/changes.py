"""Read the earlier pack that ``[compare] previous`` names (read-only; never written).

Two forms: a build folder (``reporter build``'s output) or ``archive:ARCHIVE_DIR``, the latest
signed pack of the same ``[pack] name`` whose period ends strictly before this pack's. Only
the build's ``results/`` are read: ``manifest.json``, ``portfolio.json``, ``securities.csv``
and, when present, ``limits.json`` (older builds have none). From a fund's build, the total
fund's rows of ``securities.csv`` are read (its ``portfolio.json`` and ``limits.json`` are
the total fund's). The comparison itself is pure and lives in :mod:`reporter.analytics.changes`.
"""

from __future__ import annotations

import datetime as dt
import json
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from reporter.config import TOTAL_FUND, Settings
from reporter.csvsafe import unescape_frame
from reporter.errors import InputError, Problem

WHERE = "pack.toml:compare.previous"
SECURITY_COLUMNS = ("security_id", "weight")     # required in an earlier securities.csv
TEXT_COLUMNS = ("security_id", "name", "sector", "status", "sml_position")


@dataclass(frozen=True)
class PreviousPack:
    """The results of an earlier pack, as written by its build.

    ``securities`` has at least ``security_id, weight`` (decimals) and, from builds of this
    tool, ``name, status, beta, sml_residual, sml_position``. ``limits`` is the list under
    ``"limits"`` in its limits.json, or None when the build has no limits.json.
    """

    folder: Path
    source: str                     # "build" | "archive"
    period_end: dt.date
    manifest: dict
    portfolio: dict
    securities: pd.DataFrame
    limits: list[dict] | None
    # from a fund's build: each mandate's own results, by mandate name (see read_build)
    mandates: dict[str, PreviousPack] = field(default_factory=dict)


def latest_signed_pack(archive: Path, before: dt.date, pack_name: str) -> Path | None:
    """The archive folder ``ARCHIVE/<date>/<pack-name>-<date>[-rN]/`` of pack ``pack_name``'s
    signed pack with the latest ``period_end`` strictly before ``before``, and of that period
    the latest revision (the one that supersedes the others), as the archive's ledger
    records them. None when there is none. Another scheme's packs in the same archive are
    never chosen, and revision 10 follows revision 9 (folder names sort "-r10" before
    "-r2"). The caller has verified the archive against its ledger (:func:`check_archive`),
    so the folder the entry names holds what was signed. Read-only."""
    from reporter.archive.ledger import connect_read_only

    con = connect_read_only(Path(archive))
    try:
        row = con.execute("SELECT pdf_path FROM entries WHERE pack_name = ? AND period_end < ? "
                          "ORDER BY period_end DESC, revision DESC LIMIT 1",
                          (pack_name, before.isoformat())).fetchone()
    finally:
        con.close()
    return Path(archive) / Path(row[0]).with_suffix("") if row else None


MAX_FINDINGS = 10       # archive findings listed before a count of the rest


def check_archive(archive: Path) -> None:
    """Refuse (:class:`InputError`, nothing read) an archive that fails
    :func:`reporter.archive.verify.verify_archive`: an archived file altered, missing or
    writable, a file no entry records (a pack folder put in by hand), an edited ledger or a
    broken chain. The whole archive is checked, not only the entry compared with, because
    the choice of that entry reads every archived ``manifest.json``. One line per finding,
    naming its file (or ledger entry) and what is wrong."""
    from reporter.archive.verify import ArchiveUnreadable, verify_archive

    try:
        report = verify_archive(archive)
    except ArchiveUnreadable as exc:
        raise InputError([Problem(WHERE, f"{exc}; nothing to compare")]) from None
    if report.intact:
        return
    problems = [Problem(str(Path(archive) / f.where),
                        f"{f.kind}: {f.message}; the archive does not match its ledger, so "
                        "no pack in it is compared with (see 'reporter verify --archive')")
                for f in report.findings[:MAX_FINDINGS]]
    if len(report.findings) > MAX_FINDINGS:
        problems.append(Problem(str(archive), f"... and {len(report.findings) - MAX_FINDINGS}"
                                " more problems"))
    raise InputError(problems)


def read_previous(settings: Settings) -> tuple[PreviousPack | None, list[Problem]]:
    """The earlier pack named in ``[compare]``, and warnings (an archive with no earlier
    pack). (None, []) when there is no ``[compare]`` table. Raises :class:`InputError` when
    the folder is not a pack build or its files cannot be read, or when the archive named
    fails verification against its ledger (see :func:`check_archive`)."""
    if settings.compare_archive is not None:
        check_archive(settings.compare_archive)
        folder = latest_signed_pack(settings.compare_archive, settings.period_end,
                                    settings.name)
        if folder is None:
            return None, [Problem(WHERE, f"no signed pack named {settings.name!r} with a "
                                  f"period end before {settings.period_end} in the archive at "
                                  f"{settings.compare_archive}; nothing to compare",
                                  "warning")]
        return read_build(folder, "archive", settings.period_end), []
    if settings.compare_build is not None:
        return read_build(settings.compare_build, "build", settings.period_end), []
    return None, []


def read_build(folder: Path, source: str, period_end: dt.date) -> PreviousPack:
    """Read the results of one earlier build (see :class:`PreviousPack`)."""
    results = Path(folder) / "results"
    missing = [n for n in ("manifest.json", "portfolio.json", "securities.csv")
               if not (results / n).is_file()]
    if missing:
        raise InputError([Problem(WHERE, f"{folder} is not a pack build: results/"
                                  f"{missing[0]} is missing")])
    problems: list[Problem] = []
    manifest = _json(results / "manifest.json", problems)
    portfolio = _json(results / "portfolio.json", problems)
    limits_doc = _json(results / "limits.json", problems) if (
        results / "limits.json").is_file() else None
    try:
        sec = pd.read_csv(results / "securities.csv", dtype={c: str for c in TEXT_COLUMNS},
                          keep_default_na=False, na_values=[""])
        unescape_frame(sec, (*TEXT_COLUMNS, "mandate"))     # the CSV-injection escape, undone
    except (OSError, ValueError, pd.errors.ParserError) as exc:
        problems.append(Problem(str(results / "securities.csv"), f"cannot be read: {exc}"))
        sec = None
    if sec is not None:
        for col in SECURITY_COLUMNS:
            if col not in sec.columns:
                problems.append(Problem(f"{results / 'securities.csv'}:1:{col}",
                                        "required column is missing"))
        for col in ("weight", "beta", "sml_residual"):
            if col in sec.columns:
                values = pd.to_numeric(sec[col], errors="coerce")
                bad = values.isna() & sec[col].notna()
                if col == "weight":
                    bad |= sec[col].isna()
                if bad.any():
                    row = int(bad.to_numpy().nonzero()[0][0]) + 2   # header is line 1
                    problems.append(Problem(f"{results / 'securities.csv'}:{row}:{col}",
                                            f"not a number: {sec[col].iloc[row - 2]!r}"))
                sec[col] = values
    prev_end = None
    if manifest is not None:
        try:
            prev_end = dt.date.fromisoformat(manifest["period_end"])
        except (KeyError, TypeError, ValueError):
            problems.append(Problem(f"{results / 'manifest.json'}:period_end",
                                    "missing or not an ISO date"))
    if prev_end is not None and prev_end > period_end:
        problems.append(Problem(WHERE, f"the earlier pack's period end ({prev_end}) is after "
                                f"this pack's ({period_end})"))
    if problems:
        raise InputError(problems)
    for col in TEXT_COLUMNS:
        if col in sec.columns:
            sec[col] = sec[col].fillna("")
    # a fund's build: the total fund's rows, and each mandate's (checked above as one file,
    # so that a problem names its line in securities.csv)
    by_mandate: dict[str, pd.DataFrame] = {}
    if "mandate" in sec.columns:
        names = sec["mandate"].astype(str)
        by_mandate = {m: g.drop(columns="mandate").reset_index(drop=True)
                      for m, g in sec.groupby(names, sort=False) if m != TOTAL_FUND}
        sec = sec[names == TOTAL_FUND].drop(columns="mandate").reset_index(drop=True)
    limits = limits_doc.get("limits") if isinstance(limits_doc, dict) else None
    return PreviousPack(folder=Path(folder), source=source, period_end=prev_end,
                        manifest=manifest, portfolio=portfolio, securities=sec,
                        limits=limits if isinstance(limits, list) else None,
                        mandates=_mandates(results, by_mandate, source, prev_end, manifest))


def _mandates(results: Path, by_mandate: dict[str, pd.DataFrame], source: str,
              period_end: dt.date, manifest: dict) -> dict[str, PreviousPack]:
    """Each mandate of an earlier fund build that wrote ``mandate_portfolio.json`` (its rows of
    securities.csv, checked with the rest of the file, its portfolio figures and, from
    ``mandate_limits.json``, its limits). A build without that file gives no mandate to
    compare with; an unreadable one is an error."""
    path = results / "mandate_portfolio.json"
    if not by_mandate or not path.is_file():
        return {}
    problems: list[Problem] = []
    portfolios = _json(path, problems)
    limits_path = results / "mandate_limits.json"
    limits = _json(limits_path, problems) if limits_path.is_file() else {}
    if problems:
        raise InputError(problems)
    out = {}
    for name, sec in by_mandate.items():
        port = (portfolios or {}).get(name)
        if not isinstance(port, dict):
            continue
        own = (limits or {}).get(name)
        items = own.get("limits") if isinstance(own, dict) else None
        out[name] = PreviousPack(folder=results.parent, source=source, period_end=period_end,
                                 manifest=manifest, portfolio=port, securities=sec,
                                 limits=items if isinstance(items, list) else None)
    return out


def _json(path: Path, problems: list[Problem]) -> dict | None:
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        problems.append(Problem(str(path), f"cannot be read as JSON: {exc}"))
        return None
    if not isinstance(doc, dict):
        problems.append(Problem(str(path), "is not a JSON object"))
        return None
    return doc
