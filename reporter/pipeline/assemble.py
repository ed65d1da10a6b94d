"""Assemble a pack, a single portfolio or a fund, by one road: read -> validate -> each part
(:func:`~reporter.pipeline.part.assemble_part`) -> the whole. Nothing is written."""

from __future__ import annotations

import dataclasses
import datetime as dt

from reporter.config import Settings
from reporter.fund_inputs import validate_fund
from reporter.memory import release_free_memory, return_large_blocks
from reporter.pipeline.fund import FundAssembled, assembled_fund, fund_parts
from reporter.pipeline.part import assemble_part
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
    with progress.stage("read"):
        (raws, read_problems, previous, compare_warnings, commentary,
         compare_note) = read_stage(settings, strict)
    with progress.stage("validate"):
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
    fp = fingerprint(hashes)
    done = [assemble_part(p, fp, at, progress) for p in parts]
    if settings.is_fund:
        with progress.stage("chart", "the fund's own charts"):
            return assembled_fund(fin, done, hashes, commentary, compare_warnings)
    return Assembled.of(done[0], hashes, compare_warnings, commentary)
