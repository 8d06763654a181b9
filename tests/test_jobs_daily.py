"""The daily job (heliaudit.jobs_daily) and the ``compute`` command, on a small store.

Known answer: sensor data are pvlib's Ineichen clear-sky POA (plus seeded noise) and a module
temperature; each inverter's power is a fixed fraction of the PVWatts expected power computed
with pvlib (pvsystem.pvwatts_dc, temperature.sapm_cell_from_module, inverter.pvwatts), so the
performance index of every valid interval, and therefore of every day, is that fraction.
"""

import datetime as dt
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pvlib
import pytest
import sqlalchemy as sa
from click.testing import CliRunner

from db import readings, schema
from db.daily import daily_table
from heliaudit import jobs_daily
from heliaudit.cli import main
from tests.helpers_store import (
    add_inverter,
    add_readings,
    add_sensor,
    add_site,
    clearsky_poa_15min,
    make_store,
)

LAT, LON, ALT, TILT, AZ = 38.9, -3.2, 650.0, 25.0, 180.0
START = pd.Timestamp("2024-06-10", tz="UTC")
N_DAYS = 3
FRACTION = {"inv1": 0.90, "inv2": 0.80}


def _sensor_data():
    ts, poa = clearsky_poa_15min(START, N_DAYS, LAT, LON, ALT, TILT, AZ)
    rng = np.random.default_rng(42)
    poa = np.where(poa > 0, poa * (1 + 0.01 * rng.standard_normal(poa.size)), 0.0)
    t_mod = 22.0 + 0.03 * poa + 0.1 * rng.standard_normal(poa.size)
    return ts, poa, t_mod


def _expected_ac(poa, t_mod, p_dc=100.0, p_ac=95.0, gamma=-0.004, eta=0.96, delta_t=3.0):
    t_cell = pvlib.temperature.sapm_cell_from_module(t_mod, poa, delta_t)
    pdc = pvlib.pvsystem.pvwatts_dc(poa, t_cell, p_dc, gamma)
    return pvlib.inverter.pvwatts(pdc, p_ac / eta, eta_inv_nom=eta)


@pytest.fixture
def engine(tmp_path):
    eng = make_store(tmp_path)
    _fill_site(eng)
    return eng


def _fill_site(eng) -> None:
    """Site s1: the sensors of ``_sensor_data`` and each inverter of FRACTION at its share of
    the expected AC power."""
    ts, poa, t_mod = _sensor_data()
    ts_s = ts.as_unit("s").asi8
    p_exp = _expected_ac(poa, t_mod)
    with eng.begin() as c:
        add_site(c, "s1", timezone="Europe/Madrid", latitude_deg=LAT, longitude_deg=LON,
                 altitude_m=ALT, tilt_deg=TILT, azimuth_deg=AZ,
                 config_toml="[filters]\nmin_coverage = 0.7\n")
        add_readings(c, add_sensor(c, "s1", "poa1", "poa_wm2", "reference_cell"), ts_s, poa)
        add_readings(c, add_sensor(c, "s1", "tmod1", "t_module_c"), ts_s, t_mod)
        for inv, frac in FRACTION.items():
            ch = add_inverter(c, "s1", inv, poa_sensor_id="poa1", t_module_sensor_id="tmod1",
                              p_dc_kwp=100.0, p_ac_max_kw=95.0, eta_inv_nom=0.96)
            add_readings(c, ch["p_ac_kw"], ts_s, frac * p_exp)


def test_recompute_all_known_answer(engine):
    seen = []
    (summary,) = jobs_daily.recompute_all(engine, "s1", progress=lambda d, t: seen.append((d, t)))
    assert seen[-1] == (2, 2)
    t = daily_table(engine, "s1")
    # local standard days (UTC+1): 3 UTC days of data touch 4 local days (the last hour spills)
    assert sorted(set(t["day"])) == [dt.date(2024, 6, 10) + dt.timedelta(days=k) for k in range(4)]
    full = t[t["day"].between(dt.date(2024, 6, 10), dt.date(2024, 6, 12))]
    for inv, frac in FRACTION.items():
        rows = full[full.device_id == inv]
        np.testing.assert_allclose(rows["pi"], frac, rtol=1e-9)  # P = frac * pvlib PVWatts
        assert rows["day_valid"].all() and (rows["avail_time"] == 1.0).all()
        assert rows["pr"].between(0.6, 0.9).all()  # PR < PI: PR also carries the temperature loss
        assert (rows["pr_stc"] > rows["pr"]).all()  # hot June modules: correcting to 25 °C raises PR
    comp = pd.read_sql(sa.select(schema.computation), engine)
    assert comp["kind"].tolist() == ["daily"] and comp["scope"].iloc[0] == "full"
    params = json.loads(comp["params_json"].iloc[0])
    assert params["filters"]["min_coverage"] == 0.7  # the site's [filters] override
    assert (t["computation_id"] == summary["computation_id"]).all()


def test_recompute_range_touches_only_its_days(engine):
    jobs_daily.recompute_all(engine, "s1")
    before = daily_table(engine, "s1")
    # change inv1's power on the second UTC day, then recompute that day's span only
    d1 = START + pd.Timedelta(days=1)
    ts_s = pd.date_range(d1, periods=96, freq="15min").as_unit("s").asi8
    with engine.begin() as c:
        ch = c.execute(sa.text("SELECT channel_id FROM channel JOIN device USING (device_pk) "
                               "WHERE device_id = 'inv1' AND quantity = 'p_ac_kw'")).scalar()
        got = readings.read_rows(c, ch, int(ts_s[0]), int(ts_s[-1]) + 1)  # halve that day
        readings.write_readings(c, np.full(got["ts_s"].size, ch), got["ts_s"], got["value"] * 0.5,
                                0, interval_s=got["interval_s"])
    s = jobs_daily.recompute_range(engine, "s1", int(ts_s[0]), int(ts_s[-1]))
    # 2024-06-11 00:00 UTC is 01:00 local standard time -> local days 06-11 and 06-12
    assert (s["first_day"], s["last_day"]) == (dt.date(2024, 6, 11), dt.date(2024, 6, 12))
    after = daily_table(engine, "s1")
    assert len(after) == len(before)
    old = before.set_index(["device_id", "day"])
    new = after.set_index(["device_id", "day"])
    assert new.loc[("inv1", dt.date(2024, 6, 10)), "computation_id"] == old.loc[
        ("inv1", dt.date(2024, 6, 10)), "computation_id"]
    assert new.loc[("inv1", dt.date(2024, 6, 11)), "computation_id"] == s["computation_id"]
    assert new.loc[("inv2", dt.date(2024, 6, 11)), "pi"] == pytest.approx(0.8, rel=1e-9)
    # day 06-11 local = 23 h of halved power + 1 h (00:00-01:00 local) untouched, at night
    assert new.loc[("inv1", dt.date(2024, 6, 11)), "pi"] == pytest.approx(0.45, rel=1e-9)


def test_errors(engine):
    with pytest.raises(jobs_daily.SiteNotFoundError, match="no site 'zz'"):
        jobs_daily.recompute_all(engine, "zz")
    with pytest.raises(ValueError, match="before start_s"):
        jobs_daily.recompute_range(engine, "s1", 10, 5)
    with engine.begin() as c:
        c.execute(schema.site.update().values(config_toml="[filters]\nclip_fraktion = 0.9\n"))
    with pytest.raises(ValueError, match=r"filters\.clip_fraktion: unknown"):
        jobs_daily.recompute_all(engine, "s1")


def test_compute_command(engine, tmp_path):
    url = str(engine.url)
    res = CliRunner().invoke(main, ["--db", url, "compute", "--site", "s1", "--full"])
    assert res.exit_code == 0, res.output
    assert len(daily_table(engine, "s1")) == 8
    res = CliRunner().invoke(main, ["--db", url, "compute", "--site", "nope"])
    assert res.exit_code == 1 and "Error: no site 'nope' in the database; known: s1" in res.output
    # never computed before -> without --full everything is computed too; then up to date
    res = CliRunner().invoke(main, ["--db", url, "compute"])
    assert res.exit_code == 0 and "up to date" in res.output


DEMO = Path(__file__).resolve().parents[1] / "sample_scada" / "quillpond"


@pytest.mark.slow
def test_demo_site_end_to_end(tmp_path):
    """Two months of the invented demo site through ingest and the daily job; the performance
    index of healthy inverters must match what the generator's truth file implies.

    Implied PI of a day (truth.json "models" and per-inverter factors, generator's chain):
    DC loss factor 0.965 x p_dc_actual_factor x soiling ratio SR_i = 1 - m_i (1 - SR_base)
    x degradation (1 + rd/100 x years since commissioning). Inverters on the reference cell
    (POA-RC1) see the same angle-of-incidence loss as their modules, so PI = implied (within
    noise and model error); those on the pyranometer (POA-PY2) lose the IAM in PI, a few per
    cent (Dunn, Gostein, Emery 2012, NREL/CP-5200-55487)."""
    truth_path = DEMO / "truth.json"
    files = [DEMO / "exports" / f"quillpond_2022-0{m}.csv.gz" for m in (5, 6)]
    if not truth_path.exists() or not all(f.exists() for f in files):
        pytest.skip("demo site not generated (sample_scada/quillpond missing)")
    load = pytest.importorskip("ingest.load", reason="ingest loader not available yet")
    from ingest.config import load_site_config

    truth = json.loads(truth_path.read_text())
    cfg = load_site_config(DEMO / "quillpond.toml")
    engine = make_store(tmp_path)
    results = load.ingest_paths(engine, cfg, files)
    assert all(r.status == "loaded" for r in results), [r.message for r in results]
    (summary,) = jobs_daily.recompute_all(engine, cfg.id)
    t = daily_table(engine, cfg.id)
    days = [dt.date(2022, 5, 1) + dt.timedelta(days=k) for k in range(61)]
    inv_ids = [i.id for i in cfg.inverters]
    # complete: every inverter has a row for every local standard day of the two months
    for inv in inv_ids:
        assert set(days) <= set(t.loc[t.device_id == inv, "day"])
    # the logger gap of 2022-06-14 10:00-16:30 (truth "logger_gaps") makes that day invalid
    gap = t[t["day"] == dt.date(2022, 6, 14)]
    assert len(gap) == len(inv_ids) and not gap["day_valid"].any()

    sr0 = dt.date.fromisoformat(truth["soiling"]["sr_base_start"])
    sr_base = np.array(truth["soiling"]["sr_base_daily"])
    m = truth["soiling"]["multiplier_per_inverter"]
    spec = {i["id"]: i for i in truth["inverters"]}
    ratios = {"POA-RC1": [], "POA-PY2": []}
    for inv in inv_ids:
        s = spec[inv]
        rows = t[(t.device_id == inv) & t["day_valid"] & t["day"].isin(days)]
        k = np.array([(d - sr0).days for d in rows["day"]])
        years = np.array([(d - dt.date.fromisoformat(s["commissioned"])).days / 365.25
                          for d in rows["day"]])
        implied = (0.965 * s["p_dc_actual_factor"] * (1 - m[inv] * (1 - sr_base[k]))
                   * (1 + s["rd_pct_per_yr"] / 100 * years))
        ratios[s["poa_sensor"]].append(rows["pi"].to_numpy() / implied)
    rc, py = np.concatenate(ratios["POA-RC1"]), np.concatenate(ratios["POA-PY2"])
    assert rc.size > 200 and py.size > 200  # most days valid in May-June
    assert abs(np.median(rc) - 1) < 0.015  # reference cell: PI = implied within 1.5 %
    assert np.quantile(np.abs(rc - 1), 0.9) < 0.03
    assert 0.94 < np.median(py) < 0.995  # pyranometer: IAM loss (a few %) shows in PI
    # IEC 61724-1 definitions: PR_STC / PR = Σ E_ref / Σ C_k E_ref,k = 1 / (1 + γ (T_wavg - 25 °C)),
    # so the corrected PR is above the plain one exactly on days whose weighted T_cell > 25 °C
    v = t[t["day_valid"] & t["day"].isin(days)].merge(
        pd.DataFrame({"device_id": list(spec), "gamma": [spec[i]["gamma_pmp_per_c"] for i in spec]}))
    np.testing.assert_allclose(v["pr_stc"] / v["pr"],
                               1 / (1 + v["gamma"] * (v["t_cell_wavg_c"] - 25.0)), rtol=1e-9)
    assert (v["t_cell_wavg_c"] > 25).mean() > 0.8  # May-June at 38.9° N: mostly hot modules
    assert summary["rows"] == len(t)


@pytest.mark.postgres
def test_same_daily_table_on_postgres(engine, pg_engine):
    # the same store on PostgreSQL gives the same daily rows as on SQLite (raw-cursor reads,
    # Core writes); the SQLite result is the reference
    _fill_site(pg_engine)
    jobs_daily.recompute_all(engine, "s1")
    jobs_daily.recompute_all(pg_engine, "s1")
    lite, pg = daily_table(engine, "s1"), daily_table(pg_engine, "s1")
    cols = ["device_id", "day", "n_valid", "e_ac_kwh", "e_ref_kwh", "pr", "pr_stc", "pi",
            "coverage", "day_valid", "details_json"]
    pd.testing.assert_frame_equal(lite[cols], pg[cols], check_exact=False, rtol=1e-12)
