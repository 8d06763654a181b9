"""Threshold-boundary tests (issue #14), part 2: the diagnoses (underperformance, outages,
power limits, clipping, soiling, clock, input mismatch, data gaps) and exact lost energy
on noise-free data computed by hand from the constructed input.

Each documented threshold without a just-below / at / just-above test elsewhere is tested
against the documented number (not the code's constant), through heliaudit's real
functions, on small hand-made inputs. The inventory is docs/flags.md.

Hand-made geometry as in tests/test_flags_boundaries.py: one or more UTC days of 15-min
samples (standard offset 0), solar elevation 60° · sin(π (h − 6) / 12), clear-sky POA
1000 W/m² · sin(elevation).
"""

import numpy as np
import pandas as pd
import pytest

from analytics.outages import (
    clipping_flags,
    outage_flags,
    power_limit_level,
    site_outage_events,
)
from analytics.outliers import flag_frame, input_mismatch_flags, underperformance_flags
from analytics.soiling import soiling_flags

P_MAX = 100.0


def _geometry(n_days=1, start="2024-06-03"):
    idx = pd.date_range(start, periods=96 * n_days, freq="15min", tz="UTC", name="ts_utc")
    hour = (np.arange(idx.size) % 96) / 4 + 0.125
    elev = 60.0 * np.sin(np.pi * (hour - 6) / 12)
    cs = 1000.0 * np.clip(np.sin(np.radians(elev)), 0, None)
    return idx, hour, elev, cs


IDX, HOUR, ELEV, CS = _geometry()
SUN = ELEV >= 10


def _outage_case(poa=800.0, out=(10.0, 12.0)):
    """40 kW expected and produced while the sun is >= 10°, POA `poa`; 0 kW in `out` hours."""
    exp = pd.Series(np.where(SUN, 40.0, 0.0), index=IDX)
    p = exp.to_numpy().copy()
    p[(HOUR >= out[0]) & (HOUR < out[1])] = 0.0
    fr = pd.DataFrame({"p_ac_kw": p, "poa_wm2": np.where(SUN, poa, 0.0), "interval_h": 0.25},
                      index=IDX)
    return outage_flags(fr, P_MAX, device_id="inv1", p_ac_exp_kw=exp, std_offset_s=0,
                        solar_elevation_deg=ELEV)


# ------------------------------------------------------------ outages


def test_outage_exact_lost_energy_by_hand():
    # noise-free: 0 kW from 10:00 to 12:00 while 40 kW were expected -> lost energy
    # 8 intervals x 40 kW x 0.25 h = 80 kWh (hand calculation), 2 h out, ends when
    # production resumes at 12:00
    fl = _outage_case()
    assert len(fl) == 1
    f = fl.iloc[0]
    assert f["lost_kwh"] == 80.0
    assert f["details"]["hours_out"] == 2.0
    assert f["start_s"] == int(pd.Timestamp("2024-06-03 10:00", tz="UTC").timestamp())
    assert f["end_s"] == int(pd.Timestamp("2024-06-03 12:00", tz="UTC").timestamp())


@pytest.mark.parametrize("poa,found", [(49.99, False), (50.0, True), (50.01, True)])
def test_outage_poa_gate_50(poa, found):
    # common practice (README Flags, IEC 61724-1 practice): an outage interval needs
    # POA >= 50 W/m²
    assert (len(_outage_case(poa=poa)) == 1) == found


@pytest.mark.parametrize("hours,severity", [(0.75, "info"), (1.0, "warning"),
                                            (1.25, "warning"), (3.75, "warning"),
                                            (4.0, "alarm"), (4.25, "alarm")])
def test_outage_severity_1h_warning_4h_alarm(hours, severity):
    # heliaudit's documented choice, docs/flags.md: an outage of >= 1 h is a warning, of
    # >= 4 h (or a whole day) an alarm
    fl = _outage_case(out=(9.0, 9.0 + hours))
    assert len(fl) == 1 and fl.iloc[0]["severity"] == severity
    assert fl.iloc[0]["lost_kwh"] == 40.0 * hours  # hand: 40 kW x the hours out


def _oflag(dev, a, b, lost=10.0):
    return dict(device_id=dev, kind="outage", start_s=a, end_s=b, severity="alarm",
                lost_kwh=lost, details={})


@pytest.mark.parametrize("n_inv,n_out,merged", [(2, 1, False), (2, 2, True), (3, 3, True)])
def test_site_outage_needs_at_least_2_inverters(n_inv, n_out, merged):
    # heliaudit's documented choice, README Flags: at least half the inverters *and 2*;
    # on a site of 2 one inverter out is half the site but still its own event
    fl = flag_frame([_oflag(f"i{k}", 1000, 50000) for k in range(n_out)])
    out = site_outage_events(fl, n_inv)
    assert (len(out) == 1 and out.iloc[0]["device_id"] is None) == merged
    if merged:  # lost energy of each inverter, summed (hand: 10 kWh each)
        assert out.iloc[0]["lost_kwh"] == 10.0 * n_out


@pytest.mark.parametrize("diff_s,merged", [(7199, True), (7200, True), (7201, False)])
def test_site_outage_starts_within_2_hours(diff_s, merged):
    # heliaudit's documented choice, README Flags: starting within 2 h of each other
    fl = flag_frame([_oflag("a", 0, 50000), _oflag("b", diff_s, 50000)])
    out = site_outage_events(fl, 2)
    assert (len(out) == 1) == merged


# ------------------------------------------------------------ power limit and clipping


@pytest.mark.parametrize("poa,limit", [(599.99, False), (600.0, True), (600.01, True)])
def test_power_limit_poa_gate_600(poa, limit):
    # heliaudit's documented choice, README Flags: the ceiling is sought under POA >= 600
    # W/m². 60 intervals flat at 95 kW under `poa`, 40 ramping 40-90 kW under 900 W/m²
    p = np.r_[np.full(60, 95.0), np.linspace(40, 90, 40)]
    g = np.r_[np.full(60, poa), np.full(40, 900.0)]
    got = power_limit_level(p, P_MAX, g)
    assert (got is not None) == limit
    if limit:
        assert got == pytest.approx(95.0, abs=1e-9)


def _clip_frame(values, tau_h=0.25):
    idx = pd.date_range("2024-06-03 10:00", periods=len(values), freq=f"{int(tau_h * 60)}min",
                        tz="UTC")
    return pd.DataFrame({"p_ac_kw": values, "interval_h": tau_h}, index=idx)


@pytest.mark.parametrize("p_kw,clipped", [(97.99, False), (98.0, True), (98.01, True)])
def test_clipping_at_98_percent(p_kw, clipped):
    # common practice, README Flags: an inverter at >= 98 % of its AC rating is clipping
    fl = clipping_flags(_clip_frame([50.0, p_kw, p_kw, p_kw, p_kw, 50.0]), P_MAX,
                        device_id="inv1")
    assert (len(fl) == 1) == clipped
    if clipped:
        assert fl.iloc[0]["details"]["clipped_hours"] == 1.0  # hand: 4 x 0.25 h


@pytest.mark.parametrize("n,reported", [(2, False), (3, True), (4, True)])
def test_clipping_month_needs_a_quarter_hour(n, reported):
    # heliaudit's documented choice, docs/flags.md: a month with less than 0.25 h of
    # clipping is not reported (5-min data: 2, 3, 4 intervals = 1/6, 1/4, 1/3 h)
    fl = clipping_flags(_clip_frame([50.0] + [99.0] * n + [50.0], tau_h=5 / 60), P_MAX,
                        device_id="inv1")
    assert (len(fl) == 1) == reported


# ------------------------------------------------------------ underperformance


def _daily(pis: dict, n_days):
    days = pd.date_range("2024-01-01", periods=n_days, freq="D")
    return pd.concat([pd.DataFrame({"device_id": k, "day": days, "pi": v, "day_valid": True,
                                    "e_exp_kwh": 100.0}) for k, v in pis.items()],
                     ignore_index=True)


def _peer_case(low_days, n_days=60):
    """Seven peers at pi 1.00 and 'x' at 0.90 on `low_days` (else 1.00): peer ratio 0.90,
    far below z −3 and the 4 % deficit, so only the persistence rules decide."""
    pis = {f"p{i}": np.full(n_days, 1.0) for i in range(7)}
    x = np.full(n_days, 1.0)
    x[list(low_days)] = 0.9
    pis["x"] = x
    return underperformance_flags(_daily(pis, n_days))


@pytest.mark.parametrize("low_days,found", [({5, 7}, False), ({5, 7, 9}, True),
                                            ({5, 6, 7, 9}, True)])
def test_underperformance_3_of_5_valid_days(low_days, found):
    # common practice, README Flags: an event opens on 3 low days out of the last 5
    fl = _peer_case(low_days)
    assert (len(fl) == 1) == found
    if found:
        assert fl.iloc[0]["details"]["first_day"] == "2024-01-06"  # day 5


@pytest.mark.parametrize("gap,last_day", [(2, "2024-01-15"), (3, "2024-01-11"),
                                          (4, "2024-01-11")])
def test_underperformance_clears_after_3_normal_days(gap, last_day):
    # common practice, README Flags: an event clears after 3 normal days. Low days 5..10,
    # `gap` normal days, then 2 more low days (too few to open a new event on their own):
    # with 2 normal days the event is still open and takes them (last low day 10 + 2 + 2 =
    # day 14); from 3 it has closed on day 10
    low = set(range(5, 11)) | {11 + gap, 12 + gap}
    fl = _peer_case(low)
    assert len(fl) == 1 and fl.iloc[0]["details"]["last_day"] == last_day


@pytest.mark.parametrize("gap_days,n_flags", [(13, 1), (14, 1), (15, 2)])
def test_underperformance_reopened_within_14_days_is_one_flag(gap_days, n_flags):
    # heliaudit's documented choice, docs/flags.md (alarm hysteresis, common practice): an
    # event re-opening within 14 days of the last low day of the previous one is the same
    # fault. Event A low on days 5..10, event B low from day 10 + gap_days for 6 days
    b0 = 10 + gap_days
    fl = _peer_case(set(range(5, 11)) | set(range(b0, b0 + 6)))
    assert len(fl) == n_flags


@pytest.mark.parametrize("n_inv,basis", [(4, "own_expected_and_history"), (5, "peers"),
                                         (6, "peers")])
def test_underperformance_peer_basis_from_5_inverters(n_inv, basis):
    # common practice, README Flags: groups of fewer than 5 inverters use each inverter's
    # own expected power and history. One inverter at half its peers' pi
    pis = {f"p{i}": np.full(30, 1.0) for i in range(n_inv - 1)}
    pis["x"] = np.full(30, 0.5)
    fl = underperformance_flags(_daily(pis, 30))
    assert list(fl["device_id"]) == ["x"]
    assert fl.iloc[0]["details"]["basis"] == basis
    # exact lost energy (noise-free): 30 days x 100 kWh x (1 − 0.5) = 1500 kWh, both bases
    # (peer ratio 0.5; own basis without history: ratio = pi = 0.5), hand calculation
    assert fl.iloc[0]["lost_kwh"] == pytest.approx(1500.0, rel=1e-12)


# ------------------------------------------------------------ input mismatch


@pytest.mark.parametrize("weak_days,found", [({2, 4}, False), ({2, 4, 6}, True),
                                             ({2, 3, 4, 6}, True)])
def test_input_mismatch_3_of_5_days(weak_days, found):
    # heliaudit's documented choice, README Flags: an input below 0.95 x its siblings on
    # 3 of 5 days. Three 10-kWp inputs at PR 1 under the hand-made clear sky; input B at 0.9
    # on `weak_days`, and exact lost energy on noise-free data: 10 % of a weak day's
    # sibling yield per weak day of the event, over the counted intervals (every input,
    # B included, >= 0.1 kW/kWp; hand rule)
    idx, _h, _e, cs = _geometry(n_days=10)
    p = cs / 1000.0 * 10.0
    day = np.arange(idx.size) // 96
    b = np.where(np.isin(day, list(weak_days)), 0.9 * p, p)
    df = pd.DataFrame({"A": p, "B": b, "C": p}, index=idx)
    fl = input_mismatch_flags(df, {"A": 10.0, "B": 10.0, "C": 10.0}, device_id="inv1")
    assert (len(fl) == 1) == found
    if found:
        f = fl.iloc[0]
        assert f["details"]["input"] == "B"
        ok = 0.9 * p / 10.0 >= 0.1  # counted intervals of a weak day: B >= 0.1 kW/kWp
        one_day = float(p[:96][ok[:96]].sum() * 0.25)
        assert f["lost_kwh"] == pytest.approx(0.1 * one_day * len(weak_days), rel=1e-9)


# ------------------------------------------------------------ soiling


def test_cleaning_recommended_when_30_day_loss_exceeds_cost():
    # heliaudit's documented choice, README Flags: a cleaning is recommended when the present
    # loss over the next 30 days costs *more* than a cleaning. Noise-free site pi falling
    # 0.2 %/day for 40 days, 1000 kWh/day expected, 0.05 EUR/kWh: loss at the end
    # 0.002 x 39 = 7.8 %, saving 0.05 x 1000 x 0.078 x 30 = 117 EUR (hand calculation)
    days = pd.date_range("2024-06-01", periods=40, freq="D")
    pi = pd.Series(1.0 - 0.002 * np.arange(40), index=days)
    h = pd.Series(7.0, index=days)
    e = pd.Series(1000.0, index=days)

    def run(cost):
        fl = soiling_flags(pi, h, e, tariff_per_kwh=0.05, cleaning_cost=cost, n_runs=0)
        return fl[fl["kind"] == "soiling"].iloc[-1]

    f = run(100.0)
    saving = f["details"]["expected_saving_next_days"]
    assert saving == pytest.approx(117.0, rel=1e-9)
    # exact lost energy: Σ 1000 x 0.002 d over d = 0..39 = 2 x 780 = 1560 kWh (hand)
    assert f["lost_kwh"] == pytest.approx(1560.0, rel=1e-9)
    for cost, rec in [(saving * (1 - 1e-9), True), (saving, False),
                      (saving * (1 + 1e-9), False)]:
        g = run(cost)
        assert g["details"]["recommend_cleaning"] == rec
        assert g["severity"] == ("warning" if rec else "info")


# ------------------------------------------------------------ clock


@pytest.mark.parametrize("share,partly", [(0.0799, False), (0.08, False), (0.0801, True)])
def test_clock_boundary_day_partly_shifted_beyond_8_percent(share, partly):
    # heliaudit's documented choice, README Flags: a boundary day whose profile moved by
    # more than 8 % of the shift (towards the shifted level) was partly shifted
    from analytics.clock import _partly_shifted

    assert _partly_shifted(share * 100.0, 100.0, 0.0) == partly


def test_clock_agreement_at_exactly_15_minutes():
    # heliaudit's documented choice, README Flags: devices agree when their levels are
    # within 15 min; at exactly 15 min they agree (74.9 / 75.1 are in
    # tests/test_jobs_flags_patterns.py)
    from heliaudit.jobs_flags import consolidate_clock_flags

    def clk(dev, level):
        return dict(device_id=dev, kind="clock_shift", start_s=0, end_s=10 * 86400,
                    severity="alarm", lost_kwh=None,
                    details=dict(shift_minutes_measured=level,
                                 shift_minutes_correction=-round(level),
                                 first_day="1970-01-01", last_day="1970-01-10",
                                 n_clear_days=8, correction_toml=""))

    out = consolidate_clock_flags(flag_frame([clk("a", 60.0), clk("b", 75.0)]),
                                  n_clock_devices=3)
    assert len(out) == 1 and out.iloc[0]["details"]["n_devices_agreeing"] == 2


# ------------------------------------------------------------ inverter power channel (job)


def _inv():
    return dict(device_id="inv1", p_dc_kwp=120.0, p_ac_max_kw=P_MAX, gamma_pmp_per_c=-0.0035,
                eta_inv_nom=0.96, mounting="open_rack_glass_polymer")


@pytest.mark.parametrize("elev,found", [(9.99, False), (10.0, True), (10.01, True)])
def test_power_dropout_needs_sun_10_degrees(elev, found):
    # heliaudit's documented choice, README Flags: an inverter that sends nothing at night
    # (a sleeping inverter) is missing only with the sun >= 10°. Night (sun at -20°, no rows)
    # for the first 8 h, then the constant `elev` with 8 h of missing power inside it (a
    # data gap is a flag from a 6-h silence)
    from heliaudit.jobs_flags import power_dropout_flags

    el = np.where(np.arange(IDX.size) < 32, -20.0, elev)
    grid = pd.DataFrame({"elev": el, "aoi": 30.0, "poa_cs": 500.0}, index=IDX)
    p = pd.Series(50.0, index=IDX)
    p.iloc[:32] = np.nan
    p.iloc[48:80] = np.nan
    fl = power_dropout_flags(_inv(), pd.DataFrame({"p_ac_kw": p, "interval_h": 0.25}), grid)
    assert (len(fl) == 1) == found
    if found:
        assert fl.iloc[0]["kind"] == "data_dropout"


@pytest.mark.parametrize("p_kw,stuck", [(4.99, False), (5.0, False), (5.01, True)])
def test_power_flat_at_5_percent_of_rating_is_not_stuck(p_kw, stuck):
    # heliaudit's documented choice, README Flags: inverter power flat at <= 5 % of the
    # rating (a waking inverter) is not "stuck". Power flat at `p_kw` from 07:00 to 10:00
    # while the clear sky rises (the sun moved), the job's own inverter checks
    from heliaudit.jobs_flags import inverter_flags

    p = CS / 1000.0 * 100.0
    flat = (HOUR >= 7) & (HOUR < 10)
    p = np.where(flat, p_kw, p)
    fr = pd.DataFrame({"p_ac_kw": p, "poa_wm2": CS, "t_module_c": 35.0, "t_amb_c": 25.0,
                       "wind_ms": 1.0, "interval_h": 0.25}, index=IDX)
    sun = pd.DataFrame({"elev": ELEV, "aoi": 30.0, "poa_cs": CS}, index=IDX)
    out = inverter_flags(_inv(), fr, sun, std_offset_s=0, site_zone="UTC")
    kinds = [k for f in out if len(f) for k in f["kind"]]
    assert ("sensor_flatline" in kinds) == stuck


@pytest.mark.parametrize("above_kw,stuck", [(0.99, False), (1.0, False), (1.01, True)])
def test_power_flat_within_1_percent_of_its_limit_is_not_stuck(above_kw, stuck):
    # heliaudit's documented choice, README Flags: power flat within 1 % of the rating of
    # its power limit is not "stuck". Three clear days of a 150-kWp array held at an export
    # limit of 95 kW (found by the job); on the second day power sits at 95 kW + `above_kw`
    # from 08:00 to 09:00 while the clear sky rises (530 -> 690 W/m²)
    from heliaudit.jobs_flags import inverter_flags

    idx, hour, elev, cs = _geometry(n_days=3)
    p = np.minimum(cs / 1000.0 * 150.0 * 0.96, 95.0)
    run = (idx.day == 4) & (hour >= 8) & (hour < 9)
    p = np.where(run, 95.0 + above_kw, p)
    fr = pd.DataFrame({"p_ac_kw": p, "poa_wm2": cs, "t_module_c": 25.0, "t_amb_c": 25.0,
                       "wind_ms": 1.0, "interval_h": 0.25}, index=idx)
    sun = pd.DataFrame({"elev": elev, "aoi": 30.0, "poa_cs": cs}, index=idx)
    inv = dict(_inv(), p_dc_kwp=150.0)
    out = pd.concat([f for f in inverter_flags(inv, fr, sun, std_offset_s=0, site_zone="UTC")
                     if len(f)])
    lim = out[out["kind"] == "power_limit"]
    assert len(lim) == 1 and lim.iloc[0]["details"]["level_kw"] == pytest.approx(95.0)
    assert (out["kind"] == "sensor_flatline").any() == stuck


def _power_range_kinds(rows: slice, p_kw: float) -> list[str]:
    """Flag kinds of the job's inverter checks on a clear day of the P_MAX inverter near its
    expected power, with the readings ``rows`` set to ``p_kw``."""
    from heliaudit.jobs_flags import inverter_flags

    p = CS / 1000.0 * 100.0
    p[rows] = p_kw
    fr = pd.DataFrame({"p_ac_kw": p, "poa_wm2": CS, "t_module_c": 35.0, "t_amb_c": 25.0,
                       "wind_ms": 1.0, "interval_h": 0.25}, index=IDX)
    sun = pd.DataFrame({"elev": ELEV, "aoi": 30.0, "poa_cs": CS}, index=IDX)
    out = inverter_flags(_inv(), fr, sun, std_offset_s=0, site_zone="UTC")
    return [k for f in out if len(f) for k in f["kind"]]


@pytest.mark.parametrize("p_kw,flagged", [(104.99, False), (105.0, False), (105.01, True)])
def test_inverter_power_range_105_percent(p_kw, flagged):
    # common practice, README Filters: P_ac plausible within −2…105 % of the rating; the
    # job's inverter checks flag five readings above it (a warning)
    assert ("sensor_range" in _power_range_kinds(slice(44, 49), p_kw)) == flagged


@pytest.mark.parametrize("p_kw,flagged", [(-1.99, False), (-2.0, False), (-2.01, True)])
def test_inverter_power_range_minus_2_percent(p_kw, flagged):
    # common practice, README Filters: below −2 % of the rating (night consumption of a
    # few per mille is plausible); five readings at night
    assert ("sensor_range" in _power_range_kinds(slice(4, 9), p_kw)) == flagged


@pytest.mark.parametrize("k,found", [(19, False), (20, True), (21, True)])
def test_own_history_needs_20_valid_days(k, found):
    # heliaudit's documented choice (docs/flags.md, `min_history_days`): the own-history
    # reference needs at least 20 valid days. Two inverters (own basis); 'a' at 0.95 on its
    # first k days, then no valid day until day 60, then 20 days at 0.8075 = 0.85 x 0.95
    # (above the 0.80 expected-power rule, below 0.90 x its history). Every low day's
    # reference window (days d − 120 … d − 31) holds exactly the k history days.
    n = 80
    a = np.full(n, 0.95)
    a[60:] = 0.95 * 0.85
    d = _daily({"a": a, "b": np.full(n, 0.95)}, n)
    is_a = d["device_id"] == "a"
    gap = is_a & (d["day"] >= pd.Timestamp("2024-01-01") + pd.Timedelta(days=k)) & (
        d["day"] < pd.Timestamp("2024-03-01"))
    d.loc[gap, "day_valid"] = False
    fl = underperformance_flags(d)
    assert (list(fl["device_id"]) == ["a"]) == found
    if found:
        f = fl.iloc[0]
        assert f["details"]["basis"] == "own_expected_and_history"
        assert f["details"]["first_day"] == "2024-03-01"  # day 60
        # exact lost energy: 20 days x 100 kWh x (1 − 0.85) = 300 kWh (hand calculation)
        assert f["lost_kwh"] == pytest.approx(300.0, rel=1e-9)


@pytest.mark.parametrize("b_kw_per_kwp,found", [(0.0999, False), (0.1, True), (0.1001, True)])
def test_input_mismatch_counts_intervals_from_01_kw_per_kwp(b_kw_per_kwp, found):
    # heliaudit's documented choice (docs/flags.md; 10 % of STC keeps dawn, dusk and
    # stand-still out): an interval counts only when every input delivers >= 0.1 kW/kWp.
    # B at 90 % of A and C all day, constant; below 0.1 no interval counts at all
    idx = pd.date_range("2024-06-01", periods=96 * 10, freq="15min", tz="UTC")
    df = pd.DataFrame({"A": b_kw_per_kwp / 0.9 * 10, "B": b_kw_per_kwp * 10,
                       "C": b_kw_per_kwp / 0.9 * 10}, index=idx)
    fl = input_mismatch_flags(df, {"A": 10.0, "B": 10.0, "C": 10.0}, device_id="inv1")
    assert (len(fl) == 1) == found


@pytest.mark.parametrize("n_iv,found", [(15, False), (16, True), (17, True)])
def test_input_mismatch_days_from_05_kwh_per_kwp(n_iv, found):
    # heliaudit's documented choice (docs/flags.md): a day counts when its siblings'
    # median yield is >= 0.5 kWh/kWp. Siblings at 0.125 kW/kWp on n_iv intervals a day
    # (16 x 0.125 x 0.25 h = 0.5 kWh/kWp exactly), B at 90 % of them
    idx = pd.date_range("2024-06-01", periods=96 * 10, freq="15min", tz="UTC")
    on = (np.arange(idx.size) % 96 >= 40) & (np.arange(idx.size) % 96 < 40 + n_iv)
    p = np.where(on, 1.25, 0.0)
    df = pd.DataFrame({"A": p, "B": 0.9 * p, "C": p}, index=idx)
    fl = input_mismatch_flags(df, {"A": 10.0, "B": 10.0, "C": 10.0}, device_id="inv1")
    assert (len(fl) == 1) == found


def _low_vs_yield(h, yf, cov):
    from heliaudit.jobs_flags import _low_vs_yield as rule

    days = pd.date_range("2024-06-01", periods=1, freq="D")
    return bool(rule(pd.Series(h, index=days), pd.Series(yf, index=days),
                     coverage=pd.Series(cov, index=days)).iloc[0])


@pytest.mark.parametrize("h,low", [(0.99, True), (1.0, False), (1.01, False)])
def test_low_vs_yield_factor_025(h, low):
    # IEC 61724-1 (Y_f <= Y_r for any PR <= 1); heliaudit's documented choice, README Flags:
    # a daily insolation below 0.25 x the arrays' final yield (Y_f = 4 h: 1.0 kWh/m²)
    assert _low_vs_yield(h, 4.0, 1.0) == low


@pytest.mark.parametrize("yf,low", [(0.99, False), (1.0, True), (1.01, True)])
def test_low_vs_yield_needs_arrays_producing_1_hour(yf, low):
    # heliaudit's documented choice, docs/flags.md: judged when the arrays produced Y_f >= 1 h
    # (H = 0.1 kWh/m² is below 0.25 x Y_f in all three cases)
    assert _low_vs_yield(0.1, yf, 1.0) == low


@pytest.mark.parametrize("cov,low", [(0.79, False), (0.8, True), (0.81, True)])
def test_low_vs_yield_needs_80_percent_coverage(cov, low):
    # heliaudit's documented choice, docs/flags.md (the daily table's minimum coverage of a
    # valid day): judged on days whose readings cover >= 80 % of the clear-sky insolation
    assert _low_vs_yield(0.1, 4.0, cov) == low
