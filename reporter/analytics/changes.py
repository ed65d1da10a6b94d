"""What changed since the earlier pack (pure; no I/O).

Compares this pack's results with an earlier build's: the change in portfolio beta against
its estimation error, new and removed holdings, the largest weight changes, holdings whose
distance from the security market line changed sign, and limits whose status changed.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd
from scipy import stats

from reporter.analytics.results import PackResults
from reporter.jsonvalues import json_ready

if TYPE_CHECKING:
    from reporter.changes import PreviousPack

TOP_WEIGHT_CHANGES = 10
WEIGHT_ROUNDING = 1e-9     # a smaller weight change is the results file's rounding


@dataclass(frozen=True)
class BetaChange:
    """Portfolio beta now and before, and whether the change exceeds estimation error.

    ``se`` = sqrt(se_now^2 + se_before^2) treats the two estimates as independent; with
    overlapping windows they are positively correlated, so this overstates the error of the
    difference and a change called beyond error is a conservative call. ``z`` = change / se
    is compared with the normal quantile at the pack's confidence (common practice for the
    difference of two estimates, e.g. Clogg, Petkova and Haritou 1995, recalled from memory).
    """

    now: float
    before: float
    change: float
    se_now: float
    se_before: float
    se: float
    z: float
    critical: float
    beyond_error: bool


@dataclass(frozen=True)
class PackChanges:
    """Changes since the earlier pack. Weights are decimals; residuals per period."""

    previous_folder: str
    previous_source: str              # "build" | "archive"
    previous_period_end: str
    previous_fingerprint: str | None
    beta: BetaChange
    new_holdings: list[dict]          # security_id, name, weight
    removed_holdings: list[dict]      # security_id, name, weight_before
    weight_changes: list[dict]        # security_id, name, weight_before, weight_now, change, note
    crossed_sml: list[dict]           # security_id, name, residual_before, residual_now, ...
    limits_compared: bool             # False: the earlier build has no limits.json
    limit_changes: list[dict]         # key, label, status_before, status_now, value_*

    def as_json(self) -> dict:
        """The content of ``results/changes.json``."""
        b = self.beta
        return json_ready({
            "previous": {"folder": self.previous_folder, "source": self.previous_source,
                         "period_end": self.previous_period_end,
                         "input_fingerprint": self.previous_fingerprint},
            "beta": {"now": b.now, "before": b.before, "change": b.change,
                     "se_now": b.se_now, "se_before": b.se_before, "se_change": b.se,
                     "z": b.z, "critical": b.critical, "beyond_error": b.beyond_error},
            "new_holdings": self.new_holdings,
            "removed_holdings": self.removed_holdings,
            "weight_changes": self.weight_changes,
            "crossed_sml": self.crossed_sml,
            "limits_compared": self.limits_compared,
            "limit_changes": self.limit_changes,
        })


def _number(v) -> float:
    try:
        return float(v)
    except (TypeError, ValueError):
        return float("nan")


def _beta_se(portfolio: dict) -> float:
    """The standard error behind a build's own intervals: Newey-West when it used them."""
    if portfolio.get("errors", "ols") == "hac" and portfolio.get("beta_se_hac") is not None:
        return _number(portfolio["beta_se_hac"])
    return _number(portfolio.get("beta_se"))


def beta_change(now: dict, before: dict, confidence: float) -> BetaChange:
    """Change in portfolio beta (regression beta) and the test of it against its error.
    A figure missing from the earlier pack gives NaN and no call beyond error."""
    b1, b0 = _number(now["beta_regression"]), _number(before.get("beta_regression"))
    s1, s0 = _beta_se(now), _beta_se(before)
    se = float(np.hypot(s1, s0))
    change = b1 - b0
    z = change / se if se > 0 else np.nan
    crit = float(stats.norm.ppf(0.5 + confidence / 2))
    return BetaChange(now=b1, before=b0, change=change, se_now=s1, se_before=s0, se=se,
                      z=float(z), critical=crit, beyond_error=bool(abs(z) > crit))


def _records(df: pd.DataFrame) -> list[dict]:
    return [{k: json_ready(v) for k, v in r.items()} for r in df.to_dict(orient="records")]


def compare_packs(previous: PreviousPack, res: PackResults, limits: list[dict] | None,
                  confidence: float) -> PackChanges:
    """Compare this pack (``res`` and its limits.json list ``limits``, or None) with
    ``previous``. Holdings are matched by security id; a holding missing on one side has
    weight 0 there. A holding crossed the security market line when its distance from the
    line (mean excess return - beta x mean premium) changed sign between the packs; both
    packs must have fitted it."""
    now = res.securities
    before = previous.securities
    cols = ["name", "weight", "sml_residual", "sml_position"]
    cols_now = now[["security_id", *cols]].rename(columns={c: f"{c}_now" for c in cols})
    want = [c for c in cols if c in before.columns]
    cols_before = before[["security_id", *want]].rename(
        columns={c: f"{c}_before" for c in want})
    merged = cols_now.merge(cols_before, on="security_id", how="outer", indicator=True)
    if "name_before" not in merged:
        merged["name_before"] = ""
    merged["name"] = merged["name_now"].fillna(merged["name_before"]).fillna("")
    merged["weight_now"] = merged["weight_now"].fillna(0.0)
    merged["weight_before"] = merged["weight_before"].fillna(0.0)
    merged["change"] = merged["weight_now"] - merged["weight_before"]
    merged["note"] = np.select([merged["_merge"] == "left_only",
                                merged["_merge"] == "right_only"], ["new", "removed"], "")
    merged = merged.sort_values("security_id", kind="stable")

    new = merged[merged["note"] == "new"][["security_id", "name", "weight_now"]].rename(
        columns={"weight_now": "weight"})
    removed = merged[merged["note"] == "removed"][["security_id", "name", "weight_before"]]
    # the earlier weights come from its securities.csv, written to 10 decimal places
    moved = merged[merged["change"].abs() > WEIGHT_ROUNDING].copy()
    moved["abs"] = moved["change"].abs()
    top = moved.sort_values(["abs", "security_id"], ascending=[False, True],
                            kind="stable").head(TOP_WEIGHT_CHANGES)
    top = top[["security_id", "name", "weight_before", "weight_now", "change", "note"]]

    crossed: list[dict] = []
    if "sml_residual_before" in merged:
        both = merged[(merged["note"] == "")
                      & np.isfinite(merged["sml_residual_now"].astype(float))
                      & np.isfinite(merged["sml_residual_before"].astype(float))]
        flip = np.sign(both["sml_residual_now"]) != np.sign(both["sml_residual_before"])
        c = both[flip].copy()
        c["direction"] = np.where(c["sml_residual_now"] > 0, "now above the line",
                                  "now below the line")
        pos_before = c["sml_position_before"] if "sml_position_before" in c else ""
        c["position_before"] = pos_before
        c["position_now"] = c["sml_position_now"]
        crossed = _records(c[["security_id", "name", "sml_residual_before",
                              "sml_residual_now", "direction", "position_before",
                              "position_now"]].rename(columns={
                                  "sml_residual_before": "residual_before",
                                  "sml_residual_now": "residual_now"}))

    limit_changes: list[dict] = []
    compared = previous.limits is not None
    if compared:
        def keyed(rows):
            return {(r.get("limit"), r.get("scope")): r for r in rows or []}
        old, cur = keyed(previous.limits), keyed(limits)
        for key in sorted(set(old) | set(cur), key=lambda k: (str(k[0]), str(k[1]))):
            o, c = old.get(key), cur.get(key)
            s0 = o.get("status") if o else None
            s1 = c.get("status") if c else None
            if s0 != s1:
                limit_changes.append({
                    "limit": key[0], "scope": key[1],
                    "label": (c or o).get("label", key[0]),
                    "status_before": s0, "status_now": s1,
                    "value_before": o.get("value") if o else None,
                    "value_now": c.get("value") if c else None,
                    "threshold_before": o.get("threshold") if o else None,
                    "threshold_now": c.get("threshold") if c else None})

    return PackChanges(
        previous_folder=str(previous.folder), previous_source=previous.source,
        previous_period_end=previous.period_end.isoformat(),
        previous_fingerprint=previous.manifest.get("input_fingerprint"),
        beta=beta_change(res.portfolio_summary(), previous.portfolio, confidence),
        new_holdings=_records(new), removed_holdings=_records(removed),
        weight_changes=_records(top), crossed_sml=crossed,
        limits_compared=compared, limit_changes=limit_changes,
    )
