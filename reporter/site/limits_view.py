"""Policy limits as the site shows them: the pack's own labels and number formats.

A limit is identified by its name *and* its scope (``max_sector_weight`` has one entry per
sector it names, and one for the sectors not named), so no per-sector maximum is lost when
limits are gathered over periods. The value text is the pack's own (``limit_value`` in
``templates/pack.html.j2``): beta to two decimals, effective number of holdings to one, a
count of holdings as a whole number, every other limit (weights, shares, tracking error,
value at risk, stress loss) as a percentage to one decimal.
"""

from __future__ import annotations

from reporter.limits import LABELS, OTHER_SECTORS, STATUS_ORDER
from reporter.render.environment import DASH, num, pct

BETA_LIMITS = ("beta_min", "beta_max")


def limit_key(limit: str, scope: str | None) -> str:
    """The limit and, for a per-sector one, its sector (as ``LimitCheck.key``)."""
    return limit if scope is None else f"{limit}:{scope}"


def limit_label(limit: str, scope: str | None, label: object = None) -> str:
    """The pack's label for a limit: the one ``limits.json`` carries when it has one, else
    the pack's wording for the key (``LimitCheck.label``), else the key itself."""
    if isinstance(label, str) and label.strip():
        return label.strip()
    base = LABELS.get(limit, limit)
    if scope == OTHER_SECTORS:
        return f"{base}, other sectors"
    return f"{base}: {scope}" if scope else base


def limit_text(limit: str, value: float | None) -> str:
    """A limit's value or threshold in the pack's own format."""
    if value is None:
        return DASH
    if limit in BETA_LIMITS:
        return num(value)
    if limit == "min_effective_n":
        return num(value, 1)
    if limit == "min_holdings":
        return f"{round(value):d}"
    return pct(value, 1)


def bound_text(limit: str, kind: str | None, threshold: float | None) -> str:
    """``at most 7.6%`` / ``at least 25.0``: the threshold with its direction."""
    if kind is None:
        kind = "min" if limit.startswith("min_") or limit == "beta_min" else "max"
    return f"{'at least' if kind == 'min' else 'at most'} {limit_text(limit, threshold)}"


def limit_counts(limits: list[dict] | None) -> dict[str, int] | None:
    """Limits by status (``within``, ``watch``, ``breach``) and ``total``; None without
    limit results."""
    if limits is None:
        return None
    counts = {s: sum(item["status"] == s for item in limits) for s in STATUS_ORDER}
    return counts | {"total": len(limits)}


def beta_band(limits: list[dict] | None) -> tuple[float | None, float | None]:
    """The policy band for portfolio beta (``beta_min``, ``beta_max``) from one period's
    limits; None for a side that is not set."""
    found = {item["limit"]: item["threshold"] for item in (limits or [])
             if item["limit"] in BETA_LIMITS}
    return found.get("beta_min"), found.get("beta_max")
