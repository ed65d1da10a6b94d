"""Alpha p-values and the Benjamini-Hochberg (1995) reading of the security market line,
against statsmodels ``multipletests(method="fdr_bh")`` and statsmodels OLS p-values."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from statsmodels.stats.multitest import multipletests

from reporter.analytics.regression import fit_market_model
from reporter.analytics.sml import (
    ABOVE,
    BELOW,
    WITHIN,
    alpha_p_values,
    benjamini_hochberg,
    fdr_positions,
)


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("level", [0.01, 0.05, 0.10])
def test_rejections_match_multipletests(seed, level):
    # a mix of true effects (small p) and nulls (uniform p), with ties and missing values;
    # statsmodels multipletests(method="fdr_bh") is the reference, on the finite values
    rng = np.random.default_rng(seed)
    p = np.concatenate([rng.uniform(0, 0.004, 8), rng.uniform(0, 1, 52), [0.003, 0.003]])
    p[rng.choice(len(p), 4, replace=False)] = np.nan
    ok = np.isfinite(p)
    want, *_ = multipletests(p[ok], alpha=level, method="fdr_bh")
    got = benjamini_hochberg(p, level)
    assert list(got[ok]) == list(want)
    assert not got[~ok].any()
    assert got.sum() == want.sum()


def test_sixty_null_holdings_flag_about_three_and_keep_almost_none():
    # 60 holdings with no alpha, tested at 95%: chance alone flags about 3 (60 x 5%); the
    # false-discovery control keeps almost none (seeded simulation; references: statsmodels
    # OLS p-values for each holding, multipletests for the count)
    rng = np.random.default_rng(2026)
    T, N = 60, 60
    x = rng.normal(0.005, 0.04, T)
    flagged, kept = [], []
    for _ in range(50):
        y = x[:, None] * rng.uniform(0.6, 1.4, N) + rng.normal(0, 0.05, (T, N))
        fits = fit_market_model(y, x, 24)
        p = alpha_p_values(fits.alpha, fits.alpha_se, fits.n_obs)
        pos = fdr_positions(fits.alpha, p, fits.fitted, 0.05)
        flagged.append(int((p < 0.05).sum()))
        kept.append(int(np.isin(pos, (ABOVE, BELOW)).sum()))
        assert int(np.isin(pos, (ABOVE, BELOW)).sum()) == int(
            multipletests(p, alpha=0.05, method="fdr_bh")[0].sum())
    j = 7
    ref = sm.OLS(y[:, j], sm.add_constant(x)).fit()
    assert p[j] == pytest.approx(ref.pvalues[0], rel=1e-8)
    assert 2.0 <= np.mean(flagged) <= 4.0
    assert np.mean(kept) < 0.5


def test_fdr_positions_follow_the_sign_and_skip_unfitted():
    alpha = np.array([0.01, -0.02, 0.003, 0.5])
    p = np.array([1e-6, 1e-5, 0.4, np.nan])
    fitted = np.array([True, True, True, False])
    assert list(fdr_positions(alpha, p, fitted, 0.05)) == [ABOVE, BELOW, WITHIN, ""]
