"""Clock errors against the sun: centroid of the day's profile vs pvlib solar geometry."""

import tomllib

import numpy as np
import pandas as pd
import pvlib
import pytest

from analytics.clock import clear_day_mask, clock_offsets, clock_shift_flags, daily_centroid_min
from tests.flags_synth import LAT, LON, STD_OFFSET_S, ZONE, inverter_power, site_weather


@pytest.fixture(scope="module")
def year():
    return site_weather(start="2024-01-01", days=366, seed=7)


@pytest.mark.parametrize("tau_min", [1, 15])
def test_clear_sky_centroid_is_pvlib_transit(tau_min):
    # The clock check compares a day's irradiance-weighted centroid with the modelled one; for a
    # south-facing plane the clear-sky centroid is the solar transit. Reference: pvlib 0.16
    # sun_rise_set_transit_spa (Reda & Andreas 2004 SPA) at lat 39.74, lon −105.0, fixed
    # UTC−7: transits 2021-02-11 12:14:12, 2021-06-21 12:01:55, 2021-11-03 11:43:33.
    # heliaudit's daily_centroid_min of its own clear-sky POA (30° south) must land within
    # 0.5 min of them (the equation of time moves noon by < 0.3 min within a day; the flag
    # limit is 10 min, an interval-label error τ/2 is 7.5 min at 15-min data).
    from types import SimpleNamespace

    from analytics import irradiance as ir

    days = ["2021-02-11", "2021-06-21", "2021-11-03"]
    want_min = [12 * 60 + 14 + 12 / 60, 12 * 60 + 1 + 55 / 60, 11 * 60 + 43 + 33 / 60]
    idx = pd.DatetimeIndex([])
    for d in days:  # each local standard day, UTC−7, as interval starts
        idx = idx.append(pd.date_range(pd.Timestamp(d) + pd.Timedelta(hours=7),
                                       periods=24 * 60 // tau_min, freq=f"{tau_min}min",
                                       tz="UTC"))
    geo = ir.sun_geometry(idx, 39.74, -105.0, 1800.0, interval_h=tau_min / 60)
    plane = SimpleNamespace(kind="fixed", tilt_deg=30.0, azimuth_deg=180.0)
    poa = pd.Series(np.asarray(ir.poa_clearsky(plane, geo)), index=idx)
    got = daily_centroid_min(poa, tau_min / 60, std_offset_s=-7 * 3600).dropna()
    assert [str(d.date()) for d in got.index] == days
    np.testing.assert_allclose(got.to_numpy(), want_min, atol=0.5)


def test_centroid_hand_example():
    # Triangle profile 0, 1, 2, 1, 0 on hourly intervals starting 10:00 UTC, τ = 1 h:
    # midpoints 10:30 .. 14:30, weights symmetric about 12:30 -> 750 min.
    idx = pd.date_range("2024-01-01 10:00", periods=5, freq="h", tz="UTC")
    c = daily_centroid_min(pd.Series([0.0, 1, 2, 1, 0], index=idx), 1.0)
    assert c.iloc[0] == pytest.approx(750.0)


def test_clear_sky_centroid_equals_pvlib_transit(year):
    # For a south-facing fixed array the clear-sky POA centroid is the solar transit
    # (symmetry about solar noon); pvlib's SPA transit is the outside reference.
    # Tolerance: 2 min (15-min sampling, refraction and day-length asymmetry).
    c = daily_centroid_min(year["poa_cs"], 0.25, std_offset_s=STD_OFFSET_S)
    days = c.index[::30]
    tr = pvlib.solarposition.sun_rise_set_transit_spa(
        days.tz_localize("Etc/GMT+7") + pd.Timedelta(hours=12), LAT, LON)["transit"]
    tr_min = np.array([(t.tz_convert("Etc/GMT+7") - d.tz_localize("Etc/GMT+7")).total_seconds()
                       / 60 for t, d in zip(tr, days, strict=True)])
    np.testing.assert_allclose(c[days].to_numpy(), tr_min, atol=2.0)


def test_clear_day_detection(year):
    clear = clear_day_mask(year["poa_wm2"], year["poa_cs"], std_offset_s=STD_OFFSET_S,
                           ratio_range=(0.7, 1.3))
    truth = ~year.groupby((year.index.as_unit("s").asi8 // 10**9 + STD_OFFSET_S) // 86400)[
        "cloudy_day"].first().to_numpy()
    # all cloudy days rejected; most clear days kept
    assert not (clear.to_numpy() & ~truth).any()
    assert (clear.to_numpy() & truth).sum() >= 0.9 * truth.sum()


def _shift(x: pd.Series, minutes: int, mask=None) -> pd.Series:
    """Readings stored `minutes` late (the logger clock ahead): value at t is the truth at
    t − minutes."""
    sh = x.shift(minutes // 15)
    return sh.where(mask, x) if mask is not None else sh


def _flags(x, year, **kw):
    off = clock_offsets(x, year["poa_cs"], 0.25, std_offset_s=STD_OFFSET_S,
                        ratio_range=(0.7, 1.3))
    return clock_shift_flags(off, device_id="poa1", std_offset_s=STD_OFFSET_S,
                             site_zone=ZONE, **kw)


def test_dst_error_found_and_snapped_to_dst_dates(year):
    # Injected: +60 min between the 2024 US DST changes (Mar 10 .. Nov 3, local).
    local_day = (year.index + pd.Timedelta(seconds=STD_OFFSET_S)).tz_localize(None).normalize()
    m = (local_day >= "2024-03-10") & (local_day < "2024-11-03")
    fl = _flags(_shift(year["poa_wm2"], 60, m), year, source_name="scada")
    assert len(fl) == 1
    d = fl.iloc[0]["details"]
    assert d["shift_minutes_correction"] == -60 and d["dst_change"]
    # Tolerance: dates exact after snapping to the zone's DST changes (tzdata).
    assert d["first_day"] == "2024-03-10" and d["last_day"] == "2024-11-02"
    snippet = tomllib.loads(d["correction_toml"])["sources"]["clock_corrections"][0]
    assert snippet["shift_minutes"] == -60
    assert str(snippet["start"]) == "2024-03-10" and str(snippet["end"]) == "2024-11-02"
    assert fl.iloc[0]["severity"] == "alarm"


def test_constant_hour_off_and_label_confusion(year):
    # Logger an hour behind for the whole year: readings 60 min early -> correction +60.
    fl = _flags(_shift(year["poa_wm2"], -60), year)
    assert len(fl) == 1 and fl.iloc[0]["details"]["shift_minutes_correction"] == 60
    assert fl.iloc[0]["details"]["first_day"] == "2024-01-01"
    assert fl.iloc[0]["details"]["last_day"] == "2024-12-31"
    # Interval-end labels read as interval-start: data one interval (15 min) late, in
    # power as well (clipped top: the centroid stays symmetric).
    p = inverter_power(year)
    fl = clock_shift_flags(
        clock_offsets(_shift(p, 15), year["poa_cs"], 0.25, std_offset_s=STD_OFFSET_S),
        device_id="inv01", std_offset_s=STD_OFFSET_S)
    assert len(fl) == 1 and fl.iloc[0]["details"]["shift_minutes_correction"] == -15
    assert fl.iloc[0]["severity"] == "warning"


def test_partial_period_shift_dates_within_tolerance(year):
    # +60 min from 2024-05-20 to 2024-06-30 (not a DST date): dates within ±3 days.
    local_day = (year.index + pd.Timedelta(seconds=STD_OFFSET_S)).tz_localize(None).normalize()
    m = (local_day >= "2024-05-20") & (local_day <= "2024-06-30")
    fl = _flags(_shift(year["poa_wm2"], 60, m), year)
    assert len(fl) == 1
    d = fl.iloc[0]["details"]
    assert not d["dst_change"]
    assert abs((pd.Timestamp(d["first_day"]) - pd.Timestamp("2024-05-20")).days) <= 3
    assert abs((pd.Timestamp(d["last_day"]) - pd.Timestamp("2024-06-30")).days) <= 3


def test_clean_control_no_clock_flags(year):
    # Correct clocks on the irradiance and on power: no flag over 366 days.
    assert _flags(year["poa_wm2"], year).empty
    off = clock_offsets(inverter_power(year), year["poa_cs"], 0.25, std_offset_s=STD_OFFSET_S)
    assert clock_shift_flags(off, device_id="inv01").empty
    # measured noon error on clear days stays small (|median Δ| < 3 min)
    assert abs(off.loc[off["clear"], "delta_min"].median()) < 3


def test_fix_during_a_day_ends_the_correction_on_that_day(year):
    # issue #14: a clock fault's end date was one day short. +60 min from 2024-05-20 until
    # the clock is fixed at 10:00 local standard time on 2024-06-30: the readings of that
    # morning are still shifted, so the correction must end on 2024-06-30 (exact).
    local = (year.index + pd.Timedelta(seconds=STD_OFFSET_S)).tz_localize(None)
    m = (local >= "2024-05-20") & (local < "2024-06-30 10:00")
    fl = _flags(_shift(year["poa_wm2"], 60, m), year)
    assert len(fl) == 1
    d = fl.iloc[0]["details"]
    assert d["last_day"] == "2024-06-30"
    assert abs((pd.Timestamp(d["first_day"]) - pd.Timestamp("2024-05-20")).days) <= 1
