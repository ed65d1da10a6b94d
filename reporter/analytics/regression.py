"""The regressions of the pack, by job (kept as one import for the code and tests that name
it; nothing in these modules imports this one):

- :mod:`reporter.analytics.market_model`: the market-model OLS of every holding and of the
  portfolio, and the Student-t critical values;
- :mod:`reporter.analytics.hac`: Newey-West (1987) standard errors of the holdings' fits;
- :mod:`reporter.analytics.beta_variants`: Blume, Vasicek, up and down, Dimson and
  Scholes-Williams betas, and the batched multi-regressor OLS;
- :mod:`reporter.analytics.rolling`: trailing-window betas from running sums.
"""

from reporter.analytics.beta_variants import (
    VASICEK_FLOOR_SHARE,
    blume_beta,
    dimson_beta,
    masked_ols,
    scholes_williams_beta,
    shift,
    up_down_betas,
    vasicek_beta,
    vasicek_prior,
    vasicek_summary,
    with_before,
)
from reporter.analytics.hac import hac_standard_errors, interior_gaps
from reporter.analytics.market_model import (
    MarketModelFits,
    PortfolioFit,
    Prepared,
    fit_market_model,
    fit_portfolio,
    newey_west_lags,
    t_critical,
)
from reporter.analytics.rolling import RollingBetas, rolling_betas, trailing_sum

__all__ = [
    "VASICEK_FLOOR_SHARE", "MarketModelFits", "PortfolioFit", "Prepared", "RollingBetas",
    "blume_beta", "dimson_beta", "fit_market_model", "fit_portfolio", "hac_standard_errors",
    "interior_gaps", "masked_ols", "newey_west_lags", "rolling_betas", "scholes_williams_beta",
    "shift", "t_critical", "trailing_sum", "up_down_betas", "vasicek_beta", "vasicek_prior",
    "vasicek_summary", "with_before",
]
