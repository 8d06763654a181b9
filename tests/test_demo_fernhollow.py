"""Known-answer tests of the second demo site, Fernhollow (heliaudit/demo_fernhollow.py, #11).

The truth is the generator's own (truth.json): the IEC 61724-1 performance ratio of each
system from its true plane-of-array irradiance (capacity-weighted over its arrays) and true
AC energy. heliaudit must find it through each system's configured irradiance source:

* a pyranometer in the array's plane: within 0.5 % (sensor noise 0.4 % per reading only);
* a reference cell (tracker C1): it reads the irradiance behind glass, so heliaudit's PR
  matches the truth computed with that *effective* irradiance within 0.5 %;
* a horizontal pyranometer transposed with DIRINT (Perez et al. 1992) + Perez (1990): the
  generator splits beam and diffuse by its own sky model and transposes with Hay & Davies
  (1980), a genuine model difference. Measured over the 5-minute period: -0.3 % on the 10°
  plane, +1.5 % on the tracker; in December 2023 +2.0 % and +4.0 % (low sun). Tolerances
  (December / whole period): 10° plane 3 % / 1.5 %, tracker 6 % / 3 %. They can fail:
  in December an untransposed GHI on the 10° plane is ~20 % off and a tracker taken as the
  30° fixed plane ~25 % (hand check below).

Most tests leave the counters out (``ignore_columns``) to test the site model alone; the June
2024 test and the slow whole-period test use the committed configuration as is: whole-kWh
(coarse) counters and LG2's per-device clock correction, both ingest features of issue #11.
"""

from __future__ import annotations

import json
import os
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from ingest.config import load_site_config, parse_site_config

ROOT = Path(__file__).resolve().parents[1]
SITE = ROOT / "sample_scada" / "fernhollow"
TRUTH = json.loads((SITE / "truth.json").read_text())
EXPECTED_SOURCES = {  # system -> (irradiance basis, cell-temperature basis)
    "A1": ("poa_same_plane", "module_sensor"),
    "A2": ("poa_same_plane", "modelled_sandia_king2004"),
    "B1": ("ghi_transposed", "modelled_sandia_king2004"),
    "B2": ("ghi_transposed", "modelled_sandia_king2004"),
    "C1": ("poa_same_plane", "modelled_sandia_king2004"),
    "C2": ("ghi_transposed", "modelled_sandia_king2004"),
    "D1": ("poa_same_plane+ghi_transposed", "modelled_sandia_king2004"),
}
TOL_DECEMBER = {"A1": 0.005, "A2": 0.005, "D1": 0.01, "B1": 0.03, "B2": 0.03, "C1": 0.005,
                "C2": 0.06}
TOL_PERIOD = {**TOL_DECEMBER, "B1": 0.015, "B2": 0.015, "C2": 0.03}


def _config_without_counters() -> str:
    text = (SITE / "fernhollow.toml").read_text()
    heads = re.findall(r'header = "([^"]+\.Etot)"', text)
    text = re.sub(r'\[\[sources\.columns\]\]\nheader = "[^"]+\.Etot"\n(?:[^\[\n][^\n]*\n)*\n?', "",
                  text)
    listed = ", ".join(f'"{h}"' for h in heads)
    return text.replace("unit_row = true\n", f"unit_row = true\nignore_columns = [{listed}]\n", 1)


def test_config_describes_the_plant():
    cfg = load_site_config(SITE / "fernhollow.toml")
    got = {i.id: "+".join(dict.fromkeys(a.irradiance_basis for a in i.arrays)) for i in cfg.inverters}
    assert got == {k: v[0] for k, v in EXPECTED_SOURCES.items()}
    d1 = cfg.inverter("D1")
    assert [(a.plane.id, a.p_dc_kwp) for a in d1.arrays] == [("roof30", 6.0), ("shed10", 4.0)]
    assert d1.p_ac_max_assumed and d1.commissioned is None and d1.p_dc_kwp == 10.0
    assert cfg.inverter("C1").arrays[0].plane.is_tracker
    assert [i.id for i in cfg.inverters if i.t_module_sensor] == ["A1"]
    for sid, s in TRUTH["systems"].items():  # the config's arrays are the truth's
        assert [(a.plane.id, a.p_dc_kwp) for a in cfg.inverter(sid).arrays] == \
            [(a["plane"], a["p_dc_kwp"]) for a in s["arrays"]]


def _lines(name: str) -> list[str]:
    import gzip
    with gzip.open(SITE / "exports" / name, "rt", encoding="utf-8") as f:
        return f.read().splitlines()


def test_exports_have_the_interval_change_coarse_counters_and_the_clock_error():
    def steps(name):  # local wall-clock spacing [min]; April and June have no DST change
        t = pd.Series(pd.to_datetime([x.split(",")[0] for x in _lines(name)[2:]]))
        return set(t.diff().dropna().dt.total_seconds() / 60)
    assert steps("fernhollow_2023-04.csv.gz") == {15.0}
    assert steps("fernhollow_2023-06.csv.gz") == {5.0}
    head = _lines("fernhollow_2023-06.csv.gz")[0].split(",")
    rows = [r.split(",") for r in _lines("fernhollow_2023-06.csv.gz")[2:]]
    e = np.array([float(r[head.index("LG1.B1.Etot")]) for r in rows])
    assert (e == np.round(e)).all() and (np.diff(e) >= 0).all()  # whole kWh, never back
    # 1 kWh per step > 1.5 x 5 kW x 5 min = 0.625 kWh: coarse by the definition
    # LG2 runs 60 min fast from 2024-06-03: C1's (tracker) power peaks 60 min after A1's
    head = _lines("fernhollow_2024-06.csv.gz")[0].split(",")
    rows = [r.split(",") for r in _lines("fernhollow_2024-06.csv.gz")[2:]]
    t = pd.to_datetime([r[0] for r in rows])
    a1 = np.array([float(r[head.index("LG1.A1.Pac")]) for r in rows])
    c1 = np.array([float(r[head.index("LG2.C1.Pac")]) for r in rows])
    err = TRUTH["clock_errors"][0]
    inside = (t >= err["written_start_local"]) & (t < err["written_end_local"])
    minute = np.asarray(t.hour * 60 + t.minute, dtype=float)
    inside = np.asarray(inside)

    def centroid(p, m):
        return float((p[m] * minute[m]).sum() / p[m].sum())
    assert centroid(c1, inside) - centroid(a1, inside) == pytest.approx(60, abs=6)
    assert centroid(c1, ~inside) - centroid(a1, ~inside) == pytest.approx(0, abs=6)


def _store(tmp_path, files, text: str | None = None):
    from db.engine import make_engine
    from heliaudit import jobs_daily
    from ingest import load

    text = _config_without_counters() if text is None else text
    cfg = parse_site_config(text, str(SITE / "fernhollow.toml"))
    eng = make_engine(tmp_path / "fh.sqlite")
    res = load.ingest_paths(eng, cfg, [SITE / "exports" / f for f in files])
    assert [r.status for r in res] == ["loaded"] * len(files), [r.message for r in res]
    jobs_daily.recompute_all(eng, "fernhollow")
    return eng


def _pr_by_system(eng, months=None):
    from db.daily import daily_table
    d = daily_table(eng, "fernhollow")
    if months is not None:
        d = d[pd.to_datetime(d["day"]).dt.strftime("%Y-%m").isin(months)]
    g = d.groupby("device_id")
    return (g["e_ac_pr_kwh"].sum() / g["e_ref_kwh"].sum()).to_dict(), d


def _check_pr(pr: dict, truth: dict, truth_c1: float, tols: dict):
    for sid, tol in tols.items():
        want = truth_c1 if sid == "C1" else truth[sid]
        assert pr[sid] == pytest.approx(want, rel=tol), (sid, pr[sid], want)


def test_pr_of_each_array_group_one_winter_month(tmp_path):
    # December: the planes differ most (10° SE plane / horizontal ~1.2, tracker / 30° ~0.7)
    eng = _store(tmp_path, ["fernhollow_2023-12.csv.gz"])
    try:
        pr, d = _pr_by_system(eng, ["2023-12"])
        truth = {k: v["pr_by_month"]["2023-12"] for k, v in TRUTH["systems"].items()}
        c1 = TRUTH["systems"]["C1"]["pr_by_month_effective_irradiance"]["2023-12"]
        _check_pr(pr, truth, c1, TOL_DECEMBER)
        for sid, (irr, tcell) in EXPECTED_SOURCES.items():
            rows = d[(d["device_id"] == sid)]
            assert set(rows["irradiance_basis"]) == {irr}
            assert set(rows["t_cell_basis"]) == {tcell}
    finally:
        eng.dispose()


def test_untransposed_ghi_would_fail_the_tolerance():
    # hand check that the tolerances can fail: December 2023 insolation of the 10° SE plane
    # against the horizontal (GHI used as POA: > 1.5 % off), and of the tracker against the
    # 30° plane (tracker taken as the site plane: > 5 % off), from the generator's own sky
    import datetime as dt

    from heliaudit import demo_fernhollow as fh
    from heliaudit import demo_generator as gen
    sc = gen.replace(fh._scenario(), start=dt.date(2023, 12, 1), end=dt.date(2024, 1, 1))
    times = gen.interval_starts_utc(sc)
    sky = gen.sun_and_clearsky(sc, times)
    wx, _ = gen.weather(sc, times, sky)
    def h(plane):
        return fh._plane_irradiance(sky, wx, fh.PLANES[plane])["poa"].sum()
    assert abs(h("shed10") / wx["ghi_wm2"].sum() - 1) > 0.03
    assert abs(h("trk") / h("roof30") - 1) > 0.06


@pytest.mark.slow
def test_pr_of_each_array_group_whole_5min_period(tmp_path):
    if os.environ.get("HELIAUDIT_SLOW") != "1":
        pytest.skip("slow (a minute): set HELIAUDIT_SLOW=1")
    files = sorted(p.name for p in (SITE / "exports").glob("fernhollow_*.csv.gz"))
    eng = _store(tmp_path, files, (SITE / "fernhollow.toml").read_text())  # counters included
    try:
        months = sorted({m for v in TRUTH["systems"].values() for m in v["pr_by_month"]
                         if m >= TRUTH["interval_change"]["from_local_day"][:7]})
        pr, _d = _pr_by_system(eng, months)
        truth = {k: v["pr_5min_period"] for k, v in TRUTH["systems"].items()}
        c1 = TRUTH["systems"]["C1"]["pr_5min_period_effective_irradiance"]
        _check_pr(pr, truth, c1, TOL_PERIOD)
    finally:
        eng.dispose()


@pytest.mark.slow
def test_generator_is_deterministic(tmp_path):
    if os.environ.get("HELIAUDIT_SLOW") != "1":
        pytest.skip("slow (20 s): set HELIAUDIT_SLOW=1")
    from heliaudit import demo_fernhollow as fh
    fh.write(tmp_path)
    for p in [SITE / "fernhollow.toml", SITE / "truth.json",
              *sorted((SITE / "exports").glob("*.csv.gz"))]:
        assert (tmp_path / p.relative_to(SITE)).read_bytes() == p.read_bytes(), p.name


def test_pr_from_a_poa_sensor_of_another_plane(tmp_path):
    # B1 (10° SE) and C2 (tracker) given only the 30° pyranometer: GTI-DIRINT (Marion 2015)
    # to GHI/DNI/DHI, then Perez (1990) to their planes. Measured on this demo: December 2023
    # -2.8 % (B1) and -2.1 % (C2); June 2024 +1.7 % and +5.6 %. Tolerances 4 % and 6 %;
    # the same December without any transposition would be ~20-25 % off (hand check above).
    from db.engine import make_engine
    from heliaudit import jobs_daily
    from ingest import load

    txt = _config_without_counters()
    for kwp in ("6.4", "11.52"):  # B1's and C2's blocks: GHI sensor -> the 30° POA sensor
        txt = re.sub(rf'(p_dc_kwp = {kwp}\n)ghi_sensor = "GHI-1"', r'\1poa_sensor = "POA-30"', txt)
    cfg = parse_site_config(txt, str(SITE / "fernhollow.toml"))
    assert [a.irradiance_basis for i in cfg.inverters if i.id in ("B1", "C2") for a in i.arrays] \
        == ["poa_other_plane_transposed"] * 2
    eng = make_engine(tmp_path / "fh.sqlite")
    try:
        load.ingest_paths(eng, cfg, [SITE / "exports" / "fernhollow_2023-12.csv.gz"])
        jobs_daily.recompute_all(eng, "fernhollow")
        pr, d = _pr_by_system(eng, ["2023-12"])
        truth = {k: v["pr_by_month"]["2023-12"] for k, v in TRUTH["systems"].items()}
        assert pr["B1"] == pytest.approx(truth["B1"], rel=0.04)
        assert pr["C2"] == pytest.approx(truth["C2"], rel=0.06)
        assert set(d.loc[d["device_id"] == "B1", "irradiance_basis"]) == {"poa_other_plane_transposed"}
    finally:
        eng.dispose()


def test_computation_record_states_sources_and_assumptions(tmp_path):
    import sqlalchemy as sa

    from db import schema
    from heliaudit.jobs_degradation import results_document
    eng = _store(tmp_path, ["fernhollow_2023-12.csv.gz"])
    try:
        with eng.connect() as conn:
            params = conn.execute(sa.select(schema.computation.c.params_json).where(
                schema.computation.c.kind == "daily").order_by(
                schema.computation.c.computation_id.desc())).scalars().first()
        doc = results_document(eng, "fernhollow")
    finally:
        eng.dispose()
    # the results document states each inverter's basis, in days (31 December days, local
    # standard time; the file's last rows fall on 1 January)
    basis = {b["device_id"]: b["basis_days"] for b in doc["inverters"]}
    assert basis["C2"]["irradiance"] == {"ghi_transposed": 31}
    assert basis["A1"]["cell_temperature"] == {"module_sensor": 31}
    assert basis["B1"]["cell_temperature"] == {"modelled_sandia_king2004": 31}
    inv = json.loads(params)["inverters"]
    assert [a["irradiance_basis"] for a in inv["D1"]["arrays"]] == ["poa_same_plane",
                                                                     "ghi_transposed"]
    assert "DIRINT" in inv["B1"]["arrays"][0]["method"]
    assert "single-axis tracker" in inv["C1"]["arrays"][0]["plane"]
    assert any("AC rating unknown" in x for x in inv["D1"]["assumed"])
    assert any("commissioning date unknown" in x for x in inv["D1"]["assumed"])
    assert inv["A1"]["assumed"] == []


def test_full_config_june_2024_counters_and_clock_correction(tmp_path):
    # the committed configuration as is: whole-kWh counters mapped (coarse: interval energy
    # must come from AC power) and LG2's clock corrected for its devices only. June 2024 holds
    # the three weeks LG2 ran 60 min fast.
    from db.engine import make_engine
    from db.timeseries import inverter_frame
    from heliaudit import jobs_daily
    from ingest import load

    cfg = load_site_config(SITE / "fernhollow.toml")
    eng = make_engine(tmp_path / "fh.sqlite")
    try:
        res = load.ingest_paths(eng, cfg, [SITE / "exports" / "fernhollow_2024-06.csv.gz"])
        assert [r.status for r in res] == ["loaded"], [r.message for r in res]
        jobs_daily.recompute_all(eng, "fernhollow")
        pr, _d = _pr_by_system(eng, ["2024-06"])
        truth = {k: v["pr_by_month"]["2024-06"] for k, v in TRUTH["systems"].items()}
        c1 = TRUTH["systems"]["C1"]["pr_by_month_effective_irradiance"]["2024-06"]
        _check_pr(pr, truth, c1, TOL_DECEMBER)
        # after the correction C1 (LG2) and A1 (LG1) peak together (power-weighted mean time
        # of day within 6 min; 60 min apart in the raw export, test above)
        err = TRUTH["clock_errors"][0]
        t0 = pd.Timestamp(err["written_start_local"], tz="Europe/Paris").tz_convert("UTC")
        t1 = pd.Timestamp(err["written_end_local"], tz="Europe/Paris").tz_convert("UTC")
        s, e = int(t0.timestamp()) + 7200, int(t1.timestamp()) - 7200
        a1 = inverter_frame(eng, "fernhollow", "A1", s, e)["p_ac_kw"]
        c1p = inverter_frame(eng, "fernhollow", "C1", s, e)["p_ac_kw"]
    finally:
        eng.dispose()

    def centroid(p):
        m = np.asarray(p.index.hour * 60 + p.index.minute, dtype=float)
        v = np.nan_to_num(p.to_numpy())
        return float((v * m).sum() / v.sum())
    assert centroid(c1p) - centroid(a1) == pytest.approx(0, abs=6)


def test_screens_state_each_inverters_sources_and_drilldown_uses_them(tmp_path):
    # Issue #11: every PR states where its irradiance and cell temperature came from, on the
    # screens too; the drill-down's expected power is the model the PR uses (transposed GHI
    # and modelled cell temperature for B1, which has neither a POA sensor in its plane nor a
    # module sensor). Reference: the generator's true PR of December 2023 (truth file) and
    # the daily table's expected energy of the same interval data.
    from dashboard import data

    eng = _store(tmp_path, ["fernhollow_2023-12.csv.gz"])
    eng.dispose()
    url = f"sqlite:///{tmp_path / 'fh.sqlite'}"
    src = data.sources(url, "fernhollow", None, None).set_index("device_id")
    assert src.loc["A1", ["irradiance", "t_cell"]].tolist() == ["in plane", "sensor"]
    assert src.loc["B1", ["irradiance", "t_cell"]].tolist() == ["GHI transposed", "modelled"]
    assert src.loc["D1", "irradiance"] == "in plane + GHI transposed"
    assert "Sandia model" in src.loc["B1", "t_cell_long"]
    assert not src.loc["A1", "modelled"] and src.loc["B1", "modelled"]
    note = data.sources_caption(src.reset_index())
    assert "B1" in note and "DIRINT (Perez et al. 1992)" in note and "King et al. 2004" in note
    assert data.sources_caption(src.loc[["A1"]].reset_index()) is None

    # B1's drill-down over the month: expected AC energy from its own array irradiance
    d0 = int(pd.Timestamp("2023-12-01", tz="UTC").timestamp())
    d1 = int(pd.Timestamp("2023-12-31", tz="UTC").timestamp())
    fr = data.drilldown_frame(url, "fernhollow", "B1", d0, d1)
    e_exp = float((fr["p_ac_exp_kw"] * fr["interval_h"]).sum())
    e_ac = float((fr["p_ac_kw"] * fr["interval_h"]).sum())
    assert fr["p_ac_exp_kw"].notna().mean() > 0.95  # not blank for lack of a POA sensor
    truth = TRUTH["systems"]["B1"]["pr_by_month"]["2023-12"]
    # measured / expected energy is a PR-like ratio (the model has no wiring or mismatch
    # losses, so it sits a little above the true PR): within 10 % of the true PR
    assert e_ac / e_exp == pytest.approx(truth, rel=0.10)
    # and it is the daily job's expected energy of the same days (same irradiance and model)
    from db.daily import daily_table
    from db.engine import make_engine
    eng = make_engine(tmp_path / "fh.sqlite")
    d = daily_table(eng, "fernhollow")
    eng.dispose()
    day = pd.to_datetime(d["day"])
    daily_exp = d.loc[(d["device_id"] == "B1") & (day >= "2023-12-02") & (day <= "2023-12-30"),
                      "e_exp_kwh"].sum()
    # local standard days of Europe/Paris (UTC+1)
    m = (fr.index >= pd.Timestamp("2023-12-02", tz="UTC") - pd.Timedelta(hours=1)) & (
        fr.index < pd.Timestamp("2023-12-31", tz="UTC") - pd.Timedelta(hours=1))
    assert float((fr["p_ac_exp_kw"] * fr["interval_h"])[m].sum()) == pytest.approx(
        daily_exp, rel=0.02)
