"""The dashboard's decision scale and charts: z-equivalents, robust scales, bands, dated axes."""

from __future__ import annotations

import math
from datetime import datetime, timezone

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy import stats

from dashboard import charts, scale
from dashboard.formats import p_text
from monitor.store import readback

import dashboard_seed
import store_seed
from reference_decision_scale import T_0975, Z_0975


@pytest.mark.parametrize("df, t, source", T_0975, ids=[f"df{r[0]}" for r in T_0975])
def test_z_equivalent_of_tabled_t_quantiles_is_the_normal_quantile(df, t, source):
    assert scale.z_equivalent(t, df) == pytest.approx(Z_0975, abs=2e-3), source
    assert scale.z_equivalent(-t, df) == pytest.approx(-Z_0975, abs=2e-3), source


@given(st.floats(-40, 40), st.floats(1, 500))
def test_z_equivalent_matches_scipy_stats_and_keeps_the_decision(t, df):
    z = scale.z_equivalent(t, df)
    tail = stats.t.sf(abs(t), df)
    if tail > 1e-300:
        assert z == pytest.approx(math.copysign(stats.norm.isf(tail), t) if t else 0.0, rel=1e-7, abs=1e-9)
    # crossing on the drawn scale is exactly the nominal-level rule of the look
    for b in (1.5, 2.8, 4.3):
        assert scale.crossed(z, b, "two-sided") == (tail <= stats.norm.sf(b))
        assert scale.crossed(z, b, "greater") == (t > 0 and tail <= stats.norm.sf(b))


def test_z_looks_are_drawn_as_recorded_and_huge_t_stays_finite():
    assert scale.z_equivalent(2.5, None) == 2.5
    assert scale.z_equivalent(None, 3) is None
    assert scale.z_equivalent(1e300, 1) == scale.Z_CAP
    assert scale.z_equivalent(461.0, 1) == pytest.approx(stats.norm.isf(stats.t.sf(461.0, 1)), rel=1e-9)
    assert scale.nominal_level(3.301) == pytest.approx(stats.norm.sf(3.301))


@pytest.mark.parametrize("p, text", [
    (0.5, "0.50"), (0.0456, "0.046"), (0.0041, "0.0041"), (0.000104, "0.00010"), (2e-7, "below 0.000001"),
    (0.0, "0"), (None, "—"), (float("nan"), "—"),
])
def test_p_text_never_writes_an_exponent(p, text):
    assert p_text(p) == text


def test_robust_span_keeps_the_core_and_drops_a_far_early_look():
    assert charts.robust_span([0.0, 1.0], [0.5, 2.0, 40.0, -100000.0]) == (0.0, 2.0)
    assert charts.robust_span([0.0, 1.0], [-2.5, 3.5]) == (-2.5, 3.5)


@pytest.fixture
def paired(tmp_path):
    url = f"sqlite:///{tmp_path / 'store.sqlite'}"
    store_seed.migrate(url)
    store_seed.seed_store(url, now=datetime.now(timezone.utc))
    dashboard_seed.add_paired_days(url, now=datetime.now(timezone.utc))
    engine = readback.open_store(url)
    row = readback.get_comparison(engine, dashboard_seed.PAIRED)
    looks = readback.look_history(engine, dashboard_seed.PAIRED)
    yield row, looks, charts.history_frame(looks, "Europe/London")
    engine.dispose()


def _layer_data(chart, field):
    spec = chart.to_dict()
    out = []
    for layer in spec["layer"]:
        values = spec["datasets"][layer["data"]["name"]] if "name" in layer.get("data", {}) else []
        if layer["encoding"].get("y", {}).get("field") == field:
            out.append(values)
    return out


def test_t_looks_are_drawn_inside_the_boundary_they_did_not_cross(paired):
    row, looks, frame = paired
    raw_beyond = [h for h in looks if h["boundary_z"] is not None and abs(h["statistic"]) >= h["boundary_z"]]
    assert len(raw_beyond) >= 3  # the misleading case: raw t above the z boundary, no crossing
    chart = charts.boundary_chart(row, frame)
    drawn = {p["look"]: p for p in _layer_data(chart, "shown")[0]}
    for look in looks:
        if look["boundary_z"] is not None:
            point = drawn[look["look"]]
            assert abs(point["shown"]) < look["boundary_z"]
            assert point["shown"] == pytest.approx(stats.norm.isf(stats.t.sf(look["statistic"], look["df"])))
    assert "z-equivalent of t" in str(chart.to_dict())


def test_no_band_where_a_look_has_no_interval_and_a_dated_axis_in_the_comparisons_zone(paired):
    row, looks, frame = paired
    chart = charts.estimate_chart(row, frame)
    spec = chart.to_dict()
    banded = [v for values in _layer_data(chart, "band_low") for v in values]
    with_interval = {h["look"] for h in looks if h["ci_low"] is not None}
    assert with_interval and {v["look"] for v in banded} == with_interval
    assert len(with_interval) < len(looks)
    axis = spec["layer"][0]["encoding"]["x"]
    assert axis["title"] == "look time (Europe/London)" and "%a %d %b" in axis["axis"]["labelExpr"]
    first = frame.iloc[0]
    assert first["local_time"].hour == first["as_of"].tz_convert("Europe/London").hour


def test_an_extreme_early_look_is_clipped_and_marked(paired):
    row, looks, frame = paired
    frame = frame.copy()
    frame.loc[0, "decision_z"] = 60.0  # a z look on a handful of events can land this far out
    chart = charts.boundary_chart(row, frame)
    drawn = _layer_data(chart, "shown")
    line = drawn[0]
    assert max(abs(p["shown"]) for p in line) < 10  # the later looks keep a readable scale
    marks = [p for p in drawn[1] if p["off_scale"]]
    assert [p["look"] for p in marks] == [1] and "off scale" in marks[0]["label"]
    assert "look 1 (60)" in charts.off_scale_note(frame, row)


def test_estimate_chart_cuts_wide_early_intervals_and_says_so(paired):
    row, looks, frame = paired
    chart = charts.estimate_chart(row, frame)
    domain = chart.to_dict()["layer"][0]["encoding"]["y"]["scale"]["domain"]
    widest = max(h["ci_high"] - h["ci_low"] for h in looks if h["ci_low"] is not None)
    assert domain[1] - domain[0] < widest / 5
    assert charts.cut_intervals_note(row, frame).startswith("Look")


def test_history_frame_handles_looks_without_any_statistic():
    looks = [{"look": 1, "as_of": "2026-03-02T10:00:00+00:00", "statistic": None, "df": None,
              "boundary_z": None, "estimate": None, "ci_low": None, "ci_high": None, "fraction": 0.0}]
    frame = charts.history_frame(looks)
    assert np.isnan(frame.loc[0, "decision_z"])
    assert charts.boundary_chart({"alternative": "two-sided"}, frame) is None


def test_a_far_early_group_mean_is_clipped_and_points_the_right_way(paired):
    row, looks, frame = paired
    frame = frame.copy()
    frame.loc[0, "mean1"] = 5000.0  # three events from a miscounted first hour
    frame.loc[0, "mean2"] = -4000.0
    chart = charts.group_chart(row, frame).to_dict()
    domain = chart["layer"][0]["encoding"]["y"]["scale"]["domain"]
    assert domain[1] - domain[0] < 100
    marks = [p for p in chart["datasets"][chart["layer"][1]["data"]["name"]]]
    assert {(p["look"], p["shape"]) for p in marks} == {(1, "triangle-up"), (1, "triangle-down")}
