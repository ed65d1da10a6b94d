"""Policy limits: each ``[limits]`` key checked against the pack's figures (pure; no I/O).

Every limit gets a status: ``breach`` when the value is beyond the limit, ``watch`` when it is
inside the limit but within the watch distance of it (the limit itself counts as watch),
``within`` otherwise. The watch distance is ``watch_margin x |limit|`` for a one-sided limit
and ``watch_margin x (high - low)`` for either end of a two-sided band (the beta band when
both ``beta_min`` and ``beta_max`` are given, and each asset-class range): a fraction of a
narrow band's width, so that the middle of the band is never on watch. Comparing a figure
with a policy threshold and flagging an early-warning band is common practice, no source.

When portfolio beta is outside its band, :func:`beta_target` gives the mix with the
risk-free asset that would reach the band's midpoint: a share c in cash gives
beta_new = (1 - c) beta, because the risk-free asset has zero beta and zero excess return
(Tobin 1958 separation; the capital market line of Sharpe 1964).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from reporter.analytics.pack import PackResults
from reporter.config import OTHER_SECTORS, LimitsSection
from reporter.jsonvalues import json_ready

WITHIN, WATCH, BREACH = "within", "watch", "breach"
STATUS_ORDER = {WITHIN: 0, WATCH: 1, BREACH: 2}

LABELS = {
    "beta_min": "Portfolio beta, minimum",
    "beta_max": "Portfolio beta, maximum",
    "max_holding_weight": "Largest holding weight",
    "max_sector_weight": "Sector weight",
    "min_effective_n": "Effective number of holdings, minimum",
    "min_holdings": "Number of holdings, minimum",
    "max_tracking_error_ann": "Tracking error (annualised), maximum",
    "max_idiosyncratic_share": "Specific share of variance, maximum",
    "max_var_95_ann": "Value at risk 95%, one year (historical), maximum",
    "max_stress_loss": "Loss in the stress shock (beta), maximum",
    "asset_class_min": "Asset class weight, minimum",
    "asset_class_max": "Asset class weight, maximum",
}
# the order in which limits are listed (and compared between packs)
LIMIT_KEYS = tuple(LABELS)


@dataclass(frozen=True)
class LimitCheck:
    """One limit against its figure. ``kind`` is ``max`` (breach above) or ``min``.

    ``scope`` is None for a portfolio-wide or every-holding/every-sector limit, a sector's
    name for a per-sector maximum, and ``"*"`` for the maximum on the sectors not named.
    ``holdings`` / ``sectors`` list the ones on watch or in breach, worst first, as dicts
    with ``security_id, name, value, status`` / ``sector, value, status``. Values and
    thresholds are decimals (weights, shares, annualised tracking error) or counts.
    """

    limit: str
    scope: str | None
    kind: str
    value: float
    threshold: float
    watch_from: float
    status: str
    holdings: tuple[dict, ...] = ()
    sectors: tuple[dict, ...] = ()

    @property
    def label(self) -> str:
        base = LABELS[self.limit]
        if self.scope == OTHER_SECTORS:
            return f"{base}, other sectors"
        return f"{base}: {self.scope}" if self.scope else base

    @property
    def key(self) -> str:
        """A stable key for comparing packs: the limit, and the sector for per-sector ones."""
        return self.limit if self.scope is None else f"{self.limit}:{self.scope}"

    def as_json(self) -> dict:
        return {
            "limit": self.limit, "scope": self.scope, "label": self.label, "kind": self.kind,
            "value": json_ready(self.value), "threshold": self.threshold,
            "watch_from": self.watch_from, "status": self.status,
            "holdings": [{k: json_ready(v) for k, v in h.items()} for h in self.holdings],
            "sectors": [{k: json_ready(v) for k, v in s.items()} for s in self.sectors],
        }


@dataclass(frozen=True)
class BetaTarget:
    """The mix with the risk-free asset that moves portfolio beta to ``target``.

    ``cash_share`` c is the share of the portfolio moved into the risk-free asset (negative:
    borrowed at the risk-free rate and invested in the portfolio); beta becomes (1 - c) beta.
    ``mean_excess`` is the mixed position's mean excess return per period over the window,
    (1 - c) x the portfolio's; ``_ann`` is x P.
    """

    beta: float
    target: float
    cash_share: float
    mean_excess: float
    mean_excess_ann: float
    portfolio_mean_excess_ann: float
    band_midpoint: bool            # True: target is the middle of [beta_min, beta_max]

    def as_json(self) -> dict:
        return {k: json_ready(getattr(self, k)) for k in (
            "beta", "target", "cash_share", "mean_excess", "mean_excess_ann",
            "portfolio_mean_excess_ann", "band_midpoint")}


@dataclass(frozen=True)
class LimitsReport:
    """Every configured limit, checked; the beta mix when beta is outside its band."""

    checks: tuple[LimitCheck, ...]
    watch_margin: float
    beta_target: BetaTarget | None = None
    notes: tuple[str, ...] = field(default=())
    # every sector a sector maximum applies to: {sector, value, threshold, status}
    sector_marks: tuple[dict, ...] = field(default=())

    @property
    def exceptions(self) -> list[LimitCheck]:
        """Limits on watch or in breach, breaches first, in the listing order."""
        return sorted((c for c in self.checks if c.status != WITHIN),
                      key=lambda c: -STATUS_ORDER[c.status])

    @property
    def counts(self) -> dict[str, int]:
        return {s: sum(c.status == s for c in self.checks) for s in STATUS_ORDER}

    def holding_status(self) -> dict[str, str]:
        """security_id -> worst status from the holding-weight limit (only watch/breach)."""
        return {h["security_id"]: h["status"] for c in self.checks for h in c.holdings}

    def sector_status(self) -> dict[str, dict]:
        """sector -> {status, threshold} for every sector a sector maximum applies to."""
        return {s["sector"]: {"status": s["status"], "threshold": s["threshold"]}
                for s in self.sector_marks}

    def asset_class_status(self) -> dict[str, dict]:
        """asset class (lower case) -> {low, high, status}: the worse of its two checks."""
        out: dict[str, dict] = {}
        for c in self.checks:
            if c.limit in ("asset_class_min", "asset_class_max"):
                row = out.setdefault(c.scope.strip().lower(), {"status": WITHIN})
                row["low" if c.kind == "min" else "high"] = c.threshold
                row["status"] = _worst([row["status"], c.status])
        return out

    def as_json(self) -> dict:
        """The content of ``results/limits.json``."""
        return {
            "watch_margin": self.watch_margin,
            "counts": self.counts,
            "limits": [c.as_json() for c in self.checks],
            "beta_target": self.beta_target.as_json() if self.beta_target else None,
            "notes": list(self.notes),
        }


def classify(values: np.ndarray | float, threshold: float, kind: str,
             margin: float, width: float | None = None) -> np.ndarray:
    """Status of each value against one limit (vectorised).

    ``kind="max"``: breach if value > threshold; watch if threshold - d <= value
    <= threshold. ``kind="min"``: breach if value < threshold; watch if threshold <= value
    <= threshold + d. The watch distance d is m x ``width`` for one end of a two-sided band
    of that width, else m x |threshold|. NaN values are ``within`` (nothing to test); the
    caller reports them. Common practice, no source.
    """
    v = np.atleast_1d(np.asarray(values, dtype=float))
    band = _distance(threshold, margin, width)
    with np.errstate(invalid="ignore"):
        if kind == "max":
            breach = v > threshold
            watch = ~breach & (v >= threshold - band)
        else:
            breach = v < threshold
            watch = ~breach & (v <= threshold + band)
    return np.where(breach, BREACH, np.where(watch, WATCH, WITHIN)).astype(object)


def _distance(threshold: float, margin: float, width: float | None) -> float:
    """The watch distance: a fraction of a two-sided band's width, else of the limit."""
    return margin * (abs(threshold) if width is None else width)


def _watch_from(threshold: float, kind: str, margin: float,
                width: float | None = None) -> float:
    band = _distance(threshold, margin, width)
    return threshold - band if kind == "max" else threshold + band


def _scalar(limit: str, kind: str, value: float, threshold: float,
            margin: float, width: float | None = None, scope: str | None = None) -> LimitCheck:
    status = str(classify(value, threshold, kind, margin, width)[0])
    return LimitCheck(limit=limit, scope=scope, kind=kind, value=float(value),
                      threshold=float(threshold),
                      watch_from=_watch_from(threshold, kind, margin, width), status=status)


def _worst(statuses) -> str:
    order = [STATUS_ORDER[s] for s in statuses]
    return [WITHIN, WATCH, BREACH][max(order)] if order else WITHIN


def _sector_check(scope: str | None, names: np.ndarray, weights: np.ndarray,
                  threshold: float, margin: float) -> tuple[LimitCheck, tuple[dict, ...]]:
    status = classify(weights, threshold, "max", margin)
    flagged = np.flatnonzero(status != WITHIN)
    order = flagged[np.lexsort((names[flagged], -weights[flagged]))]
    sectors = tuple({"sector": str(names[i]), "value": float(weights[i]),
                     "threshold": float(threshold), "status": str(status[i])}
                    for i in order)
    # every sector this maximum applies to carries its status for the sector chart
    applies = tuple({"sector": str(names[i]), "value": float(weights[i]),
                     "threshold": float(threshold), "status": str(status[i])}
                    for i in range(len(names)))
    value = float(weights.max()) if len(weights) else 0.0
    check = LimitCheck(limit="max_sector_weight", scope=scope, kind="max", value=value,
                       threshold=float(threshold),
                       watch_from=_watch_from(threshold, "max", margin),
                       status=_worst(status), sectors=sectors)
    return check, applies


def evaluate_limits(cfg: LimitsSection, res: PackResults) -> LimitsReport:
    """Check each configured limit against the pack's results.

    Figures used: portfolio beta is the regression beta (``beta_regression``); holding
    weights are absolute weights |w|; sector weights are net sums of weights; effective N
    is 1/sum(w^2); tracking error is sd(r_p - r_b) x sqrt(P) against the benchmark when the
    pack has one, else sd(r_p - r_m) x sqrt(P) (``tracking_error_ann``); the specific share is
    1 - R^2 of the portfolio's own regression on the market (``idiosyncratic_share``); value
    at risk is the historical one-year 95% figure of the stress chapter (NaN, and so a note,
    when 0.95 is not among ``[stress] levels``); the stress loss is -beta x ``stress_shock``.
    """
    m = cfg.watch_margin
    p = res.portfolio_summary()
    checks: list[LimitCheck] = []
    notes: list[str] = []
    sector_flags: list[dict] = []
    band = (cfg.beta_max - cfg.beta_min if cfg.beta_min is not None
            and cfg.beta_max is not None else None)     # two-sided: watch on its width
    if cfg.beta_min is not None:
        checks.append(_scalar("beta_min", "min", p["beta_regression"], cfg.beta_min, m, band))
    if cfg.beta_max is not None:
        checks.append(_scalar("beta_max", "max", p["beta_regression"], cfg.beta_max, m, band))
    if cfg.max_holding_weight is not None:
        sec = res.securities
        w = np.abs(sec["weight"].to_numpy(dtype=float))
        status = classify(w, cfg.max_holding_weight, "max", m)
        flagged = np.flatnonzero(status != WITHIN)
        ids = sec["security_id"].to_numpy()
        order = flagged[np.lexsort((ids[flagged], -w[flagged]))]
        names = sec["name"].to_numpy()
        holdings = tuple({"security_id": str(ids[i]), "name": str(names[i]),
                          "value": float(w[i]), "status": str(status[i])} for i in order)
        checks.append(LimitCheck(
            limit="max_holding_weight", scope=None, kind="max", value=float(w.max()),
            threshold=float(cfg.max_holding_weight),
            watch_from=_watch_from(cfg.max_holding_weight, "max", m),
            status=_worst(status), holdings=holdings))
    if cfg.max_sector_weight is not None:
        names = res.sectors["sector"].to_numpy().astype(str)
        weights = res.sectors["weight"].to_numpy(dtype=float)
        table = cfg.max_sector_weight
        if isinstance(table, float | int):
            check, applies = _sector_check(None, names, weights, float(table), m)
            checks.append(check)
            sector_flags += applies
        else:
            named = [s for s in sorted(table) if s != OTHER_SECTORS]
            for s in named:
                if s not in set(names):
                    notes.append(f"limits.max_sector_weight names the sector {s!r}, which no "
                                 "holding belongs to (weight 0)")
                hit = names == s
                check, applies = _sector_check(s, np.array([s]),
                                               np.array([weights[hit].sum()]), table[s], m)
                checks.append(check)
                sector_flags += applies if hit.any() else []
            if OTHER_SECTORS in table:
                rest = ~np.isin(names, named)
                check, applies = _sector_check(OTHER_SECTORS, names[rest], weights[rest],
                                               table[OTHER_SECTORS], m)
                checks.append(check)
                sector_flags += applies
    if cfg.min_effective_n is not None:
        checks.append(_scalar("min_effective_n", "min", p["effective_n"], cfg.min_effective_n,
                              m))
    if cfg.min_holdings is not None:
        checks.append(_scalar("min_holdings", "min", float(p["n_holdings"]),
                              float(cfg.min_holdings), m))
    if cfg.max_tracking_error_ann is not None:
        checks.append(_scalar("max_tracking_error_ann", "max", p["tracking_error_ann"],
                              cfg.max_tracking_error_ann, m))
    if cfg.max_idiosyncratic_share is not None:
        checks.append(_scalar("max_idiosyncratic_share", "max", p["idiosyncratic_share"],
                              cfg.max_idiosyncratic_share, m))
    if cfg.max_var_95_ann is not None:
        var = res.stress.figure("var", "historical", 0.95, "year") if res.stress else np.nan
        checks.append(_scalar("max_var_95_ann", "max", var, cfg.max_var_95_ann, m))
    if cfg.max_stress_loss is not None:     # the loss is -beta x shock (positive in a fall)
        checks.append(_scalar("max_stress_loss", "max", -p["beta_regression"] * cfg.stress_shock,
                              cfg.max_stress_loss, m))
    if cfg.asset_class_ranges:
        checks += asset_class_checks(cfg.asset_class_ranges, res.securities, m, notes)
    target = None
    beta_out = [c for c in checks if c.limit in ("beta_min", "beta_max") and c.status == BREACH]
    for c in checks:
        if not np.isfinite(c.value):
            notes.append(f"{c.label}: the figure could not be computed, so this limit was "
                         "not tested")
    if beta_out:
        target = beta_target(p["beta_regression"], cfg.beta_min, cfg.beta_max,
                             p["mean_excess_return"], res.periods_per_year)
        if target is None:
            notes.append("portfolio beta is not positive, so no mix with cash can reach "
                         "the band")
    return LimitsReport(checks=tuple(checks), watch_margin=m, beta_target=target,
                        notes=tuple(notes), sector_marks=tuple(sector_flags))


def beta_target(beta: float, beta_min: float | None, beta_max: float | None,
                mean_excess: float, periods_per_year: int) -> BetaTarget | None:
    """The risk-free mix that moves ``beta`` to the band's midpoint (or to the one bound
    given): cash share c = 1 - target / beta, so that (1 - c) beta = target; the mixed
    position's mean excess return is (1 - c) x ``mean_excess`` (per period). None when beta
    is not positive (no such mix). Source: two-fund separation (Tobin 1958); the line
    through the risk-free asset is linear in beta (Sharpe 1964)."""
    if not np.isfinite(beta) or beta <= 0:
        return None
    bounds = [b for b in (beta_min, beta_max) if b is not None]
    target = float(np.mean(bounds))
    scale = target / beta
    return BetaTarget(beta=float(beta), target=target, cash_share=float(1.0 - scale),
                      mean_excess=float(scale * mean_excess),
                      mean_excess_ann=float(scale * mean_excess * periods_per_year),
                      portfolio_mean_excess_ann=float(mean_excess * periods_per_year),
                      band_midpoint=len(bounds) == 2)


def asset_class_checks(ranges: dict[str, list[float]], securities: pd.DataFrame,
                       margin: float, notes: list[str]) -> list[LimitCheck]:
    """Each asset class's weight (net sum of its holdings' weights; classes matched without
    regard to case or surrounding spaces) against its ``[low, high]`` range: a minimum and a
    maximum check, each watched at ``margin`` x the range's width. A class that no holding
    has weighs 0 and is noted."""
    if "asset_class" in securities:
        classes = securities["asset_class"].fillna("").astype(str).str.strip().str.casefold()
        weights = securities["weight"].groupby(classes.to_numpy()).sum()
    else:
        weights = pd.Series(dtype=float)
        notes.append("limits.asset_class_ranges is set but the holdings give no asset_class "
                     "column: every class weighs 0")
    out = []
    for name in sorted(ranges):
        lo, hi = ranges[name]
        key = name.strip().casefold()
        if key not in weights.index and "asset_class" in securities:
            notes.append(f"limits.asset_class_ranges names the asset class {name!r}, which no "
                         "holding belongs to (weight 0)")
        value = float(weights.get(key, 0.0))
        out += [_scalar("asset_class_min", "min", value, lo, margin, hi - lo, name),
                _scalar("asset_class_max", "max", value, hi, margin, hi - lo, name)]
    return out
