"""A single portfolio: a fund of one part with no total. Its checked inputs become one
:class:`~reporter.pipeline.part.PartInputs`, and the assembled part an :class:`Assembled`."""

from __future__ import annotations

from dataclasses import dataclass, field

from reporter.analytics.changes import PackChanges
from reporter.analytics.pack import PackResults
from reporter.analytics.style import StyleResults
from reporter.benchmark import (
    validate_benchmark,
    validate_gross_returns,
    validate_portfolio_returns,
)
from reporter.commentary import CommentarySet
from reporter.config import Settings
from reporter.context import PackContext
from reporter.errors import Problem
from reporter.factor_inputs import validate_style_inputs
from reporter.limits import LimitsReport
from reporter.models import ValidInputs
from reporter.pipeline.part import Part, PartInputs
from reporter.render.html import render_html
from reporter.validate import validate_tables
from reporter.validate.flows import earlier_end, validate_cash_flows

# the PDF editions of a build: edition -> (template, file name)
EDITIONS = {"full": "pack.html.j2", "trustees": "trustees.html.j2"}
EDITION_FILES = {"full": "pack.pdf", "trustees": "pack-trustees.pdf"}


@dataclass(frozen=True)
class Assembled:
    """Everything computed for one pack, before any rendering to PDF or writing."""

    settings: Settings
    inputs: ValidInputs
    results: PackResults
    context: PackContext
    svgs: dict
    hashes: dict[str, str]
    print_svgs: dict = field(default_factory=dict)   # the charts as the PDF draws them
    limits: LimitsReport | None = None
    changes: PackChanges | None = None
    compare_warnings: list[Problem] = field(default_factory=list)
    commentary: CommentarySet = field(default_factory=CommentarySet)
    style: StyleResults | None = None    # factor model and attribution, when given

    @classmethod
    def of(cls, part: Part, hashes: dict[str, str], compare_warnings: list[Problem],
           commentary: CommentarySet) -> Assembled:
        """A single portfolio's pack from its one part."""
        return cls(part.settings, part.inputs, part.results, part.context, part.svgs, hashes,
                   print_svgs=part.print_svgs, limits=part.limits, changes=part.changes,
                   compare_warnings=compare_warnings, commentary=commentary, style=part.style)

    def html(self, for_print: bool = False, signoff: dict | None = None,
             edition: str = "full", bytecode_cache=None) -> str:
        """The pack's HTML; ``edition`` "trustees" gives the trustees' edition (the same
        context through ``trustees.html.j2``). ``bytecode_cache``: compiled templates kept
        between calls (:class:`~reporter.render.html.MemoryBytecodeCache`)."""
        charts = (self.print_svgs or self.svgs) if for_print else self.svgs
        return render_html(self.context, charts, for_print=for_print,
                           user_templates=self.settings.templates_dir, signoff=signoff,
                           template=EDITIONS[edition], extra={"edition": edition},
                           bytecode_cache=bytecode_cache)


def single_parts(settings: Settings, raws: dict, read_problems: list[Problem], previous,
                 commentary: CommentarySet, compare_note: str | None,
                 strict: bool = False) -> list[PartInputs]:
    """Check a single portfolio's inputs (raising :class:`InputError` with every problem) and
    return them as its one part (the action log is added by the caller)."""
    benchmark, bench_problems = validate_benchmark(settings, raws)
    own, own_problems = validate_portfolio_returns(settings, raws)
    style_in, style_problems = validate_style_inputs(settings, raws)
    gross, gross_problems = validate_gross_returns(settings, raws)
    flows, flow_problems = validate_cash_flows(settings, raws, earlier_end(settings, previous))
    inputs = validate_tables(settings, raws, list(dict.fromkeys(
        [*read_problems, *bench_problems, *own_problems, *style_problems,
         *gross_problems, *flow_problems])), strict=strict, benchmark=benchmark)
    return [PartInputs(
        name=settings.name, slug="", settings=settings, inputs=inputs, tracking=benchmark,
        own=own, gross=gross, style=style_in, previous=previous, compare_note=compare_note,
        commentary=commentary.by_section, money=True, pack_previous=previous, flows=flows)]
