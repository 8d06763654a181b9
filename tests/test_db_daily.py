"""Store round trips: db.timeseries frames and the db.daily table (real SQLite file in tmp_path,
the project's convention). Expected values are the rows inserted, compared back exactly."""

import datetime as dt

import numpy as np
import pandas as pd
import pytest

from analytics.daily import DAILY_COLUMNS
from db.daily import daily_table, write_daily
from db.timeseries import bin_mean, interval_h_from_ts, inverter_frame, site_frame
from tests.helpers_store import add_inverter, add_readings, add_sensor, add_site, make_store

T0 = int(pd.Timestamp("2024-06-01 10:00", tz="UTC").timestamp())


@pytest.fixture
def store(tmp_path):
    eng = make_store(tmp_path)
    with eng.begin() as c:
        add_site(c, "s1")
        poa = add_sensor(c, "s1", "poa1", "poa_wm2", "reference_cell")
        tmod = add_sensor(c, "s1", "tmod1", "t_module_c")
        amb = add_sensor(c, "s1", "amb1", "t_amb_c")
        inv = add_inverter(c, "s1", "inv1", poa_sensor_id="poa1", t_module_sensor_id="tmod1",
                           t_amb_sensor_id="amb1", quantities=("p_ac_kw", "e_ac_kwh"))
        inv2 = add_inverter(c, "s1", "inv2", poa_sensor_id="poa1", t_module_sensor_id="tmod1")
        ts15 = T0 + 900 * np.arange(4)
        add_readings(c, inv["p_ac_kw"], ts15, [10.0, 20.0, np.nan, 40.0])
        add_readings(c, inv["e_ac_kwh"], ts15[2:3], [7.5])  # only the third interval
        add_readings(c, inv2["p_ac_kw"], ts15, [1.0, 2.0, 3.0, 4.0])
        # POA every 5 min: three readings per 15-min interval
        add_readings(c, poa, T0 + 300 * np.arange(12), np.arange(12) * 100.0)
        add_readings(c, tmod, ts15, [30.0, 31.0, 32.0, 33.0])
        add_readings(c, amb, ts15[:1], [20.0])
    return eng


def test_interval_h_and_bin_mean():
    # spacing 900 s = 0.25 h; a 1-h gap does not lengthen the intervals beside it
    assert interval_h_from_ts(np.array([0, 900, 4500, 5400])).tolist() == [0.25] * 4
    # 300 s samples averaged into 900 s intervals: mean(0,1,2)=1, mean(3,4,5)=4
    out = bin_mean(np.array([0, 900]), np.array([900.0, 900.0]), np.arange(6) * 300,
                   np.arange(6.0))
    assert out.tolist() == [1.0, 4.0]


def test_fill_gaps():
    from db.timeseries import fill_gaps

    # a 45-min hole after 900 s: rows 1800, 2700 added; window [0, 4500) adds 0 before
    ts, iv = fill_gaps(np.array([900, 3600]), np.array([900.0, 900.0]), 0, 4500)
    assert ts.tolist() == [0, 900, 1800, 2700, 3600] and iv.tolist() == [900.0] * 5
    # no window: only the inside of the gap; a complete series is returned as is
    assert fill_gaps(np.array([0, 1800]), np.array([900.0, 900.0]))[0].tolist() == [0, 900, 1800]
    same = np.array([0, 300, 600])
    assert fill_gaps(same, np.array([300.0] * 3))[0].tolist() == [0, 300, 600]


def test_inverter_frame_joins_sensors(store):
    fr = inverter_frame(store, "s1", "inv1")
    assert fr.index.name == "ts_utc" and str(fr.index.tz) == "UTC"
    assert fr.index[0] == pd.Timestamp("2024-06-01 10:00", tz="UTC")
    np.testing.assert_array_equal(fr["p_ac_kw"].to_numpy(), [10.0, 20.0, np.nan, 40.0])
    assert fr["e_ac_kwh"].iloc[2] == 7.5 and np.isnan(fr["e_ac_kwh"].iloc[0])
    # POA (0,100,200) -> 100; (300,400,500) -> 400; ...
    assert fr["poa_wm2"].tolist() == [100.0, 400.0, 700.0, 1000.0]
    assert fr["t_module_c"].tolist() == [30.0, 31.0, 32.0, 33.0]
    assert fr["t_amb_c"].iloc[0] == 20.0 and fr["t_amb_c"].isna().sum() == 3
    assert fr["wind_ms"].isna().all() and (fr["interval_h"] == 0.25).all()
    # window: start inclusive, end exclusive
    part = inverter_frame(store, "s1", "inv1", T0 + 900, T0 + 2700)
    assert len(part) == 2 and part["p_ac_kw"].iloc[0] == 20.0
    # intervals of the window without any row appear as NaN rows (here 30 min before T0)
    wide = inverter_frame(store, "s1", "inv1", T0 - 1800, T0 + 3600)
    assert len(wide) == 6 and wide["p_ac_kw"].iloc[:2].isna().all()
    assert wide["poa_wm2"].iloc[:2].isna().all() and wide["p_ac_kw"].iloc[2] == 10.0
    with pytest.raises(KeyError, match="no inverter 'nope'"):
        inverter_frame(store, "s1", "nope")


def test_site_frame(store):
    sf = site_frame(store, "s1")
    assert sf.columns.names == ["device_id", "quantity"]
    assert sf[("inv2", "p_ac_kw")].dropna().tolist() == [1.0, 2.0, 3.0, 4.0]
    assert len(sf) == 12  # union of 5-min POA and 15-min timestamps
    assert sf[("poa1", "interval_h")].dropna().round(6).unique().tolist() == [round(300 / 3600, 6)]
    assert sf[("inv1", "interval_h")].dropna().unique().tolist() == [0.25]


def _rows(device, days, pr):
    df = pd.DataFrame({c: np.nan for c in DAILY_COLUMNS}, index=range(len(days)))
    df["day"] = days
    df["device_id"] = device
    df[["n_intervals", "n_daylight", "n_valid"]] = [96, 50, 40]
    df["pr"] = pr
    df["e_ac_kwh"] = 400.0
    df["day_valid"] = True
    df["details_json"] = '{"excluded": {}}'
    return df


def test_write_read_replace(store):
    d = [dt.date(2024, 6, 1), dt.date(2024, 6, 2), dt.date(2024, 6, 3)]
    n = write_daily(store, "s1", pd.concat([_rows("inv1", d, [0.8, 0.81, 0.82]),
                                            _rows("inv2", d, [0.7, 0.71, 0.72])]),
                    first_day=d[0], last_day=d[-1])
    assert n == 6
    t = daily_table(store, "s1")
    assert len(t) == 6 and t["day"].tolist()[:3] == d
    assert t.loc[t.device_id == "inv1", "pr"].tolist() == [0.8, 0.81, 0.82]
    assert t["day_valid"].dtype == bool and t["n_valid"].dtype == np.int64
    assert np.isnan(t["pi"]).all()
    # recompute day 2 only for inv1: replaced, others untouched; day 3 of inv1 deleted (no row)
    write_daily(store, "s1", _rows("inv1", d[1:2], [0.9]), first_day=d[1], last_day=d[2])
    t = daily_table(store, "s1", device_ids=["inv1"])
    assert t["day"].tolist() == d[:2] and t["pr"].tolist() == [0.8, 0.9]
    assert len(daily_table(store, "s1", device_ids=["inv2"], start=d[1], end=d[1])) == 1
    with pytest.raises(ValueError, match="outside"):
        write_daily(store, "s1", _rows("inv1", d, [0.8] * 3), first_day=d[1], last_day=d[1])
    with pytest.raises(KeyError, match="no device 'zz'"):
        write_daily(store, "s1", _rows("zz", d[:1], [0.8]), first_day=d[0], last_day=d[0])


def test_prefetched_frames_equal_serial(store):
    # the reader thread gives the same frames as a plain read
    from db.timeseries import inverter_frames

    serial = {inv["device_id"]: fr for inv, fr in inverter_frames(store, "s1")}
    fetched = {inv["device_id"]: fr for inv, fr in inverter_frames(store, "s1", prefetch=True)}
    assert list(fetched) == ["inv1", "inv2"]
    for k, fr in serial.items():
        pd.testing.assert_frame_equal(fetched[k], fr)
