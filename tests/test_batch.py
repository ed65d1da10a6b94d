"""build-all: eight small schemes, one with bad input, on a local pool and on a Dask
LocalCluster; every good scheme's outputs equal a single build of that folder."""

from __future__ import annotations

import re

import pandas as pd
import pytest

from reporter.build import assemble
from reporter.cli import main
from reporter.config import load_settings
from reporter.csvsafe import csv_text
from tests.conftest import DEMO, FIXED_EPOCH, demo_holdings

N_SCHEMES = 8
BAD = "scheme-07"
PACK_TOML = """\
[pack]
title = "Invented scheme {i}"
organisation = "Invented Scheme {i} Trustees"
period_end = 2026-11-30

[inputs]
holdings = "holdings.csv"
returns = "returns.csv"
market = "market.csv"
risk_free = "risk_free.csv"

[analysis]
window = 36
min_obs = 24
"""


@pytest.fixture(scope="session")
def schemes(tmp_path_factory):
    """Eight small invented schemes cut from the demo data: 8 holdings each, a different
    choice per scheme, 48 months. Scheme 7 carries a non-numeric return."""
    root = tmp_path_factory.mktemp("schemes")
    holdings = demo_holdings()
    returns = pd.read_csv(DEMO / "returns.csv")
    market = pd.read_csv(DEMO / "market.csv").tail(48)
    rf = pd.read_csv(DEMO / "risk_free.csv").tail(48)
    full = holdings[holdings["security_id"].isin(
        returns.groupby("security_id").size().loc[lambda s: s == 120].index)]
    for i in range(1, N_SCHEMES + 1):
        folder = root / f"scheme-{i:02d}"
        folder.mkdir()
        pick = full.sample(8, random_state=i).copy()
        pick["weight"] = (pick["weight"] / pick["weight"].sum()).round(6)
        pick.iloc[0, pick.columns.get_loc("weight")] += round(1 - pick["weight"].sum(), 6)
        r = returns[returns["security_id"].isin(pick["security_id"])
                    & returns["date"].isin(market["date"])].astype({"return": object})
        if folder.name == BAD:
            r.iloc[10, r.columns.get_loc("return")] = "n/a"
        (folder / "pack.toml").write_text(PACK_TOML.format(i=i))
        pick.to_csv(folder / "holdings.csv", index=False)
        r.to_csv(folder / "returns.csv", index=False)
        market.to_csv(folder / "market.csv", index=False)
        rf.to_csv(folder / "risk_free.csv", index=False)
    return root


@pytest.fixture
def fixed_epoch(monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", FIXED_EPOCH)


@pytest.fixture(scope="session")
def single_builds(schemes):
    """What a single build of each good scheme gives (at the fixed epoch): its securities
    file and its pack.html, made once for both runners' checks."""
    singles = {}
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("SOURCE_DATE_EPOCH", FIXED_EPOCH)
        for folder in sorted(p for p in schemes.iterdir() if p.name != BAD):
            a = assemble(load_settings(folder))
            singles[folder.name] = (csv_text(a.results.securities), a.html())
    return singles


def check_batch(singles, out, code, stdout, stderr):
    assert code == 1                                     # one scheme failed
    table = stdout.splitlines()
    assert table[-1] == f"{N_SCHEMES - 1} built, 1 failed"
    rows = {ln.split()[0]: ln for ln in table[2:-1]}
    assert sorted(rows) == [f"scheme-{i:02d}" for i in range(1, N_SCHEMES + 1)]
    assert re.search(r"failed .*returns\.csv:12:return: .*not a number", rows[BAD]), rows[BAD]
    assert all(" built " in ln for name, ln in rows.items() if name != BAD)
    built = sorted(p.name for p in out.iterdir() if not p.name.startswith("."))
    assert built == sorted(set(rows) - {BAD})            # the bad one wrote nothing
    # the outputs are what a single build of each folder gives
    assert built == sorted(singles)
    for name in built:
        securities, html = singles[name]
        assert (out / name / "results/securities.csv").read_text() == securities, name
        assert (out / name / "pack.html").read_text() == html, name
    # plain progress lines in a pipe: one per scheme
    assert len(re.findall(rf"^reporter: \[\d+/{N_SCHEMES}\] scheme-\d\d (built|failed)",
                          stderr, re.M)) == N_SCHEMES


def test_build_all_on_a_local_pool(schemes, single_builds, tmp_path, capsys, fixed_epoch):
    out = tmp_path / "packs"
    code = main(["build-all", str(schemes), "--out", str(out), "--workers", "2"])
    captured = capsys.readouterr()
    check_batch(single_builds, out, code, captured.out, captured.err)


def test_build_all_on_a_dask_local_cluster(schemes, single_builds, tmp_path, capsys,
                                           fixed_epoch):
    distributed = pytest.importorskip("distributed")
    out = tmp_path / "packs"
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", dashboard_address=None) as cluster:
        code = main(["build-all", str(schemes), "--out", str(out),
                     "--scheduler", cluster.scheduler_address])
        workers = len(cluster.workers)
    captured = capsys.readouterr()
    assert workers == 2
    check_batch(single_builds, out, code, captured.out, captured.err)


def test_build_all_refusals(schemes, tmp_path, capsys, monkeypatch):
    code = main(["build-all", str(tmp_path / "none"), "--out", str(tmp_path / "o")])
    assert code == 2 and "no such folder of schemes" in capsys.readouterr().err
    from reporter import batch

    monkeypatch.setattr(batch, "CONNECT_TIMEOUT", "2s")  # nothing listens: retried until then
    code = main(["build-all", str(schemes), "--out", str(tmp_path / "o"),
                 "--scheduler", "tcp://127.0.0.1:9"])
    err = capsys.readouterr().err
    assert code == 1 and "cannot reach the Dask scheduler at tcp://127.0.0.1:9" in err
    assert not (tmp_path / "o").exists()
