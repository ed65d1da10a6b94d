"""Long daily histories are thinned for plotting; the rows kept are evenly spaced and
include each series' first and last point."""

from __future__ import annotations

import numpy as np
import pandas as pd

from reporter.charts import thin_series


def test_thinning_keeps_ends_and_caps_points():
    n = 2268                              # 2,520 daily periods less a 252-day window
    df = pd.DataFrame({"series": np.repeat(["A", "B", "C"], [n, 40, 1]),
                       "x": np.concatenate([np.arange(n), np.arange(40), [0]])})
    out = thin_series(df, max_points=300)
    a = out[out["series"] == "A"]["x"].to_numpy()
    assert a[0] == 0 and a[-1] == n - 1 and len(a) <= 300 + 1
    assert len(set(np.diff(a[:-1]))) == 1                 # evenly spaced before the last
    assert out[out["series"] == "B"]["x"].tolist() == list(range(40))   # short: untouched
    assert out[out["series"] == "C"]["x"].tolist() == [0]


def test_thin_holdings_keeps_every_flagged_then_the_largest():
    """Beyond Altair's row limit the SML draws every flagged holding, then the largest by
    weight, in table order; below it, the table itself."""
    from reporter.analytics.sml import ABOVE, BELOW, WITHIN
    from reporter.charts import thin_holdings

    rng = np.random.default_rng(3)
    n = 120
    pos = np.array([WITHIN] * n, dtype=object)
    pos[[5, 50, 119]] = [ABOVE, BELOW, ABOVE]
    sec = pd.DataFrame({"security_id": [f"H{i}" for i in range(n)],
                        "weight": rng.random(n), "sml_position": pos})
    assert thin_holdings(sec, max_rows=n) is sec
    kept = thin_holdings(sec, max_rows=20)
    assert len(kept) == 20
    assert {"H5", "H50", "H119"} <= set(kept["security_id"])
    within = sec[sec["sml_position"] == WITHIN]
    assert set(kept["security_id"]) - {"H5", "H50", "H119"} == set(
        within.nlargest(17, "weight")["security_id"])
    assert list(kept.index) == sorted(kept.index)          # table order kept


def test_sml_chart_of_more_holdings_than_altairs_limit_exports(demo_build):
    """A securities table over the row limit no longer stops the export (it raised
    MaxRowsError for 10,000 holdings); the chart says how many it draws."""
    import dataclasses

    from reporter.analytics.pack import analyse
    from reporter.charts import MAX_CHART_ROWS, sml_chart
    from reporter.config import load_settings
    from reporter.render.html import chart_svg
    from reporter.validate import validate_pack
    from tests.conftest import DEMO

    settings = load_settings(DEMO)
    res = analyse(validate_pack(settings), settings)
    reps = -(-(MAX_CHART_ROWS + 1) // int(res.fits.fitted.sum()))
    big = pd.concat([res.securities] * reps, ignore_index=True)
    fitted = np.tile(res.fits.fitted, reps)
    res = dataclasses.replace(res, securities=big,
                              fits=dataclasses.replace(res.fits, fitted=fitted))
    spec = sml_chart(res).to_dict(validate=False)
    assert f"{MAX_CHART_ROWS:,} of {int(fitted.sum()):,} holdings drawn" in str(spec["title"])
    assert "<svg" in chart_svg(sml_chart(res))
