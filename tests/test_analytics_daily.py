"""Daily performance rows (analytics.daily) on hand-worked interval frames.

Expected values are hand calculations from the IEC 61724-1 definitions (PR = Σ E / Σ P0 G τ/1000)
and the PVWatts model, whose AC value is taken from pvlib.inverter.pvwatts (the oracle).
"""

import datetime as dt
import json
import types

import numpy as np
import pandas as pd
import pvlib
import pytest

from analytics.daily import DAILY_COLUMNS, daily_performance, local_standard_day_number
from db import schema

INV = types.SimpleNamespace(p_dc_kwp=100.0, p_ac_max_kw=200.0, gamma_pmp_per_c=-0.004,
                            eta_inv_nom=0.96, mounting="insulated_back_glass_polymer")  # ΔT = 0
# pvlib.inverter.pvwatts(100 kW DC, pdc0 = 200/0.96, 0.96): expected AC at G = 1000, T_cell = 25
P_EXP_STC = float(pvlib.inverter.pvwatts(100.0, 200.0 / 0.96, eta_inv_nom=0.96))


def frame(hours, g, t, p, interval_h=1.0, day="2024-06-01", e=None):
    idx = pd.DatetimeIndex([pd.Timestamp(day, tz="UTC") + pd.Timedelta(hours=h) for h in hours],
                           name="ts_utc")
    d = {"p_ac_kw": p, "poa_wm2": g, "t_module_c": t, "interval_h": interval_h}
    if e is not None:
        d["e_ac_kwh"] = e
    return pd.DataFrame(d, index=idx)


def test_columns_are_the_table_contract():
    table = [c.name for c in schema.daily_inverter.columns
             if c.name not in ("device_pk", "computation_id")]
    assert set(DAILY_COLUMNS) == set(table)


def test_hand_worked_day():
    # 4 one-hour intervals, G = [990, 1000, 1010, 1000] W/m², 25 °C cell, P = [79, 80, 81, 80] kW
    # (varied so that no flat-line check fires): E = 320 kWh, E_ref = 100 * 4000/1000 = 400 kWh
    # -> PR = 0.8; C_k = 1 -> PR_STC = 0.8; PI = 320 / Σ P_exp(G_k); T_cell,wavg = 25 °C
    g = [990.0, 1000.0, 1010.0, 1000.0]
    fr = frame([10, 11, 12, 13], g, [25.0] * 4, [79.0, 80.0, 81.0, 80.0])
    r = daily_performance(fr, INV, solar_elevation_deg=np.full(4, 50.0)).iloc[0]
    assert r["day"] == dt.date(2024, 6, 1)
    assert (r["n_intervals"], r["n_daylight"], r["n_valid"]) == (4, 4, 4)
    assert r["e_ac_kwh"] == pytest.approx(320.0) and r["e_ref_kwh"] == pytest.approx(400.0)
    assert r["h_poa_kwhm2"] == pytest.approx(4.0)
    assert r["pr"] == pytest.approx(0.8) and r["pr_stc"] == pytest.approx(0.8)
    p_exp = pvlib.inverter.pvwatts(np.array(g) / 10.0, 200.0 / 0.96, eta_inv_nom=0.96)  # DC = G/10 kW
    assert r["pi"] == pytest.approx(320.0 / p_exp.sum())
    assert P_EXP_STC == pytest.approx(p_exp[1])
    assert r["t_cell_wavg_c"] == pytest.approx(25.0)
    assert r["coverage"] == pytest.approx(1.0) and bool(r["day_valid"])
    assert r["avail_time"] == 1.0 and r["t_clipped_h"] == 0.0 and r["e_lost_kwh"] == 0.0


def test_temperature_correction_and_mounting_delta_t():
    # open-rack glass/polymer ΔT = 3 °C (King et al. 2004): T_mod = 52 at 1000 W/m² -> T_cell = 55
    # C = 1 - 0.004 * 30 = 0.88 -> E_ref,STC = 88 kWh; E = 80 -> PR_STC = 80/88 = 0.90909
    inv = types.SimpleNamespace(**{**vars(INV), "mounting": "open_rack_glass_polymer"})
    r = daily_performance(frame([12], [1000.0], [52.0], [80.0]), inv,
                          solar_elevation_deg=[60.0]).iloc[0]
    assert r["t_cell_wavg_c"] == pytest.approx(55.0)
    assert r["e_ref_stc_kwh"] == pytest.approx(88.0)
    assert r["pr_stc"] == pytest.approx(80.0 / 88.0)
    assert r["e_ref_tcell_kwhc"] == pytest.approx(100.0 * 55.0)


def test_missing_poa_leaves_pr_numerator_and_denominator_together():
    # 3 intervals with POA 1000 and 80 kW; a 4th with 80 kW but no POA reading:
    # e_ac_kwh = 320 (all energy), but PR = 240 / 300 = 0.8 (not 320 / 300)
    fr = frame([10, 11, 12, 13], [1000.0, 1000.0, 1000.0, np.nan], [25.0] * 4, [80.0] * 4)
    r = daily_performance(fr, INV, solar_elevation_deg=np.full(4, 50.0)).iloc[0]
    assert r["e_ac_kwh"] == pytest.approx(320.0) and r["e_ac_pr_kwh"] == pytest.approx(240.0)
    assert r["pr"] == pytest.approx(0.8)
    assert json.loads(r["details_json"])["excluded"] == {"missing": 1}
    # coverage: the missing interval has no measured weight; with clear-sky POA 1000 it counts
    r2 = daily_performance(fr, INV, solar_elevation_deg=np.full(4, 50.0),
                           poa_clearsky_wm2=np.full(4, 1000.0)).iloc[0]
    assert r2["coverage"] == pytest.approx(0.75)  # 3000 / 4000
    assert not bool(r2["day_valid"])  # < 0.8 (common practice)


def test_energy_column_preferred_and_local_standard_day():
    # e_ac_kwh given (15-min energy 20 kWh = 80 kW mean) and no p_ac_kw
    fr = frame([11.0, 11.25], [1000.0, 1000.0], [25.0, 25.0], [np.nan, np.nan], 0.25,
               e=[20.0, 20.0])
    r = daily_performance(fr, INV, solar_elevation_deg=[50.0, 50.0]).iloc[0]
    assert r["e_ac_kwh"] == pytest.approx(40.0) and r["pr"] == pytest.approx(0.8)  # 40 / 50
    # 23:30 UTC at UTC+1 is 00:30 the next local standard day
    assert local_standard_day_number([pd.Timestamp("2024-06-01 23:30", tz="UTC").value // 10**9],
                                     1.0)[0] == (dt.date(2024, 6, 2) - dt.date(1970, 1, 1)).days
    fr2 = frame([22.5, 23.5], [0.0, 0.0], [10.0, 10.0], [0.0, 0.0])
    days = daily_performance(fr2, INV, utc_offset_h=1.0, solar_elevation_deg=[-20.0, -20.0])["day"]
    assert days.tolist() == [dt.date(2024, 6, 1), dt.date(2024, 6, 2)]


def test_clipping_outage_availability():
    # P_ac,max = 90 kW: 89 kW >= 0.98 * 90 = 88.2 -> clipped (1 h); 0 kW at 600 W/m² -> outage
    inv = types.SimpleNamespace(**{**vars(INV), "p_ac_max_kw": 90.0})
    fr = frame([10, 11, 12, 13], [1000.0, 600.0, 800.0, 800.0], [25.0] * 4, [89.0, 0.0, 60.0, 60.0])
    r = daily_performance(fr, inv, solar_elevation_deg=np.full(4, 50.0)).iloc[0]
    assert r["t_clipped_h"] == pytest.approx(1.0)
    assert r["t_unavailable_h"] == pytest.approx(1.0) and r["avail_time"] == pytest.approx(0.75)
    p_exp_600 = float(pvlib.inverter.pvwatts(60.0, 90.0 / 0.96, eta_inv_nom=0.96))  # DC 60 kW
    assert r["e_lost_kwh"] == pytest.approx(p_exp_600)
    # A_E = E_base / (E_base + E_lost), E_base = 89 + 0 + 60 + 60 = 209 kWh
    assert r["avail_energy"] == pytest.approx(209.0 / (209.0 + p_exp_600))
    ex = json.loads(r["details_json"])["excluded"]
    assert ex == {"clipped": 1, "outage": 1} and r["n_valid"] == 2
    # clipping and outage are plant states, not data problems: the day keeps full coverage
    assert r["coverage"] == pytest.approx(1.0) and bool(r["day_valid"])


def test_ambient_fallback_and_empty_and_errors():
    # no module temperature, ambient only: Faiman (2008) at 1 m/s: 25 + 1000/31.84 = 56.407 °C
    fr = frame([12], [1000.0], [np.nan], [80.0])
    fr["t_amb_c"] = 25.0
    r = daily_performance(fr, INV, solar_elevation_deg=[60.0]).iloc[0]
    assert r["t_cell_wavg_c"] == pytest.approx(56.407, abs=1e-3)
    assert json.loads(r["details_json"])["t_cell_modelled_from_ambient"] == 1
    empty = daily_performance(frame([], [], [], []), INV)
    assert list(empty.columns) == list(DAILY_COLUMNS) and len(empty) == 0
    bad = frame([12], [1000.0], [25.0], [80.0], interval_h=0.0)
    with pytest.raises(ValueError, match="interval_h"):
        daily_performance(bad, INV)
    with pytest.raises(ValueError, match="unknown mounting"):
        daily_performance(frame([12], [1000.0], [25.0], [80.0]),
                          types.SimpleNamespace(**{**vars(INV), "mounting": "roof"}))


def test_many_equals_one_by_one():
    # the vectorised multi-inverter pass must give exactly the per-inverter rows
    from analytics.daily import daily_performance_many

    rng = np.random.default_rng(3)
    hours = np.arange(0, 48, 0.25)
    g = np.clip(900 * np.sin((hours % 24 - 6) / 12 * np.pi), 0, None) * rng.uniform(0.8, 1, hours.size)
    t = 20 + 0.03 * g + rng.normal(0, 0.2, hours.size)
    invs = [INV, types.SimpleNamespace(p_dc_kwp=80.0, p_ac_max_kw=60.0, gamma_pmp_per_c=-0.003,
                                       eta_inv_nom=0.98, mounting="open_rack_glass_glass")]
    frames = [frame(hours, g, t, 0.07 * g, 0.25), frame(hours, g, t, 0.065 * g, 0.25)]
    frames[1].iloc[20:30, 0] = np.nan  # a power gap on the second inverter
    elev = np.where(g > 0, 20.0, -20.0)
    many = daily_performance_many(frames, invs, utc_offset_h=1.0, solar_elevation_deg=[elev, elev])
    for i in range(2):
        one = daily_performance(frames[i], invs[i], utc_offset_h=1.0, solar_elevation_deg=elev)
        got = many[many.inverter_no == i].drop(columns="inverter_no").reset_index(drop=True)
        pd.testing.assert_frame_equal(got, one)
    with pytest.raises(ValueError, match="2 frames but 1 inverters"):
        daily_performance_many(frames, invs[:1])


def test_overcast_day_with_few_valid_intervals_is_not_valid():
    # complete data (coverage 1) but 3 of 4 intervals below 200 W/m²: valid insolation share
    # = 650 / (150+152+149+650) = 0.590 -> valid at min_valid_fraction 0.5, not at 0.6
    fr = frame([10, 11, 12, 13], [150.0, 152.0, 149.0, 650.0], [20.0, 20.5, 21.0, 22.0],
               [12.0, 12.5, 11.8, 50.0])
    r = daily_performance(fr, INV, solar_elevation_deg=np.full(4, 40.0)).iloc[0]
    assert r["coverage"] == pytest.approx(1.0) and r["n_valid"] == 1
    assert json.loads(r["details_json"])["valid_insolation_fraction"] == pytest.approx(
        650 / 1101, abs=1e-4)
    assert bool(r["day_valid"])
    r = daily_performance(fr, INV, solar_elevation_deg=np.full(4, 40.0),
                          filters={"min_valid_fraction": 0.6}).iloc[0]
    assert not bool(r["day_valid"])
