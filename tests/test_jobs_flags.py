"""The flags job end to end on a real SQLite store with injected faults."""

import json
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import sqlalchemy as sa

import heliaudit
from db import schema
from db.flags import read_flags
from heliaudit.jobs_daily import recompute_all
from heliaudit.jobs_flags import SiteNotFoundError, run_flags
from tests.flags_synth import ALT, AZ, LAT, LON, TILT, inverter_power, site_weather
from tests.helpers_store import add_inverter, add_readings, add_sensor, add_site, make_store

N_INV = 6
CONFIG = """
[economics]
currency = "EUR"
tariff_per_kwh = 0.10
cleaning_cost = 800.0
"""


def _ts(s):
    return pd.Timestamp(s, tz="UTC").value // 10**9


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    """60 days, 6 inverters on one POA sensor, with injected faults (truth below)."""
    eng = make_store(tmp_path_factory.mktemp("jobs_flags"))
    w = site_weather(start="2024-05-01", days=60, seed=21)
    ts = w.index.as_unit("s").asi8
    g = w["poa_wm2"].copy()
    g["2024-06-05 16:00":"2024-06-06 02:00"] = 505.0  # truth: POA flatline on 2024-06-05
    rng = np.random.default_rng(4)
    with eng.begin() as conn:
        add_site(conn, "s1", timezone="America/Denver", latitude_deg=LAT, longitude_deg=LON,
                 altitude_m=ALT, tilt_deg=TILT, azimuth_deg=AZ, config_toml=CONFIG)
        add_readings(conn, add_sensor(conn, "s1", "poa1", "poa_wm2",
                                      instrument="reference_cell"), ts, g)
        add_readings(conn, add_sensor(conn, "s1", "tmod1", "t_module_c"), ts,
                     w["t_module_c"])
        for i in range(N_INV):
            dev = f"inv{i + 1}"
            # DC/AC 1.0: no clipping, so clear days stay valid in the daily table
            ch = add_inverter(conn, "s1", dev, poa_sensor_id="poa1", t_module_sensor_id="tmod1",
                              p_dc_kwp=100.0, p_ac_max_kw=100.0, gamma_pmp_per_c=-0.0035)
            p = inverter_power(w, p_dc_kwp=100.0, p_ac_max_kw=100.0) * (
                1 + 0.005 * rng.standard_normal(len(w)))
            if dev == "inv2":  # truth: outage 2024-05-20 16:00 .. 2024-05-21 20:00 UTC
                p["2024-05-20 16:00":"2024-05-21 19:45"] = 0.0
            if dev == "inv3":  # truth: 1 of 6 strings lost 2024-05-25 .. 2024-06-14
                p["2024-05-25 07:00":"2024-06-15 07:00"] *= 5 / 6
            add_readings(conn, ch["p_ac_kw"], ts, p.clip(0, 100.0))
    recompute_all(eng, "s1")
    calls = []
    n = run_flags(eng, "s1", progress=lambda d, t: calls.append((d, t)))
    return eng, n, calls


def test_flags_written_and_computation_recorded(store):
    eng, n, calls = store
    fl = read_flags(eng, "s1")
    assert len(fl) == n > 0
    with eng.connect() as conn:
        comp = conn.execute(sa.select(schema.computation).where(
            schema.computation.c.kind == "flags")).mappings().all()
    assert len(comp) == 1 and comp[0]["software_version"] == heliaudit.__version__
    assert comp[0]["finished_utc"] is not None
    params = json.loads(comp[0]["params_json"])
    assert params["underperformance"]["z_threshold"] == -3.0
    assert params["economics"]["cleaning_cost"] == 800.0
    with eng.connect() as conn:
        ids = conn.execute(sa.select(schema.flag.c.computation_id).distinct()).scalars().all()
    assert ids == [comp[0]["computation_id"]]
    assert calls[-1] == (N_INV + 2, N_INV + 2)  # 6 inverters + 2 sensors


def test_injected_outage_found(store):
    eng, _n, _c = store
    out = read_flags(eng, "s1", kind="outage")
    assert list(out["device_id"]) == ["inv2"]
    f = out.iloc[0]
    # Tolerance: within one hour of the injected times (the sun is below 50 W/m² at the
    # edges, so the flagged span starts at the first sunny zero interval).
    assert abs(f["start_s"] - _ts("2024-05-20 16:00")) <= 3600
    assert abs(f["end_s"] - _ts("2024-05-21 20:00")) <= 3600
    det = json.loads(f["details_json"])
    assert f["severity"] == "alarm" and "lockout/tagout" in det["caution"]
    assert f["lost_kwh"] > 500  # ≈ 1.3 clear-ish days of a 100-kW inverter


def test_injected_string_loss_found(store):
    eng, _n, _c = store
    up = read_flags(eng, "s1", kind="underperformance")
    assert list(up["device_id"]) == ["inv3"]
    det = json.loads(up.iloc[0]["details_json"])
    # Tolerance: ±2 days on the injected dates (local standard days).
    assert abs((pd.Timestamp(det["first_day"]) - pd.Timestamp("2024-05-25")).days) <= 2
    assert abs((pd.Timestamp(det["last_day"]) - pd.Timestamp("2024-06-14")).days) <= 2
    assert det["median_peer_ratio"] == pytest.approx(5 / 6, abs=0.02)


def test_injected_flatline_found_and_no_clock_or_drift_on_clean_data(store):
    eng, _n, _c = store
    fl = read_flags(eng, "s1", kind="sensor_flatline", device_id="poa1")
    assert len(fl) == 1
    assert _ts("2024-06-05 16:00") <= fl.iloc[0]["start_s"] <= _ts("2024-06-05 17:00")
    # Clean control: clocks are right and nothing drifts.
    assert read_flags(eng, "s1", kind="clock_shift").empty
    assert read_flags(eng, "s1", kind="sensor_drift").empty
    assert read_flags(eng, "s1", kind="sensor_night").empty


def test_rerun_replaces_flags(store):
    eng, n, _c = store
    assert run_flags(eng, "s1") == n
    assert len(read_flags(eng, "s1")) == n


def test_unknown_site(store):
    eng, _n, _c = store
    with pytest.raises(SiteNotFoundError, match="no site 'nope'.*known: s1"):
        run_flags(eng, "nope")


QUILLPOND = Path(__file__).resolve().parents[1] / "sample_scada" / "quillpond"
DEMO_MONTHS = ("2024-01", "2024-02", "2024-03", "2024-04", "2024-05")


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """The demo site, five months of exports (2024-01..05: clock shift, module-temperature
    flatline, an outage, the string failure under way), ingested and computed."""
    if not (QUILLPOND / "truth.json").exists():
        pytest.skip("demo site sample_scada/quillpond/truth.json not built yet")
    from ingest.config import load_site_config
    from ingest.load import ingest_paths

    eng = make_store(tmp_path_factory.mktemp("demo"))
    cfg = load_site_config(QUILLPOND / "quillpond.toml")
    files = [QUILLPOND / "exports" / f"quillpond_{m}.csv.gz" for m in DEMO_MONTHS]
    ingest_paths(eng, cfg, files)
    recompute_all(eng, "quillpond")
    run_flags(eng, "quillpond")
    truth = json.loads((QUILLPOND / "truth.json").read_text())
    return eng, truth, read_flags(eng, "quillpond")


def _local_s(text, truth_zone="Europe/Madrid"):
    return pd.Timestamp(text).tz_localize(truth_zone).value // 10**9


def test_demo_clock_shift_matches_truth(demo):
    eng, truth, fl = demo
    cs = fl[fl["kind"] == "clock_shift"]
    assert len(cs) == 1 and cs.iloc[0]["device_id"] is None  # one logger, all devices
    det = json.loads(cs.iloc[0]["details_json"])
    t = truth["clock_shift"]  # labels 60 min late for intervals ending 2024-02-01..03-01
    assert det["shift_minutes_correction"] == -t["shift_minutes"]
    # Tolerance: exact dates (the shifted days are 2024-02-01 .. 2024-02-29 local).
    assert (det["first_day"], det["last_day"]) == ("2024-02-01", "2024-02-29")
    snippet = tomllib.loads(det["correction_toml"])["sources"]["clock_corrections"][0]
    assert snippet["shift_minutes"] == -60


def test_demo_flatline_outage_and_string_failure(demo):
    eng, truth, fl = demo
    ft = truth["t_module_flatline"]
    # issue #14: the stuck sensor is judged first (one 'sensor_implausible' flag, reason
    # 'stuck', its days excluded downstream); the flatline is attached as its consequence
    f = fl[(fl["kind"] == "sensor_implausible") & (fl["device_id"] == ft["sensor"])]
    assert len(f) == 1
    det = json.loads(f.iloc[0]["details_json"])
    assert det["reason"] == "stuck" and "clock" in det["excluded_from"]
    assert [c["kind"] for c in det["consequences"]] == ["sensor_flatline"]
    assert fl[fl["kind"] == "sensor_flatline"].empty
    # Tolerance: start within 1 h, end within 1 day (the stuck run ends in the night).
    assert abs(f.iloc[0]["start_s"] - _local_s(ft["start_local"])) <= 3600
    assert abs(f.iloc[0]["end_s"] - _local_s(ft["end_local"])) <= 86400
    o = next(x for x in truth["outages"] if x["start_local"].startswith("2024-05"))
    out = fl[fl["kind"] == "outage"]
    assert list(out["device_id"]) == o["inverters"]  # INV-09 only: no false outage
    # Tolerance: 15 min (one interval) on both ends.
    assert abs(out.iloc[0]["start_s"] - _local_s(o["start_local"])) <= 900
    assert abs(out.iloc[0]["end_s"] - _local_s(o["end_local"])) <= 900
    up = fl[fl["kind"] == "underperformance"]
    assert list(up["device_id"]) == [truth["string_failure"]["inverter"]]


def test_demo_false_alarms(demo):
    """Outside the injected faults the five months raise nothing but information."""
    eng, truth, fl = demo
    alarms = fl[fl["severity"].isin(["warning", "alarm"])]
    expected = {"clock_shift", "sensor_implausible", "outage", "underperformance"}
    assert set(alarms["kind"]) <= expected
    # night irradiance is the clock shift seen at dusk: attached to the clock flag
    assert fl[fl["kind"] == "sensor_night"].empty
    clk = json.loads(fl[fl["kind"] == "clock_shift"].iloc[0]["details_json"])
    assert {c["kind"] for c in clk["consequences"]} == {"sensor_night"}
    assert fl[fl["kind"] == "sensor_drift"].empty  # PY2 drifts 0.8 %/yr < 1 %/yr threshold


def test_sibling_drift_names_the_drifting_sensor():
    # Two POA sensors, 2 years of clear-day ratios: B loses 2 %/yr, A is stable.
    # The ratio A/B rises 2 %/yr (Theil–Sen, scipy) and B has the larger clear-sky drift.
    from heliaudit.jobs_flags import sibling_flags

    days = pd.date_range("2023-01-01", periods=730, freq="D")
    rng = np.random.default_rng(8)
    t = np.arange(730) / 365.25
    ra = pd.Series(0.97 + 0.003 * rng.standard_normal(730), index=days)
    rb = pd.Series(0.99 * (1 - 0.02 * t) + 0.003 * rng.standard_normal(730), index=days)
    fl = sibling_flags({"POA-A": ra, "POA-B": rb}, std_offset_s=0)
    fl = [f for f in fl if len(f)]
    assert len(fl) == 1
    f = fl[0].iloc[0]
    assert f["device_id"] == "POA-B" and f["details"]["pair"] == ["POA-A", "POA-B"]
    # A/B = 0.98/(1 − 0.02 t): +2.0..2.1 %/yr over the two years (hand: d/dt at t≈1).
    assert f["details"]["drift_pct_per_yr"] == pytest.approx(2.04, abs=0.2)
    stable = sibling_flags({"POA-A": ra, "POA-C": ra * 1.01}, std_offset_s=0)
    assert all(len(x) == 0 for x in stable)


def test_merge_shared_flags_logger_gap():
    from analytics.outliers import flag_frame
    from heliaudit.jobs_flags import merge_shared_flags

    rec = [dict(device_id=d, kind="sensor_dropout", start_s=100, end_s=200, severity="info",
                lost_kwh=None, details={"quantity": q}) for d, q in
           (("inv1", "p_ac_kw"), ("inv2", "p_ac_kw"), ("poa1", "poa_wm2"))]
    rec.append(dict(device_id="inv3", kind="sensor_dropout", start_s=100, end_s=300,
                    severity="warning", lost_kwh=None, details={"quantity": "p_ac_kw"}))
    out = merge_shared_flags(flag_frame(rec))
    assert len(out) == 2
    site = out[out["device_id"].isna()].iloc[0]
    assert site["details"]["devices"] == ["inv1", "inv2", "poa1"]
    assert site["kind"] == "data_dropout"  # a logger gap: information unavailable
    assert "logger" in site["details"]["probable_cause"]
    assert list(out.loc[out["device_id"].notna(), "device_id"]) == ["inv3"]


def test_clock_check_gets_each_inverters_plane_from_the_site_model():
    """Named planes and an inverter's own plane reach the flags (issue #11/#14): on the
    invented Fernhollow site B1 lies on the 10° south-east plane, C1 on a tracker and D1 on two
    planes; reading only raw [[inverters.arrays]] tables used to give them the site plane."""
    import tomllib
    from pathlib import Path

    from heliaudit.jobs_flags import _arrays_by_inverter, _resolved_arrays, _with_planes

    text = (Path(__file__).resolve().parents[1] / "sample_scada" / "fernhollow"
            / "fernhollow.toml").read_text(encoding="utf-8")
    raw = _arrays_by_inverter(tomllib.loads(text))
    assert "B1" not in raw  # the old reading: B1 fell back to the site's 30° south plane
    arrays = _resolved_arrays(text, raw)
    planes = _with_planes(pd.DataFrame({"device_id": ["A1", "B1", "C1", "D1"]}), arrays)
    got = {r.device_id: (r.tilt_deg, r.azimuth_deg) for r in planes.itertuples()}
    assert got["A1"] == (30.0, 180.0) and got["B1"] == (10.0, 135.0)  # fernhollow.toml planes
    assert all(pd.isna(x) for x in got["C1"] + got["D1"])  # a tracker; two planes: no plane
    assert _resolved_arrays("not = [valid", raw) is raw  # unparsable: the raw tables
