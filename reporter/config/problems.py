"""The problems of a ``pack.toml`` that are not a single key's type: pydantic's errors as
``pack.toml:<key>: message`` lines, checks across keys, date formats, and paths that must
stay inside the pack folder."""

from __future__ import annotations

import datetime as dt
import re
from pathlib import Path

from pydantic import ValidationError

from reporter.config.schema import CompareSection, LimitsSection
from reporter.errors import InputError, Problem, quoted


def _loc(loc: tuple) -> str:
    # a list position is kept after "mandates" and "scenarios" (mandates.1.name), dropped elsewhere
    return ".".join(str(p) for k, p in enumerate(loc)
                    if (not isinstance(p, int) or (k and loc[k - 1] in ("mandates", "scenarios")))
                    and p not in _UNION_TAGS)


# pydantic names the alternatives of a str | table (or number | table) field
_UNION_TAGS = {"str", "InputFile", "constrained-float", "dict[str,constrained-float]"}


def pydantic_problems(err: ValidationError, fname: str) -> list[Problem]:
    problems: dict[str, Problem] = {}
    for e in err.errors():
        loc = tuple(e["loc"])
        if ("str" in loc or "constrained-float" in loc) and isinstance(e.get("input"), dict):
            # a table given for a `str | table` field: only the table's own errors matter
            continue
        key = _loc(loc) or "(top level)"
        kind = e["type"]
        if kind == "extra_forbidden":
            msg = "unknown key"
        elif kind == "missing":
            msg = "required key is missing"
        else:
            msg = e["msg"]
            if "input" in e and not isinstance(e["input"], dict):
                msg += f" (got {quoted(e['input'])})"
        # a str | table field yields one error per alternative; keep the first
        problems.setdefault(f"{key}|{kind}" if kind == "extra_forbidden" else key,
                            Problem(f"{fname}:{key}", msg))
    return list(problems.values())


def resolve_pack(pack: Path) -> tuple[Path, Path]:
    pack = Path(pack)
    config_path = pack / "pack.toml" if pack.is_dir() else pack
    if not config_path.is_file():
        raise InputError([Problem(str(config_path), "no pack.toml found here")])
    return config_path.parent.resolve(), config_path.resolve()


def pack_name_from_folder(folder: Path) -> str:
    """A scheme identifier from a folder name: lower case, runs of other characters as '-'."""
    slug = re.sub(r"[^a-z0-9]+", "-", folder.name.lower()).strip("-")[:64].strip("-")
    return slug or "pack"


def limits_problems(limits: LimitsSection | None, fname: str,
                    prefix: str = "limits") -> list[Problem]:
    """Checks across the keys of ``[limits]`` (or a mandate's ``limits`` table, keys under
    ``prefix``) that the schema cannot express."""
    if limits is None:
        return []
    out = []
    if (limits.beta_min is not None and limits.beta_max is not None
            and limits.beta_min > limits.beta_max):
        out.append(Problem(f"{fname}:{prefix}.beta_min",
                           f"beta_min ({limits.beta_min}) is above beta_max ({limits.beta_max})"))
    if isinstance(limits.max_sector_weight, dict) and not limits.max_sector_weight:
        out.append(Problem(f"{fname}:{prefix}.max_sector_weight", "the table names no sector"))
    out += [Problem(f"{fname}:{prefix}.asset_class_ranges.{k}", f"the range's low ({lo:g}) "
                    f"is above its high ({hi:g})")
            for k, (lo, hi) in (limits.asset_class_ranges or {}).items() if lo > hi]
    return out


ARCHIVE_PREFIX = "archive:"


def resolve_compare(compare: CompareSection | None, pack_dir: Path, fname: str,
                    problems: list[Problem]) -> tuple[Path | None, Path | None]:
    """``[compare] previous`` as (build folder, archive folder); one of them or neither.

    The path may be absolute or relative to the pack folder, and may lie outside it (an
    earlier build is usually elsewhere); it is only read, never written."""
    if compare is None:
        return None, None
    raw = compare.previous
    is_archive = raw.startswith(ARCHIVE_PREFIX)
    rel = raw[len(ARCHIVE_PREFIX):] if is_archive else raw
    where = f"{fname}:compare.previous"
    if not rel:
        problems.append(Problem(where, "give the archive folder after 'archive:'"))
        return None, None
    path = (pack_dir / Path(rel).expanduser()).resolve()
    if not path.is_dir():
        problems.append(Problem(where, f"folder {rel!r} does not exist"))
        return None, None
    return (None, path) if is_archive else (path, None)


def date_format_problem(fmt: str) -> str | None:
    """Why ``fmt`` cannot read dates, or None. ``fmt`` is a ``strptime`` format that must give
    at least the year and the month (a monthly file may leave out the day); it is tried on a
    sample date, so that a bad directive is reported here rather than failing the read."""
    sample = dt.date(2001, 2, 3)
    try:
        parsed = dt.datetime.strptime(sample.strftime(fmt), fmt)
    except ValueError as exc:
        return f"date format {fmt!r} cannot be used: {exc}"
    if (parsed.year, parsed.month) != (sample.year, sample.month):
        return f"date format {fmt!r} does not give the year and the month"
    return None


def guarded_path(base: Path, rel: str, where: str, problems: list[Problem], *,
                  must_exist: bool, want_dir: bool = False) -> Path | None:
    """Resolve ``rel`` against ``base``; refuse a path that is empty, holds a control
    character (a NUL byte no file system takes), or leaves ``base``."""
    if not rel.strip():
        problems.append(Problem(where, "the path is empty; name a file in the pack folder"))
        return None
    if not rel.isprintable():
        problems.append(Problem(where, f"path {rel!r} holds a control character"))
        return None
    candidate = Path(rel)
    if candidate.is_absolute():
        problems.append(Problem(where, f"path {rel!r} must be relative to the pack folder"))
        return None
    resolved = (base / candidate).resolve()
    if not resolved.is_relative_to(base):
        problems.append(Problem(where, f"path {rel!r} leaves the pack folder"))
        return None
    if must_exist:
        if want_dir and not resolved.is_dir():
            problems.append(Problem(where, f"folder {rel!r} does not exist"))
            return None
        if not want_dir and not resolved.is_file():
            problems.append(Problem(where, f"file {rel!r} does not exist" + (
                " (it is a folder)" if resolved.is_dir() else "")))
            return None
    return resolved
