"""Assemble a pack, a single portfolio or a fund, by one road: read -> validate -> each part
(:func:`~reporter.pipeline.part.assemble_part`) -> the whole. Nothing is written."""

from __future__ import annotations

import dataclasses
import datetime as dt
from dataclasses import dataclass

from reporter.commentary import CommentarySet
from reporter.config import Settings
from reporter.errors import Problem
from reporter.fund_inputs import FundInputs, validate_fund
from reporter.memory import release_free_memory, return_large_blocks
from reporter.pipeline.fund import FundAssembled, assembled_fund, fund_parts
from reporter.pipeline.part import PartInputs, assemble_part
from reporter.pipeline.single import Assembled, single_parts
from reporter.pipeline.stages import (
    actions_stage,
    build_time,
    fingerprint,
    input_hashes,
    read_stage,
)
from reporter.progress import Progress
from reporter.render.html import start_chart_engine


@dataclass(frozen=True)
class CheckedInputs:
    """Every input of a pack, read and checked as a build does (see :func:`checked_inputs`):
    its parts (one for a single portfolio; the total fund then each mandate), a fund's
    checked inputs (None for a single portfolio), the input files' hashes, the commentary
    and the warnings about the earlier pack to compare with."""

    parts: list[PartInputs]
    fund: FundInputs | None
    hashes: dict[str, str]
    commentary: CommentarySet
    compare_warnings: list[Problem]

    @property
    def warnings(self) -> list[Problem]:
        """Every warning a build of these inputs shows (the inputs', then the comparison's)."""
        own = self.fund.warnings if self.fund is not None else self.parts[0].inputs.warnings
        return own + self.compare_warnings


def checked_inputs(settings: Settings, *, strict: bool = False,
                   progress: Progress | None = None) -> CheckedInputs:
    """Read and check everything a build of ``settings`` reads: the input tables, the optional
    files (benchmark, own returns, factors, benchmark sectors, weights history, gross returns,
    cash flows), the earlier pack to compare with, the commentary and the action log. Raises
    :class:`~reporter.errors.InputError` with every problem found. The build's "read" and
    "validate" stages, and all that ``reporter check`` runs, so the two cannot disagree."""
    progress = progress or Progress(quiet=True)
    with progress.stage("read"):
        (raws, read_problems, previous, compare_warnings, commentary,
         compare_note) = read_stage(settings, strict)
    with progress.stage("validate"):
        fin = None
        if settings.is_fund:
            fin = validate_fund(settings, raws, read_problems, strict=strict)
            parts = fund_parts(fin, settings, previous, commentary, compare_note)
        else:
            parts = single_parts(settings, raws, read_problems, previous, commentary,
                                 compare_note, strict=strict)
        del raws                    # the typed inputs hold everything needed from here on
        release_free_memory()
        hashes = input_hashes(settings)
        hashes.update(commentary.hashes)        # the commentary files and their images
        # the pack's action log is shown in its first part (the portfolio, or the total fund)
        parts[0] = dataclasses.replace(parts[0], actions=actions_stage(settings, hashes))
    return CheckedInputs(parts, fin, hashes, commentary, compare_warnings)


def assemble(settings: Settings, *, strict: bool = False, progress: Progress | None = None,
             at: dt.datetime | None = None) -> Assembled | FundAssembled:
    """Read, validate, analyse and chart one pack (no output is written): a single
    portfolio's :class:`Assembled`, or a fund's :class:`FundAssembled`.

    ``at`` fixes the build time shown in the pack (sign-off re-renders a build with the time
    it was built); by default it is :func:`build_time`.
    """
    progress = progress or Progress(quiet=True)
    at = at or build_time()
    return_large_blocks()           # what the analysis frees goes back before the PDF
    start_chart_engine()            # ready by the chart stage (see its doc)
    checked = checked_inputs(settings, strict=strict, progress=progress)
    fp = fingerprint(checked.hashes)
    done = [assemble_part(p, fp, at, progress) for p in checked.parts]
    if checked.fund is not None:
        with progress.stage("chart", "the fund's own charts"):
            return assembled_fund(checked.fund, done, checked.hashes, checked.commentary,
                                  checked.compare_warnings)
    return Assembled.of(done[0], checked.hashes, checked.compare_warnings, checked.commentary)
