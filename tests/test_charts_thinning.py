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
