"""Checks on the reading options of one input file that the schema cannot express: which
roles may be a price file (``values = "prices"``) or carry a display ``name``, and that a
pack gives its holdings' returns either as returns or as prices."""

from __future__ import annotations

from reporter.errors import Problem

# roles whose file is a dated series of one value: they may be given as a price or
# total-return index, and may carry a name shown in the pack
SERIES_ROLES = ("market", "benchmark", "portfolio_returns", "fund.benchmark")
NAMED_ROLES = SERIES_ROLES + ("risk_free",)


def _is_series(role: str) -> bool:
    return role in SERIES_ROLES or (role.startswith("mandates.") and role.endswith(".benchmark"))


def input_file_problems(role: str, spec, key: str, fname: str) -> list[Problem]:
    """Problems with the options of input ``role`` (an ``InputFile`` given at ``key``)."""
    out = []
    if spec.values is not None and not (_is_series(role) or role == "returns"):
        out.append(Problem(f"{fname}:{key}.values", "only the returns, market proxy and "
                           "benchmark files may be given as prices"))
    if spec.values is not None and key == "inputs.prices":
        out.append(Problem(f"{fname}:{key}.values", "[inputs] prices is a price file already"))
    if spec.name is not None and not (_is_series(role) or role in NAMED_ROLES):
        out.append(Problem(f"{fname}:{key}.name", "a name is shown only for the market proxy, "
                           "a benchmark, the portfolio returns and the risk-free rate"))
    return out


def returns_or_prices(inputs, fname: str) -> list[Problem]:
    """``[inputs]`` must give the holdings' returns or their prices, not both."""
    if inputs.returns is not None and inputs.prices is not None:
        return [Problem(f"{fname}:inputs.prices", "give returns or prices, not both")]
    if inputs.returns is None and inputs.prices is None:
        return [Problem(f"{fname}:inputs.returns", "required key is missing (or give prices, "
                        "a price or total-return index file)")]
    return []


# what an unnamed series is called in the pack (never its file name)
DEFAULT_NAMES = {"market": "Market proxy", "benchmark": "Benchmark", "risk_free": "Risk-free rate",
                 "portfolio_returns": "Portfolio returns", "fund.benchmark": "Fund benchmark"}


def series_name(settings, role: str) -> str:
    """The name a series is shown by: ``name = ...`` from pack.toml, else a plain label
    (:data:`DEFAULT_NAMES`; a mandate's benchmark is "Benchmark")."""
    spec = settings.inputs.get(role)
    if spec is not None and spec.label:
        return spec.label
    return DEFAULT_NAMES.get(role, "Benchmark")


def against_phrase(settings, role: str) -> str:
    """What a mandate is measured against, in words: "its benchmark (Domestic equity
    index)", "its benchmark, the market proxy" or "its benchmark"."""
    spec = settings.inputs.get(role)
    if spec is not None and spec.label:
        return f"its benchmark ({spec.label})"
    return "its benchmark, the market proxy" if role == "market" else "its benchmark"
