"""The stages every pack shares, a single portfolio or a fund: the build time, the read
stage, the inputs' hashes and fingerprint, and the action log."""

from __future__ import annotations

import datetime as dt
import hashlib
import os

from reporter.actions import ActionLog, read_actions
from reporter.archive.verify import file_sha256
from reporter.changes import read_previous
from reporter.commentary import read_commentary
from reporter.config import Settings
from reporter.errors import InputError, Problem
from reporter.validate import read_inputs


def build_time() -> dt.datetime:
    """The build's timestamp: ``SOURCE_DATE_EPOCH`` when set (reproducible builds), else now."""
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    if epoch and epoch.strip().isdigit():
        return dt.datetime.fromtimestamp(int(epoch), tz=dt.UTC)
    return dt.datetime.now(dt.UTC).replace(microsecond=0)


def input_hashes(settings: Settings) -> dict[str, str]:
    """sha256 of pack.toml and of each input file, keyed by role."""
    out = {"pack.toml": file_sha256(settings.config_path)}
    for role, spec in settings.inputs.items():      # the mandates' files too, in a fund
        out[role] = file_sha256(spec.path)
    return out


def fingerprint(hashes: dict[str, str]) -> str:
    """One sha256 over the per-file hashes, in a fixed order."""
    text = "".join(f"{k}={hashes[k]}\n" for k in sorted(hashes))
    return hashlib.sha256(text.encode()).hexdigest()


def actions_stage(settings: Settings, hashes: dict[str, str]) -> ActionLog:
    """The pack's action log (``actions.csv``, optional); its sha256 joins ``hashes`` so
    that the input fingerprint, and sign-off's check of the inputs, notice an edit."""
    log = read_actions(settings.pack_dir, settings.period_end)
    if log.sha256 is not None:
        hashes["actions.csv"] = log.sha256
    return log


def read_stage(settings: Settings, strict: bool = False) -> tuple:
    """What the read stage gathers, for a single pack or a fund: the raw input tables and the
    problems of those that could not be read, the earlier pack to compare with (or None) and
    the warnings about it, the commentary, and the note shown when there is nothing to
    compare. With ``strict``, a comparison warning stops the build."""
    raws, read_problems = read_inputs(settings)
    previous, compare_warnings = read_previous(settings)
    commentary = read_commentary(settings.pack_dir)
    compare_note = compare_warnings[0].message if compare_warnings else None
    if "changes" in commentary.by_section and previous is None and compare_note is None:
        compare_warnings.append(Problem(
            "commentary/changes.md", "not shown: there is no [compare] table in "
            "pack.toml, so the pack has no 'Since last pack' section", "warning"))
    if strict and compare_warnings:
        raise InputError(compare_warnings)
    return raws, read_problems, previous, compare_warnings, commentary, compare_note
