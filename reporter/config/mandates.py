"""A fund's ``[[mandates]]`` and ``[fund]`` tables, resolved into :class:`Mandate` records."""

from __future__ import annotations

import re

from reporter.config.problems import limits_problems
from reporter.config.schema import PackFile
from reporter.config.settings import TOTAL_FUND, Mandate
from reporter.errors import Problem

STRATEGIC_TOLERANCE = 1e-6    # |sum of strategic weights - 1| allowed


def resolve_mandates(model: PackFile, fname: str, add_input, problems: list[Problem]
                     ) -> tuple[tuple[Mandate, ...], str | None]:
    """The ``[[mandates]]`` and ``[fund]`` tables as :class:`Mandate` records and the kind of
    the fund's benchmark (``"market"``, ``"file"`` or ``"policy"``); ``((), None)`` for a
    single-portfolio pack. Files are registered with ``add_input`` under the roles
    ``mandates.<i>.holdings``, ``mandates.<i>.benchmark`` and ``fund.benchmark``; every
    problem is appended to ``problems`` as ``pack.toml:<key>: message``."""
    if not model.mandates:
        if model.fund is not None:
            problems.append(Problem(f"{fname}:fund", "a [fund] table needs [[mandates]]"))
        elif model.mandates is not None:
            problems.append(Problem(f"{fname}:mandates", "the list of mandates is empty"))
        return (), None
    out: list[Mandate] = []
    seen: dict[str, int] = {}
    own_files = [m.holdings is not None for m in model.mandates]
    if model.inputs.holdings is not None and any(own_files):
        problems.append(Problem(f"{fname}:inputs.holdings", "give the holdings either in one "
                                "file with a mandate column ([inputs] holdings) or per mandate "
                                "(mandates.N.holdings), not both"))
    elif model.inputs.holdings is None and not all(own_files):
        for i, has in enumerate(own_files):
            if not has:
                problems.append(Problem(f"{fname}:mandates.{i}.holdings", "required key is "
                                        "missing: there is no [inputs] holdings file with a "
                                        "mandate column"))
    for i, m in enumerate(model.mandates):
        key = f"mandates.{i}"
        name = m.name.strip()
        if name.casefold() in seen:
            problems.append(Problem(f"{fname}:{key}.name", f"mandate name {name!r} is used "
                                    f"twice (first at mandates.{seen[name.casefold()]})"))
        seen.setdefault(name.casefold(), i)
        if name.casefold() == TOTAL_FUND.casefold():
            problems.append(Problem(f"{fname}:{key}.name", f"{TOTAL_FUND!r} is reserved for "
                                    "the whole fund; choose another name"))
        if not name.isprintable():      # a line break or tab: the holdings could not match it
            problems.append(Problem(f"{fname}:{key}.name", f"mandate name {name!r} holds a "
                                    "control character; write it on one line"))
        if m.range is not None:
            lo, hi = m.range
            if lo > hi:
                problems.append(Problem(f"{fname}:{key}.range", f"the range [{lo:g}, {hi:g}] "
                                        "is reversed: write the low end first"))
            elif not lo <= m.strategic_weight <= hi:
                problems.append(Problem(f"{fname}:{key}.range", f"the range [{lo:g}, {hi:g}] "
                                        "does not contain the strategic weight "
                                        f"{m.strategic_weight:g}"))
        if m.limits is not None:
            problems.extend(limits_problems(m.limits, fname, prefix=f"{key}.limits"))
        h_role = f"{key}.holdings" if m.holdings is not None else None
        if m.holdings is not None:
            add_input(h_role, m.holdings, h_role)
        b_role = f"{key}.benchmark" if m.benchmark is not None else "market"
        if m.benchmark is not None:
            add_input(b_role, m.benchmark, b_role)
        if m.portfolio_returns is not None:
            add_input(f"{key}.portfolio_returns", m.portfolio_returns, f"{key}.portfolio_returns")
        slug = re.sub(r"[^a-z0-9]+", "-", name.lower()).strip("-") or "mandate"
        out.append(Mandate(index=i, name=name, slug=f"m{i + 1}-{slug}"[:60],
                           holdings_role=h_role, benchmark_role=b_role,
                           strategic_weight=m.strategic_weight,
                           range=tuple(m.range) if m.range is not None else None,
                           declared_weight=m.weight, limits=m.limits, manager=m.manager))
    total = sum(m.strategic_weight for m in model.mandates)
    if abs(total - 1.0) > STRATEGIC_TOLERANCE:
        problems.append(Problem(f"{fname}:mandates", f"the strategic weights sum to {total:.6g}, "
                                "not 1"))
    declared = [m.weight for m in model.mandates]
    if any(w is not None for w in declared) and any(w is None for w in declared):
        missing = ", ".join(f"mandates.{i}" for i, w in enumerate(declared) if w is None)
        problems.append(Problem(f"{fname}:mandates", "a current weight is declared for some "
                                f"mandates but not for {missing}; declare all or none"))
    kind = "market"
    bench = model.fund.benchmark if model.fund is not None else None
    if isinstance(bench, str) and bench == "policy":
        kind = "policy"
    elif bench is not None:
        kind = "file"
        add_input("fund.benchmark", bench, "fund.benchmark")
    if model.inputs.benchmark is not None:
        problems.append(Problem(f"{fname}:inputs.benchmark", "not used in a fund with mandates: "
                                "give the fund's benchmark in [fund] and each mandate's in "
                                "[[mandates]]"))
    for role in ("factors", "benchmark_sectors", "weights_history"):   # see factor_inputs
        if getattr(model.inputs, role) is not None:
            problems.append(Problem(f"{fname}:inputs.{role}", "not used in a fund with "
                                    "mandates yet: give it in a single-portfolio pack"))
    return tuple(out), kind
