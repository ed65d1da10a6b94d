"""The analytics after the shared-sums rewrite reproduce the figures of the code before it.

tests/data/analytics_frozen.npz was written by ``python tests/analytics_cases.py`` from the
code as it was before the rewrite (commit 1c9db8a of reporter/analytics/), on four seeded
packs: complete daily data, daily data with late listings and interior gaps, monthly data,
and 600 holdings (the Schur-complement path of the positive semi-definite repair). Every
column of the securities, risk and rolling tables and every figure of the portfolio
summary must agree to 1e-12 relative (text and flags exactly, NaN where NaN).

Relative to what: each figure is held to 1e-12 of the larger of its own size and its
column's median size. The figures are the same sums, but OpenBLAS picks its kernels by CPU,
and a figure that is a small difference of larger terms carries their roundings, magnified.
On a machine with AVX-512 kernels (OpenBLAS "SkylakeX"), against the file written with
another machine's kernels, the worst element-wise difference was 2.1e-12 relative: an alpha of
3.0e-7 per period, where the column's median is 3.7e-4 (alpha is the mean excess return less
beta times the market's, both about 1e-4). Against the column's size, no figure of any case
differed by more than 1e-13 there.
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.analytics_cases import CASES, FROZEN, figures, write_case

RTOL = 1e-12


@pytest.fixture(scope="module")
def frozen():
    with np.load(FROZEN) as data:
        return {k: data[k] for k in data.files}


@pytest.fixture(scope="module", params=list(CASES))
def case(request, tmp_path_factory):
    name = request.param
    return name, figures(write_case(tmp_path_factory.mktemp(name), name), name)


def test_every_frozen_figure_is_reproduced(case, frozen):
    name, now = case
    ref = {k: v for k, v in frozen.items() if k.startswith(f"{name}/")}
    assert sorted(now) == sorted(ref), "the tables' columns or the summary's keys changed"
    worst, where, bad = 0.0, "", []
    for key, want in ref.items():
        got = now[key]
        assert got.shape == want.shape, key
        if want.dtype.kind != "f":
            assert np.array_equal(got, want), key
            continue
        assert np.array_equal(np.isnan(got), np.isnan(want)), f"{key}: NaN pattern"
        ok = np.isfinite(want)
        assert np.array_equal(got[~ok & ~np.isnan(want)], want[~ok & ~np.isnan(want)]), key
        diff = np.abs(got[ok] - want[ok])
        scale = np.abs(want[ok])
        if scale.size:          # no figure judged against less than its column's median size
            scale = np.maximum(scale, np.median(scale))
        rel = np.where(diff == 0, 0.0, diff / np.where(scale > 0, scale, np.inf))
        rel = np.where((diff > 0) & (scale == 0), np.inf, rel)
        if rel.size and rel.max() > worst:
            worst, where = float(rel.max()), key
        if rel.size and rel.max() > RTOL:
            bad.append(f"{key}: {rel.max():.2e}")
    assert not bad, f"figures off by more than {RTOL:g} relative: {bad[:10]}"
    print(f"{name}: largest relative difference {worst:.2e} ({where})")


def test_the_frozen_cases_exercise_what_they_claim(frozen):
    # the gaps case has holdings with interior gaps and late listings (fewer observations
    # than periods), the complete case none; the GRS test applies in both
    n_gaps = frozen["gaps/securities/n_obs"]
    assert (n_gaps < frozen["gaps/summary/n_periods"]).sum() >= 6
    assert (frozen["complete/securities/n_obs"] == frozen["complete/summary/n_periods"]).all()
    assert str(frozen["complete/summary/grs_holdings_applies"]) == "True"
    assert len(frozen["wide/securities/beta"]) == 600
