"""dashboard.charts and dashboard.theme without Streamlit: units on every axis, the data
drawn are the data given, colour-blind-safe palettes (issue #6)."""

from __future__ import annotations

import datetime as dt
import re

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from analytics.warranty import warranted_fraction
from dashboard import charts, theme

UNIT = re.compile(r"\[[^\]]+\]")
#: axes that are categorical or clock time: labelled, no unit
NO_UNIT_OK = ("Inverter", "Device", "File", "Day (local standard time)",
              "Local standard time", "Week starting (local standard time)",
              "Month (local standard time)", "Season of the later day", "Year of the later day",
              "Start of the dry period", "Dry period", "Local wall-clock time")


def _axis_titles(fig) -> dict[str, str]:
    out = {}
    for name in dir(fig.layout):
        if re.fullmatch(r"[xy]axis\d*", name):
            ax = getattr(fig.layout, name)
            if ax is not None and ax.title is not None and ax.title.text:
                out[name] = ax.title.text
    return out


def _check_units(fig) -> dict[str, str]:
    titles = _axis_titles(fig)
    assert titles, "figure has no axis titles"
    for name, text in titles.items():
        assert UNIT.search(text) or text.startswith(NO_UNIT_OK), f"{name} {text!r} has no unit"
    return titles


def _days(n, start=dt.date(2024, 6, 1)):
    return [start + dt.timedelta(days=k) for k in range(n)]


# ---------------------------------------------------------------- weekly check


def test_pr_heatmap_draws_the_matrix_on_a_symmetric_diverging_scale():
    heat = pd.DataFrame([[-5.0, 0.0, np.nan], [2.5, 12.0, -1.0]], index=["INV-1", "INV-2"],
                        columns=_days(3))
    fig = charts.pr_heatmap(heat, limit_pct=10)
    titles = _check_units(fig)
    assert titles["xaxis"] == "Day (local standard time)" and titles["yaxis"] == "Inverter"
    hm = fig.data[0]
    assert_allclose(np.asarray(hm.z, dtype=float), heat.to_numpy(), equal_nan=True)
    # centred on the median (0 %), saturating symmetrically
    assert hm.zmid == 0 and hm.zmin == -10 and hm.zmax == 10
    assert "[%]" in hm.colorbar.title.text
    assert hm.hoverongaps is False  # a not-valid day is a gap on the grey background
    assert fig.layout.plot_bgcolor == theme.MISSING


def test_fleet_quadrant_axes_are_the_two_comparisons():
    fleet = pd.DataFrame({"device_id": ["A", "B", "C"], "d_trailing_pct": [-4.0, 0.5, 1.0],
                          "d_peers_pct": [-6.0, 0.2, np.nan], "e_ac_kwh": [100.0, 200.0, 150.0],
                          "n_flags": [1, 0, 0]})
    fig = charts.fleet_quadrant(fleet)
    titles = _check_units(fig)
    assert "trailing" in titles["xaxis"] and "peer" in titles["yaxis"]
    sc = fig.data[0]
    assert list(sc.x) == [-4.0, 0.5] and list(sc.y) == [-6.0, 0.2]  # C has no peer value
    assert list(sc.text) == ["A", ""]  # only the outlier is labelled
    assert sc.marker.color[0] == theme.OKABE_ITO["vermillion"]  # has flags


def test_fleet_quadrant_colours_by_the_worst_warning_or_alarm_not_by_info():
    fleet = pd.DataFrame({"device_id": ["A", "B", "C"], "d_trailing_pct": [-4.0, 0.5, 1.0],
                          "d_peers_pct": [-6.0, 0.2, 0.1], "e_ac_kwh": [100.0, 200.0, 150.0],
                          "n_flags": [1, 3, 1], "worst_severity": ["alarm", "none", "warning"]})
    sc = charts.fleet_quadrant(fleet).data[0]
    # B has three info flags (clipping) only: not coloured as trouble
    assert list(sc.marker.color) == [theme.SEVERITY["alarm"], theme.MEASURED,
                                     theme.SEVERITY["warning"]]


@pytest.mark.parametrize("period,word", [("week", "Week starting"), ("month", "Month")])
def test_pr_heatmap_over_long_ranges_says_its_period(period, word):
    heat = pd.DataFrame([[1.0, -2.0]], index=["INV-1"], columns=_days(2))
    fig = charts.pr_heatmap(heat, period=period)
    titles = _check_units(fig)
    assert titles["xaxis"].startswith(word)
    assert fig.layout.title.text.startswith({"week": "Weekly", "month": "Monthly"}[period])


# ---------------------------------------------------------------- trends


def test_pr_trend_layers():
    days = pd.date_range("2024-01-01", periods=40, freq="D")
    chosen = pd.DataFrame({"device_id": "INV-1", "day": days, "pr_stc": 0.85,
                           "pr_stc_roll": 0.85})
    peers = pd.DataFrame({"day": days, "p10": 0.84, "p50": 0.85, "p90": 0.86})
    flagged = chosen.iloc[[3, 4]].assign(kind="underperformance")
    soil = pd.DataFrame({"start_local": [days[10]], "end_local": [days[20]]})
    fit = pd.DataFrame({"day": days, "fit": 0.85, "lo": 0.84, "hi": 0.86})
    fig = charts.pr_trend(chosen, peers, flagged, soil, {"INV-1 yoy fit": fit})
    titles = _check_units(fig)
    assert titles["yaxis"] == "Temperature-corrected PR (PR_STC) [–]"
    names = [t.name for t in fig.data]
    assert "INV-1 rolling median" in names
    rug = next(t for t in fig.data if (t.name or "").startswith("flagged days"))
    assert list(rug.x) == list(days[[3, 4]])
    assert max(rug.y) < 0.85  # drawn under the data, never on top of it
    assert "INV-1 yoy fit" in names and "soiling interval" in names
    fit_line = next(t for t in fig.data if t.name == "INV-1 yoy fit")
    daily = next(t for t in fig.data if t.name == "INV-1 rolling median")
    assert fit_line.line.color == daily.line.color and fit_line.line.dash == "dash"
    assert len(fig.layout.shapes) == 1  # the soiling interval, shaded


def test_pr_trend_empty_says_so():
    fig = charts.pr_trend(pd.DataFrame(columns=["device_id", "day", "pr_stc", "pr_stc_roll"]),
                          pd.DataFrame())
    assert "Choose inverters" in fig.layout.annotations[0].text
    _check_units(fig)


# ---------------------------------------------------------------- degradation


def test_degradation_forest_whiskers_are_the_intervals():
    res = pd.DataFrame({"device_id": ["A", "A", "B"],
                        "method": ["sensor_year_pairs", "sensor_monthly_robust_line",
                                   "sensor_year_pairs"],
                        "rate_pct_per_yr": [-0.62, -0.55, -0.40],
                        "ci_low": [-0.80, -0.70, -0.60], "ci_high": [-0.45, -0.40, -0.20]})
    fig = charts.degradation_forest(res)
    titles = _check_units(fig)
    assert titles["xaxis"] == "Degradation rate of the plant [%/yr]"
    yoy = next(t for t in fig.data if t.name == "Year-on-year, POA sensor")  # words, no code
    # hand-worked one-sided test of a warranty rate (common practice): Rd = -0.62, 95 % CI [-0.80, -0.45]
    assert_allclose(yoy.error_x.array, [0.17, 0.20], atol=1e-12)  # ci_high - Rd
    assert_allclose(yoy.error_x.arrayminus, [0.18, 0.20], atol=1e-12)  # Rd - ci_low


def test_relative_rates_and_drift_have_their_own_axis():
    res = pd.DataFrame({"device_id": ["A", "A", "A"],
                        "method": ["sensor_year_pairs", "peer_ratio_year_pairs",
                                   "sensor_drift_check"],
                        "rate_pct_per_yr": [-0.6, 0.3, 0.7], "ci_low": [-0.8, 0.1, 0.5],
                        "ci_high": [-0.4, 0.5, 0.9]})
    fig = charts.degradation_forest(res, {"A": "sensor_year_pairs"})
    titles = _check_units(fig)
    assert "Relative to peers" in titles["xaxis2"]
    axis = {t.name: t.xaxis for t in fig.data}
    assert axis["Year-on-year, POA sensor"] == "x"
    assert axis["Year-on-year relative to the peers"] == "x2"
    assert axis["POA sensor drift against clear sky"] == "x2"
    ring = next(t for t in fig.data if t.name == "recommended rate")
    assert list(ring.x) == [-0.6]


def test_pair_grid_is_centred_on_the_warranted_rate():
    from analytics.reporting import pair_rate_grid

    # pairs ending Jan..Nov 2023 at -0.5 %/yr, and Jun-Aug 2024 at -3 %/yr (a bad summer)
    a = pd.Series(-0.5, pd.date_range("2022-01-01", "2022-11-30", freq="D"))
    b = pd.Series(-3.0, pd.date_range("2023-06-01", "2023-08-31", freq="D"))
    grid = pair_rate_grid(pd.concat([a, b]))
    fig = charts.pair_grid_chart(grid, warranted_pct_per_yr=-0.55)
    _check_units(fig)
    hm = fig.data[0]
    assert hm.zmid == -0.55  # red = lost more than the warranty allows
    z = pd.DataFrame(np.asarray(hm.z, dtype=float), index=list(hm.y), columns=list(hm.x))
    assert z.loc["2024", "Jun–Aug"] == -3.0 and z.loc["2023", "Mar–May"] == -0.5
    assert np.isnan(z.loc["2024", "Dec–Feb"])  # no pairs: empty, not zero
    # 92 earlier days 2023-06-01..08-31; + 365 d lands on 2024-05-31..08-30 (2024 is a leap
    # year), so 91 later days fall in Jun-Aug 2024 and one in May (hand count)
    assert "(91)" in hm.text[list(hm.y).index("2024")][2]


def test_year_rates_chart_has_the_warranty_line_and_the_rate_band():
    from analytics.reporting import pair_rate_grid

    grid = pair_rate_grid(pd.Series(-0.5, pd.date_range("2022-01-01", "2023-11-30", freq="D")))
    fig = charts.year_rates_chart(grid, rate=-0.5, ci=(-0.7, -0.3), warranted_pct_per_yr=-0.55)
    _check_units(fig)
    names = [t.name for t in fig.data]
    assert "warranted -0.55 %/yr" in names and "whole period -0.50 %/yr" in names
    assert any(s.type == "rect" and s.y0 == -0.7 and s.y1 == -0.3 for s in fig.layout.shapes)


def test_soiling_has_its_own_form_loss_in_percent():
    periods = pd.DataFrame({"first_day": ["2024-06-01", "2024-08-01"],
                            "last_day": ["2024-07-10", "2024-09-01"],
                            "lost_kwh": [1200.0, 800.0], "loss_at_end_pct": [3.0, 2.0],
                            "severity": ["info", "warning"]})
    summary = {"loss_pct": 1.8, "loss_low_pct": 2.0, "loss_high_pct": 2.4,
               "current_loss_pct": 1.1, "periods": periods}
    bar = charts.soiling_loss_bar(summary)
    _check_units(bar)
    assert bar.layout.xaxis.title.text == "Energy lost to soiling [%]"
    assert list(bar.data[0].x) == [1.8] and list(bar.data[1].x) == [2.0, 2.4]
    per = charts.soiling_loss_chart(summary)
    _check_units(per)
    assert list(per.data[0].y) == [1200.0, 800.0]


def test_warranty_chart_draws_the_warranted_line():
    years = np.array([0.0, 1.0, 25.0])
    w = warranted_fraction(years, first_year_loss_pct=3.0, annual_loss_pct=0.7)
    env = pd.DataFrame({"years": years, "warranted_pct": 100 * w})
    fig = charts.warranty_chart(env)
    _check_units(fig)
    # typical linear module warranty (from memory): W1 = 97 %, d_w = 0.7 %/yr -> 80.2 % at year 25
    assert_allclose(fig.data[0].y, [97.0, 97.0, 80.2], atol=1e-9)
    empty = charts.warranty_chart(None)
    assert "No warranty terms" in empty.layout.annotations[0].text


# ---------------------------------------------------------------- drill-down


def _frame(n=48, start="2024-06-01T00:00Z"):
    idx = pd.date_range(start, periods=n, freq="15min", tz="UTC", name="ts_utc")
    g = np.clip(np.sin(np.linspace(0, np.pi, n)) * 900, 0, None)
    return pd.DataFrame({"p_ac_kw": g / 10, "p_ac_exp_kw": g / 9.5, "poa_wm2": g,
                         "t_module_c": 20 + g / 30, "t_cell_c": 20 + g / 30 + 3 * g / 1000,
                         "t_amb_c": 18.0, "p_ac_kw_per_kwp": g / 1000}, index=idx)


def test_drilldown_panels_units_flags_and_local_time():
    f = _frame()
    peers = pd.DataFrame({"ts_utc": f.index, "device_id": "INV-2",
                          "p_ac_kw_per_kwp": f["p_ac_kw_per_kwp"] * 1.02})
    t0 = pd.Timestamp("2024-06-01T04:00")
    flags = pd.DataFrame({"flag_id": [7], "kind": ["outage"], "start_local": [t0],
                          "end_local": [t0 + pd.Timedelta(hours=2)]})
    fig = charts.drilldown(f, peers, flags, "INV-1", std_offset_s=3600, highlight_flag_id=7)
    titles = _check_units(fig)
    assert set(titles.values()) >= {"AC power [kW]", "Power per kWp [kW/kWp]", "POA [W/m²]",
                                    "Temperature [°C]", "Local standard time (UTC+01:00)"}
    first = pd.Timestamp(fig.data[0].x[0])
    assert first == pd.Timestamp("2024-06-01T01:00")  # 00:00 UTC shown as 01:00 UTC+1
    assert len(fig.layout.shapes) == 1  # the flag, shaded across all four panels
    assert fig.layout.shapes[0].yref == "paper" and fig.layout.shapes[0].fillcolor.endswith("0.28)")
    assert "#7 Outage" in fig.layout.annotations[0].text  # words, not the code
    assert {t.xaxis for t in fig.data} == {"x"}  # one zoomable time axis for every panel
    # an info flag or a site-wide flag is listed, not shaded
    info = flags.assign(flag_id=8, severity="info", device_id="INV-1")
    assert not charts.drilldown(f, peers, info, "INV-1", 3600).layout.shapes
    assert any(t.name == "peers" for t in fig.data)
    # the wall-clock option: Europe/Madrid in June is UTC+2 (CEST, tz database)
    wall = charts.drilldown(f, peers, flags.assign(start_s=int(t0.timestamp()) - 3600,
                                                   end_s=int(t0.timestamp()) + 3600),
                            "INV-1", std_offset_s=3600, tz="Europe/Madrid")
    assert pd.Timestamp(wall.data[0].x[0]) == pd.Timestamp("2024-06-01T02:00")
    assert wall.layout.xaxis.title.text == "Local wall-clock time (Europe/Madrid)"


def test_drilldown_empty_frame():
    fig = charts.drilldown(_frame().iloc[0:0], pd.DataFrame(), pd.DataFrame(), "INV-1")
    assert "No interval readings" in fig.layout.annotations[0].text


# ---------------------------------------------------------------- data quality


def test_completeness_heatmap_in_percent():
    comp = pd.DataFrame([[1.0, 0.5], [0.0, 0.25]], index=["INV-1", "POA · poa_wm2"],
                        columns=_days(2))
    fig = charts.completeness_heatmap(comp)
    _check_units(fig)
    assert_allclose(fig.data[0].z, [[100, 50], [0, 25]])
    assert fig.data[0].zmin == 0 and fig.data[0].zmax == 100


def test_ingest_bars_stack_rows():
    log = pd.DataFrame({"batch_id": [2, 1], "file_name": ["b.csv", "a.csv"],
                        "rows_loaded": [90, 100], "rows_duplicate": [5, 0],
                        "rows_rejected": [5, 1]})
    fig = charts.ingest_bars(log)
    assert _check_units(fig)["yaxis"] == "Rows [count]"
    rejected = next(t for t in fig.data if t.name == "rejected")
    assert list(rejected.x) == ["a.csv", "b.csv"] and list(rejected.y) == [1, 5]


# ---------------------------------------------------------------- theme


def _rgb(hex_):
    return tuple(int(hex_[i:i + 2], 16) for i in (1, 3, 5))


def test_okabe_ito_palette_values():
    # Okabe & Ito (2008), "Color Universal Design", RGB values of the eight colours
    # (from memory; they are the values widely reproduced from the original page)
    assert _rgb(theme.OKABE_ITO["orange"]) == (230, 159, 0)
    assert _rgb(theme.OKABE_ITO["sky_blue"]) == (86, 180, 233)
    assert _rgb(theme.OKABE_ITO["bluish_green"]) == (0, 158, 115)
    assert _rgb(theme.OKABE_ITO["yellow"]) == (240, 228, 66)
    assert _rgb(theme.OKABE_ITO["blue"]) == (0, 114, 178)
    assert _rgb(theme.OKABE_ITO["vermillion"]) == (213, 94, 0)
    assert _rgb(theme.OKABE_ITO["reddish_purple"]) == (204, 121, 167)


def test_diverging_scale_is_tol_burd_reversed_with_light_centre():
    # Tol (2021) BuRd end points #2166AC (blue) and #B2182B (red), centre #F7F7F7 (from memory)
    assert theme.DIVERGING[0] == [0.0, "#B2182B"]  # far below the median: red
    assert theme.DIVERGING[-1] == [1.0, "#2166AC"]
    assert theme.DIVERGING[4] == [0.5, "#F7F7F7"]
    # lightness rises monotonically towards the centre from both ends
    lum = [sum(_rgb(c)) for _, c in theme.DIVERGING]
    assert lum[:5] == sorted(lum[:5]) and lum[4:] == sorted(lum[4:], reverse=True)


@pytest.mark.parametrize("fn", [charts.pr_heatmap, charts.completeness_heatmap,
                                charts.pair_grid_chart, charts.year_rates_chart])
def test_empty_heatmaps(fn):
    fig = fn(pd.DataFrame())
    assert fig.layout.annotations and _axis_titles(fig)
