"""Rendering: escaping of input strings, determinism, the layered template loader."""

from __future__ import annotations

import shutil

import pandas as pd
import pytest

from reporter.build import assemble
from reporter.config import load_settings
from reporter.render.environment import bp, longdate, num, pct
from tests.conftest import DEMO, FIXED_EPOCH


@pytest.fixture()
def demo_copy(tmp_path):
    dest = tmp_path / "pack"
    shutil.copytree(DEMO, dest)
    return dest


def test_input_strings_are_escaped(demo_copy, monkeypatch):
    h = pd.read_csv(demo_copy / "holdings.csv")
    h.loc[0, "name"] = "<script>alert('x')</script> & Co"
    h.loc[1, "sector"] = "<b>Bold</b>"
    h.to_csv(demo_copy / "holdings.csv", index=False)
    html = assemble(load_settings(demo_copy)).html()
    assert "<script>alert" not in html and "<b>Bold</b>" not in html
    assert "&lt;script&gt;alert(&#39;x&#39;)&lt;/script&gt; &amp; Co" in html
    assert "&lt;b&gt;Bold&lt;/b&gt;" in html


def test_same_inputs_give_byte_identical_html(demo_build, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", FIXED_EPOCH)
    first = assemble(load_settings(DEMO)).html()
    second = assemble(load_settings(DEMO)).html()
    assert first == second
    assert first == (demo_build / "pack.html").read_text(encoding="utf-8")
    assert "2026-11-30 00:00 UTC" in first


def test_user_template_extends_default(demo_copy):
    tpl = demo_copy / "my_templates"
    tpl.mkdir()
    (tpl / "pack.html.j2").write_text(
        '{% extends "default/pack.html.j2" %}\n'
        '{% block cautions_page %}{{ super() }}<p id="house-note">Prepared by the '
        "secretariat of {{ organisation }}.</p>{% endblock %}\n")
    toml = (demo_copy / "pack.toml").read_text() + '\n[render]\ntemplates = "my_templates"\n'
    (demo_copy / "pack.toml").write_text(toml)
    html = assemble(load_settings(demo_copy)).html()
    assert '<p id="house-note">Prepared by the secretariat of Tarnbrook Valley' in html
    assert "Past performance is not a reliable guide" in html  # the default block kept


def test_display_filters():
    assert pct(0.01234) == "1.2%" and pct(-0.01234, 2) == "\u22121.23%"
    assert pct(0.05, 1, True) == "+5.0%" and pct(float("nan")) == "\u2013"
    assert bp(0.0123) == "+123 bp" and num(1.23456, 3) == "1.235"
    assert longdate("2026-11-30") == "30 November 2026"


def test_shown_errors_agree_with_intervals_and_positions():
    # what a reader sees must hang together: the standard error printed beside the portfolio
    # beta is the one its interval uses, and every holding called above or below the line
    # shows an alpha t beyond the critical value (Student t, n - 2 degrees of freedom)
    from scipy import stats

    a = assemble(load_settings(DEMO))
    p = a.context.portfolio
    tcrit = stats.t.ppf(0.975, p["n_obs"] - 2)
    half = (p["beta_ci_high"] - p["beta_ci_low"]) / 2
    assert abs(half - tcrit * p["beta_se_hac"]) < 1e-12
    assert f'<td class="n">{p["beta_se_hac"]:.3f}</td>' in a.html()
    called = [r for r in a.context.sml_above + a.context.sml_below
              if r["sml_position"] in ("above the line", "below the line")]
    assert called
    for r in called:
        assert abs(r["alpha_t_used"]) > stats.t.ppf(0.975, r["n_obs"] - 2)


def test_every_chart_matches_the_vega_lite_schema():
    """The export skips Altair's schema check for speed (``chart_svg``), so every chart the
    demo pack and the demo fund draw is checked here against the Vega-Lite JSON schema that
    Altair ships (reference: the published Vega-Lite v6 schema, via Altair's validator)."""
    import altair as alt
    import jsonschema

    from reporter.charts import mandate_risk_chart, mandate_weights_chart
    from reporter.config import TOTAL_FUND
    from tests.conftest import REPO

    single = assemble(load_settings(DEMO))
    fund = assemble(load_settings(REPO / "inputs" / "demo-fund"))
    mandates = fund.table[fund.table["mandate"] != TOTAL_FUND]
    charts = {f"pack/{n}": c for n, c in single.context.charts.items()}
    for part in (fund.total, *fund.parts):
        charts |= {f"{part.slug}/{n}": c for n, c in part.context.charts.items()}
    charts |= {"fund/weights": mandate_weights_chart(mandates),
               "fund/risk": mandate_risk_chart(mandates)}
    assert len(charts) >= 7 * (2 + len(fund.parts))
    for name, chart in charts.items():
        spec = chart.to_dict(validate=True)         # raises on a schema error
        assert "v6" in spec["$schema"], name
    # the check can fail: an encoding type the schema does not know is refused
    bad = alt.Chart(pd.DataFrame({"a": [1.0]})).mark_bar().encode(x="a:Q")
    bad.encoding.x.type = "no-such-type"
    with pytest.raises(jsonschema.ValidationError):
        bad.to_dict(validate=True)


def test_held_objects_frozen_keeps_held_objects_from_the_collector_and_restores():
    """While WeasyPrint renders, the objects held on entry are frozen (the collector skips
    them); garbage on entry is collected first, not frozen; on exit none is frozen, and an
    outer freeze of the caller's is left as it was."""
    import gc
    import weakref

    from reporter.render.pdf import held_objects_frozen

    held = [[i] for i in range(1000)]          # tracked objects that exist on entry
    assert gc.get_freeze_count() == 0
    class Box:
        pass

    gc.disable()                                # no automatic collection in between
    try:
        box = Box()
        box.me = box                            # garbage on entry: a cycle no one holds
        gone = weakref.ref(box)
        del box
        assert gone() is not None
    finally:
        gc.enable()
    with held_objects_frozen():
        assert gone() is None                   # collected first, not frozen for the render
        frozen = gc.get_freeze_count()
        assert frozen >= len(held)
        made = [[i] for i in range(10)]
        assert gc.get_freeze_count() == frozen       # objects made inside are not frozen
    assert gc.get_freeze_count() == 0 and len(made) == 10
    gc.freeze()                                      # the caller's own freeze
    try:
        outer = gc.get_freeze_count()
        with held_objects_frozen():
            assert gc.get_freeze_count() == outer
        assert gc.get_freeze_count() == outer
    finally:
        gc.unfreeze()
