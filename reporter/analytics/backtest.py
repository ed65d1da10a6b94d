"""Out-of-sample backtest of the one-period historical VaR, with the coverage tests of
Kupiec (1995) and Christoffersen (1998) (pure; no I/O).

Each period t after the first ``window`` periods gets the VaR from the ``window`` periods just
before it (historical simulation, numpy's linear quantile); an exceedance is a loss beyond it,
r_t < -VaR_t. All windows are read at once through a strided view (no loop over windows).

- Kupiec's proportion of failures: with x exceedances in n periods and tail p,
  LR_pof = -2 ln[(1-p)^(n-x) p^x] + 2 ln[(1-x/n)^(n-x) (x/n)^x], chi-squared with 1 df.
- Christoffersen's independence: with n_ij the count of periods in state j after state i
  (1 = exceedance), pi_0 = n01/(n00+n01), pi_1 = n11/(n10+n11), pi = (n01+n11)/(n-1),
  LR_ind = -2 ln[(1-pi)^(n00+n10) pi^(n01+n11)]
           + 2 ln[(1-pi_0)^n00 pi_0^n01 (1-pi_1)^n10 pi_1^n11], chi-squared with 1 df.
- Conditional coverage: LR_cc = LR_pof + LR_ind, chi-squared with 2 df (the sum, as is common
  practice; strictly the unconditional part is then taken over the n-1 transitions).
0 ln 0 is taken as 0.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view
from scipy import special, stats


def kupiec_lr(n: int, x: int, p: float) -> float:
    """Kupiec (1995) proportion-of-failures likelihood ratio."""
    if n == 0:
        return float("nan")
    phat = x / n
    null = special.xlogy(n - x, 1 - p) + special.xlogy(x, p)
    alt = special.xlogy(n - x, 1 - phat) + special.xlogy(x, phat)
    return float(max(-2.0 * (null - alt), 0.0))


def christoffersen_ind_lr(hits: np.ndarray) -> float:
    """Christoffersen (1998) independence likelihood ratio of a 0/1 exceedance series."""
    h = np.asarray(hits, dtype=np.int8)
    if len(h) < 2:
        return float("nan")
    prev, nxt = h[:-1], h[1:]
    n00 = int(np.sum((prev == 0) & (nxt == 0)))
    n01 = int(np.sum((prev == 0) & (nxt == 1)))
    n10 = int(np.sum((prev == 1) & (nxt == 0)))
    n11 = int(np.sum((prev == 1) & (nxt == 1)))
    pi0 = n01 / (n00 + n01) if n00 + n01 else 0.0
    pi1 = n11 / (n10 + n11) if n10 + n11 else 0.0
    pi = (n01 + n11) / (n00 + n01 + n10 + n11)
    null = special.xlogy(n00 + n10, 1 - pi) + special.xlogy(n01 + n11, pi)
    alt = (special.xlogy(n00, 1 - pi0) + special.xlogy(n01, pi0)
           + special.xlogy(n10, 1 - pi1) + special.xlogy(n11, pi1))
    return float(max(-2.0 * (null - alt), 0.0))


@dataclass(frozen=True)
class Backtest:
    """The backtest's figures; ``dates``, ``returns``, ``var`` and ``hits`` are per tested
    period (empty when the history is no longer than the window)."""

    level: float
    window: int
    n: int
    exceedances: int
    expected: float
    kupiec_lr: float
    kupiec_p: float
    christoffersen_ind_lr: float
    christoffersen_ind_p: float
    christoffersen_cc_lr: float
    christoffersen_cc_p: float
    dates: np.ndarray
    returns: np.ndarray
    var: np.ndarray
    hits: np.ndarray

    def as_json(self) -> dict:
        return {k: getattr(self, k) for k in (
            "level", "window", "n", "exceedances", "expected", "kupiec_lr", "kupiec_p",
            "christoffersen_ind_lr", "christoffersen_ind_p", "christoffersen_cc_lr",
            "christoffersen_cc_p")} | {"method": "historical", "reading": self.reading()}

    def too_many(self, significance: float = 0.05) -> bool | None:
        """True when exceedances are above the expected count beyond chance (Kupiec)."""
        if not self.n:
            return None
        return bool(self.exceedances > self.expected and self.kupiec_p < significance)

    def reading(self, unit: str = "periods", significance: float = 0.05) -> str:
        """The result in one plain sentence."""
        if not self.n:
            return (f"No backtest: the history has no period beyond the first {self.window} "
                    "used to estimate the value at risk.")
        head = (f"The model was exceeded {self.exceedances} times in {self.n} {unit} where "
                f"{self.expected:.1f} were expected; ")
        if self.kupiec_p < significance:
            more = "more" if self.exceedances > self.expected else "fewer"
            text = head + f"that is {more} than chance allows"
        else:
            text = head + "that is within what chance allows"
        if self.christoffersen_ind_p < significance:
            text += ", and the exceedances came in clusters"
        return text + "."


def backtest_var(dates: np.ndarray, r: np.ndarray, window: int, level: float) -> Backtest:
    """Rolling out-of-sample historical VaR of ``r`` over trailing ``window`` periods, and
    its coverage tests. Only the run of finite returns at the end of the history is used (a
    period with no return ends every window that holds it)."""
    r = np.asarray(r, dtype=float)
    bad = np.flatnonzero(~np.isfinite(r))
    start = int(bad[-1]) + 1 if len(bad) else 0
    r, dates = r[start:], np.asarray(dates)[start:]
    p = 1.0 - level
    if len(r) <= window:
        empty = np.array([])
        nan = float("nan")
        return Backtest(level, window, 0, 0, 0.0, nan, nan, nan, nan, nan, nan,
                        dates[:0], empty, empty, empty.astype(bool))
    # windows ending just before each tested period
    wins = sliding_window_view(r, window)[:-1]
    var = -np.quantile(wins, p, axis=1)           # numpy's default "linear" interpolation
    tested = r[window:]
    hits = tested < -var
    n, x = len(tested), int(hits.sum())
    lr_pof = kupiec_lr(n, x, p)
    lr_ind = christoffersen_ind_lr(hits)
    lr_cc = lr_pof + lr_ind
    return Backtest(
        level=level, window=window, n=n, exceedances=x, expected=n * p,
        kupiec_lr=lr_pof, kupiec_p=float(stats.chi2.sf(lr_pof, 1)),
        christoffersen_ind_lr=lr_ind, christoffersen_ind_p=float(stats.chi2.sf(lr_ind, 1)),
        christoffersen_cc_lr=lr_cc, christoffersen_cc_p=float(stats.chi2.sf(lr_cc, 2)),
        dates=dates[window:], returns=tested, var=var, hits=hits)
