"""Holdings needed to diversify, from the data: the smallest n of equally weighted holdings
with sigma(1) - sigma(n) >= p (sigma(1) - sqrt(avg cov)), sigma(n) = sqrt(v/n + (1 - 1/n) c)
(the textbook equal-weight variance, e.g. Elton and Gruber ch. 4, recalled from memory)."""

from __future__ import annotations

import numpy as np
import pytest

from reporter.analytics.diversification import EqualWeightCurve, equal_weight_curve
from reporter.analytics.pack import analyse
from reporter.config import load_settings
from reporter.validate import validate_pack
from tests.test_pipeline_french import INDUSTRIES, write_french_pack


def _by_search(v: float, c: float, share: float) -> int:
    """The definition itself, searched n = 1, 2, ... (no closed form)."""
    n = np.arange(1, 100_000)
    sigma = np.sqrt(np.maximum(v / n + (1 - 1 / n) * c, 0.0))
    floor = np.sqrt(max(c, 0.0))
    return int(n[np.argmax(sigma[0] - sigma >= share * (sigma[0] - floor) - 1e-15)])


def _constant_correlation(sd: float, rho: float, n: int = 40) -> np.ndarray:
    return sd * sd * (rho * np.ones((n, n)) + (1 - rho) * np.eye(n))


@pytest.mark.parametrize("rho", [0.05, 0.2, 0.3, 0.5, 0.8])
@pytest.mark.parametrize("share", [0.90, 0.95])
def test_matches_the_definition_searched(rho, share):
    curve = equal_weight_curve(_constant_correlation(0.08, rho))
    assert curve.average_covariance == pytest.approx(0.0064 * rho)
    assert curve.holdings_for_share(share) == _by_search(0.0064, 0.0064 * rho, share)


def test_moves_with_the_average_correlation():
    # the more alike the holdings, the sooner the floor sqrt(avg cov) is reached
    n95 = [equal_weight_curve(_constant_correlation(0.08, rho)).holdings_for_share(0.95)
           for rho in (0.1, 0.3, 0.6)]
    assert n95[0] > n95[1] > n95[2] >= 1
    # at rho = 0.3 the figure is a few dozen (the rule of thumb: common practice, no source)
    assert 15 <= n95[1] <= 40
    # no diversifiable risk: one holding; negative average covariance: the floor is 0
    assert EqualWeightCurve(0.01, 0.01).holdings_for_share(0.95) == 1
    neg = EqualWeightCurve(0.01, -0.0002)
    assert neg.holdings_for_share(0.9) == _by_search(0.01, -0.0002, 0.9)
    assert EqualWeightCurve(float("nan"), 0.0).holdings_for_share(0.9) is None


def test_pack_figure_moves_when_the_real_returns_are_made_less_alike(tmp_path, french):
    # Ken French industry returns (linearmodels bundle) as holdings, and the same returns with
    # independent noise added (seeded): the average correlation falls, and the holdings
    # needed to diversify 95% rise; each equals the definition searched on that pack's own
    # average variance and covariance
    results = []
    for tag, noise in (("real", 0.0), ("noisy", 8.0)):
        rng = np.random.default_rng(11)
        df = french.copy()
        df[INDUSTRIES] = df[INDUSTRIES] + noise * rng.standard_normal(df[INDUSTRIES].shape) / 100
        folder = tmp_path / tag
        folder.mkdir()
        write_french_pack(folder, df, 120, {})
        settings = load_settings(folder)
        p = analyse(validate_pack(settings), settings).portfolio_summary()
        for share in (0.90, 0.95):
            assert p[f"holdings_for_{round(share * 100)}pct_diversifiable"] == _by_search(
                p["average_variance"], p["average_covariance"], share)
        results.append(p)
    real, noisy = results
    assert noisy["average_correlation"] < real["average_correlation"] - 0.2
    assert (noisy["holdings_for_95pct_diversifiable"]
            > real["holdings_for_95pct_diversifiable"])
