"""Known-answer tests of the demo generator (heliaudit/demo_generator.py) and of the
committed demo site in sample_scada/quillpond/.

The physics is checked against pvlib computed independently here (clear-sky POA at solar
noon, ASHRAE IAM), the yield against a plausible band for the climate (common practice),
and every truth listed in truth.json is looked for in the written files.
"""

from __future__ import annotations

import datetime as dt
import gzip
import hashlib
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pvlib
import pytest

from heliaudit import demo_generator as gen
from ingest.config import load_site_config

ROOT = Path(__file__).resolve().parents[1]
SITE = ROOT / "sample_scada" / "quillpond"
TRUTH = json.loads((SITE / "truth.json").read_text(encoding="utf-8"))
TS_FMT = "%d.%m.%Y %H:%M"


def _read(month: str) -> pd.DataFrame:
    """One committed export, parsed plainly with pandas (independent of heliaudit ingest)."""
    df = pd.read_csv(SITE / "exports" / f"quillpond_{month}.csv.gz", sep=";", decimal=",",
                     encoding="latin-1", skiprows=[0, 1, 3], na_values=["ERR", "#VALUE!"])
    df["ts_end_local"] = pd.to_datetime(df["Timestamp"], format=TS_FMT, errors="coerce")
    return df.dropna(subset=["ts_end_local"])


def _lines(rel: str) -> list[str]:
    with gzip.open(SITE / rel, "rt", encoding="latin-1", newline="") as f:
        return f.read().split("\r\n")[:-1]


def _sr(inv_id: str, days) -> np.ndarray:
    """Truth soiling ratio of one inverter on the given local-standard days."""
    s = TRUTH["soiling"]
    base = np.asarray(s["sr_base_daily"])
    d0 = dt.date.fromisoformat(s["sr_base_start"])
    idx = np.array([(d - d0).days for d in days])
    return 1.0 - s["multiplier_per_inverter"][inv_id] * (1.0 - base[idx])


@pytest.fixture(scope="module")
def small_site(tmp_path_factory):
    """A small case: 3 inverters, July 2022 (no injected event), 15-minute data."""
    sc = gen.quillpond_scenario(n_inverters=3, start=dt.date(2022, 7, 1), months=1)
    out = tmp_path_factory.mktemp("small")
    summary = gen.write_site(sc, out)
    return sc, out, summary


# ---------------------------------------------------------------- physics


def test_clearsky_poa_at_solar_noon_matches_pvlib():
    sc = gen.quillpond_scenario(n_inverters=1, months=1)
    days = pd.DatetimeIndex(["2022-03-20", "2022-06-21", "2022-12-21"], tz=sc.timezone)
    transit = pvlib.solarposition.sun_rise_set_transit_spa(
        days, sc.latitude_deg, sc.longitude_deg)["transit"]
    noon = pd.DatetimeIndex(transit).tz_convert("UTC")
    # the generator evaluates the sky at interval midpoints: pass starts half an interval earlier
    sky = gen.sun_and_clearsky(sc, noon - pd.Timedelta(minutes=sc.interval_min / 2))
    got = gen.irradiance_from_kc(sky, np.ones(3), sc.tilt_deg, sc.azimuth_deg, sc.albedo)

    # independent computation with pvlib (Ineichen clear sky, Hay-Davies transposition)
    loc = pvlib.location.Location(sc.latitude_deg, sc.longitude_deg, "UTC", sc.altitude_m)
    sp = loc.get_solarposition(noon)
    cs = loc.get_clearsky(noon, model="ineichen")
    ref = pvlib.irradiance.get_total_irradiance(
        sc.tilt_deg, sc.azimuth_deg, sp["zenith"], sp["azimuth"], cs["dni"], cs["ghi"], cs["dhi"],
        dni_extra=pvlib.irradiance.get_extra_radiation(noon), albedo=sc.albedo, model="haydavies")
    np.testing.assert_allclose(got["ghi_wm2"], cs["ghi"], rtol=1e-9)
    np.testing.assert_allclose(got["dni_wm2"], cs["dni"], rtol=1e-9)
    np.testing.assert_allclose(got["poa_wm2"], ref["poa_global"], rtol=1e-9)
    # AOI at solar noon on a south-facing plane = |zenith - tilt| (geometry, hand calculation)
    np.testing.assert_allclose(got["aoi_deg"], np.abs(sp["apparent_zenith"] - sc.tilt_deg), atol=0.1)
    # effective irradiance: ASHRAE IAM b0=0.05 on beam (pvlib.iam.ashrae), Marion diffuse IAM
    iam_d = pvlib.iam.marion_diffuse("ashrae", sc.tilt_deg)
    eff = (ref["poa_direct"] * pvlib.iam.ashrae(got["aoi_deg"].to_numpy())
           + ref["poa_sky_diffuse"] * iam_d["sky"] + ref["poa_ground_diffuse"] * iam_d["ground"])
    np.testing.assert_allclose(got["poa_eff_wm2"], eff, rtol=1e-9)
    # plausibility: clear noon POA on a 25° south plane at 38.9° N lies near 1000 W/m² in
    # spring and summer (common practice) and the winter-solstice beam sees AOI ~ 40° (geometry)
    assert 900 < got["poa_wm2"].iloc[1] < 1100
    assert 900 < got["poa_wm2"].iloc[0] < 1150


def test_effective_irradiance_ashrae_iam_check_values():
    # ASHRAE IAM (b0 = 0.05): IAM = 1 − b0 (1/cos θ − 1), hand values at θ = 0, 30, 60, 80°:
    # 1, 1 − 0.05·0.15470 = 0.99226, 1 − 0.05·1 = 0.95, 1 − 0.05·4.75877 = 0.76206 (the same
    # values as pvlib.iam.ashrae(b=0.05), pvlib 0.16 run). Beam only on a horizontal plane (no
    # diffuse: GHI = DNI cos z; albedo 0), so AOI = zenith and the generator's effective / POA
    # irradiance is the beam IAM itself.
    z = np.array([0.0, 30.0, 60.0, 80.0])
    dni = np.full(4, 800.0)
    sky = pd.DataFrame({"zenith": z, "apparent_zenith": z, "azimuth": np.full(4, 180.0),
                        "ghi_cs": dni * np.cos(np.radians(z)), "dni_cs": dni,
                        "dhi_cs": np.zeros(4), "dni_extra": np.full(4, 1367.0)},
                       index=pd.date_range("2024-06-21 12:00", periods=4, freq="h", tz="UTC"))
    got = gen.irradiance_from_kc(sky, np.ones(4), 0.0, 180.0, albedo=0.0)
    np.testing.assert_allclose(got["aoi_deg"], z, atol=1e-9)
    np.testing.assert_allclose(got["dhi_wm2"], 0.0, atol=1e-9)
    np.testing.assert_allclose(got["poa_eff_wm2"] / got["poa_wm2"],
                               [1.0, 0.99226, 0.95, 0.76206], atol=1e-5)


def test_clear_sky_index_bounded_and_day_types_seasonal():
    rng = np.random.default_rng(0)
    days = pd.date_range("2022-01-01", periods=3 * 365, freq="D")
    types = gen.day_types(days, rng)
    summer = types[np.isin(days.month, (6, 7, 8))]
    winter = types[np.isin(days.month, (11, 12, 1))]
    # seasons: the DAY_TYPE_PROBS climatology has ~76 % clear days in Jun-Aug, ~41 % in Nov-Jan
    assert (summer == 0).mean() > 0.6 and (winter == 0).mean() < 0.55
    # persistence: P(same type tomorrow) = 0.55 + 0.45 * sum(p^2) > the 0.4-0.6 of no memory
    assert (types[1:] == types[:-1]).mean() > 0.65
    day_idx = np.repeat(np.arange(len(days)), 96)
    kc = gen.clear_sky_index(day_idx, types, 15, rng)
    assert kc.min() >= 0.05 and kc.max() <= 1.10


def test_soiling_resets_after_rain_and_cleaning():
    sc = gen.quillpond_scenario(n_inverters=1, start=dt.date(2024, 7, 1), months=1)
    days = np.array([dt.date(2024, 7, 1) + dt.timedelta(days=k) for k in range(31)])
    rain = np.zeros(31)
    rain[4] = 6.0  # >= 5 mm on 5 July: full cleaning from 6 July
    rain[9] = 3.0  # 2-5 mm on 10 July: half the loss left from 11 July
    sr, events = gen.soiling(sc, days, rain)
    # July rate: -0.04 - 0.09 w, w = (1 - cos(2π(doy - 15)/365.25))/2 = 0.984 for doy 183-186
    # -> 0.1286 %/day (hand calculation); four dry days before the rain
    assert sr[0] == 1.0
    assert 1 - sr[4] == pytest.approx(4 * 0.001286, rel=0.01)
    assert sr[5] == 1.0  # the 6 mm rain cleaned fully
    # the 3 mm rain leaves half of the loss reached at the end of 10 July
    day_rate = sr[8] - sr[9]
    assert 1 - sr[10] == pytest.approx(0.5 * ((1 - sr[9]) + day_rate), rel=1e-3)
    assert sr[14] < 1.0 and sr[15] == 1.0  # scheduled cleaning on 2024-07-16, that morning
    assert [(e["kind"], e["effect"]) for e in events] == [
        ("rain", "full"), ("rain", "partial"), ("scheduled_cleaning", "full")]
    assert [e["date"] for e in events] == ["2024-07-06", "2024-07-11", "2024-07-16"]


# ---------------------------------------------------------------- small generated case


def test_small_case_config_loads_and_headers_match(small_site):
    sc, out, summary = small_site
    cfg = load_site_config(out / "quillpond.toml")
    assert [i.id for i in cfg.inverters] == ["INV-01", "INV-02", "INV-03"]
    lines = gzip.open(out / "exports" / "quillpond_2022-07.csv.gz", "rt", encoding="latin-1").read()
    header = lines.split("\n")[gen.PREAMBLE_LINES].rstrip("\r").split(";")
    mapped = {c.header for c in cfg.sources[0].columns}
    assert mapped == set(header[1:])  # every column is mapped, every mapping is in the file
    # 31 days x 96 intervals + 4 header lines (July has no DST change)
    assert summary["files"][0]["lines"] == 31 * 96 + gen.HEADER_LINES


def test_determinism_same_seed_same_bytes(small_site, tmp_path):
    sc, out, summary = small_site
    again = gen.write_site(sc, tmp_path / "again")
    assert [f["sha256"] for f in again["files"]] == [f["sha256"] for f in summary["files"]]
    for name in ("truth.json", "quillpond.toml"):
        assert hashlib.sha256((tmp_path / "again" / name).read_bytes()).hexdigest() == \
            hashlib.sha256((out / name).read_bytes()).hexdigest()
    other = gen.write_site(gen.quillpond_scenario(n_inverters=3, start=dt.date(2022, 7, 1),
                                                  months=1, seed=7), tmp_path / "other")
    assert other["files"][0]["sha256"] != summary["files"][0]["sha256"]


def test_counter_matches_power(small_site):
    sc, out, _ = small_site
    df = pd.read_csv(out / "exports" / "quillpond_2022-07.csv.gz", sep=";", decimal=",",
                     encoding="latin-1", skiprows=[0, 1, 3])
    e_from_p = df["INV-01 Pac"].sum() / 1000 * 0.25  # W -> kW, 15 min = 0.25 h
    e_counter = df["INV-01 E_total"].iloc[-1] - df["INV-01 E_total"].iloc[0]
    # the counter truncates to whole kWh; the first row's energy is not in the difference
    assert abs(e_counter - (e_from_p - df["INV-01 Pac"].iloc[0] / 4000)) <= 1.0


# ---------------------------------------------------------------- committed demo site


def test_committed_config_loads_and_matches_truth():
    cfg = load_site_config(SITE / "quillpond.toml")
    assert cfg.id == "quillpond" and cfg.timezone == "Europe/Madrid"
    assert len(cfg.inverters) == 14 and not cfg.sources[0].clock_corrections
    dc = sum(i.p_dc_kwp for i in cfg.inverters)
    assert 4500 < dc < 5300  # "about 5 MWdc" (issue #3)
    for inv, t in zip(cfg.inverters, TRUTH["inverters"], strict=True):
        assert inv.id == t["id"] and inv.p_dc_kwp == t["p_dc_kwp"]
        assert 1.10 <= inv.p_dc_kwp / inv.p_ac_max_kw <= 1.27
        assert -1.0 <= t["rd_pct_per_yr"] <= -0.3
    assert {i.poa_sensor for i in cfg.inverters[:7]} == {"POA-RC1"}
    assert {i.poa_sensor for i in cfg.inverters[7:]} == {"POA-PY2"}
    assert cfg.sensor("POA-RC1").instrument == "reference_cell"
    assert cfg.sensor("POA-PY2").instrument == "thermopile_pyranometer"
    assert cfg.warranty.annual_loss_pct == 0.55 and cfg.economics.cleaning_cost > 0


def test_committed_size_under_20_mb():
    size = sum(p.stat().st_size for p in (ROOT / "sample_scada").rglob("*") if p.is_file())
    assert size < 20e6


def test_annual_specific_yield_plausible():
    cfg = load_site_config(SITE / "quillpond.toml")
    df = pd.concat([_read(f"2022-{m:02d}") for m in range(1, 13)])
    inv = [i.id for i in cfg.inverters]
    e_kwh = (df[[f"{i} Pac" for i in inv]].sum() / 1000 * 0.25).to_numpy()
    yf = e_kwh / np.array([i.p_dc_kwp for i in cfg.inverters])
    # central-Spain-like plateau, fixed tilt: 1500-2000 kWh/kWp per year (common practice)
    assert np.all((yf > 1500) & (yf < 2000)), yf
    h_poa = df["POA-RC1 Irradiance"].clip(lower=0).sum() * 0.25 / 1000
    # POA insolation on a 25° south plane there: ~1800-2200 kWh/m² (from memory)
    assert 1800 < h_poa < 2200
    pr = yf[:7].sum() / 7 / h_poa  # block A against its own reference cell
    # healthy c-Si plant PR 0.75-0.90 (common practice)
    assert 0.75 < pr < 0.90
    # clipping happens on the inverter with the highest DC/AC ratio, never above rating
    hi = max(cfg.inverters, key=lambda i: i.p_dc_kwp)
    p = df[f"{hi.id} Pac"] / 1000
    assert (p > 0.995 * hi.p_ac_max_kw).sum() > 50 and p.max() <= hi.p_ac_max_kw * 1.003


def test_string_failure_step_in_peer_ratio():
    sf = TRUTH["string_failure"]
    t0 = dt.datetime.fromisoformat(sf["from_local"])
    df = pd.concat([_read("2023-08"), _read("2023-09")])
    pdc = {i["id"]: i["p_dc_kwp"] for i in TRUTH["inverters"]}
    peers = ["INV-01", "INV-02", "INV-03", "INV-04", "INV-06", "INV-07"]  # same sensor block
    d = df[df["POA-RC1 Irradiance"].between(200, 700)]  # below clipping of every inverter
    day = d["ts_end_local"].dt.date
    norm = {i: d[f"{i} Pac"].groupby(day).sum() / pdc[i] for i in peers + [sf["inverter"]]}
    days = list(norm[sf["inverter"]].index)
    for i in norm:  # remove the (known) soiling differences between arrays
        norm[i] = norm[i] / _sr(i, days)
    ratio = norm[sf["inverter"]] / pd.concat([norm[i] for i in peers], axis=1).median(axis=1)
    before = ratio[(ratio.index < t0.date()) & (ratio.index >= t0.date() - dt.timedelta(days=14))]
    after = ratio[(ratio.index > t0.date()) & (ratio.index <= t0.date() + dt.timedelta(days=14))]
    # truth: -6 % DC; AC follows within the PVWatts inverter curve's part-load change (~0.5 %)
    assert after.median() / before.median() == pytest.approx(1 - sf["dc_loss_fraction"], abs=0.006)


def test_outages_are_zero_while_peers_produce():
    for o in TRUTH["outages"]:
        a, b = (dt.datetime.fromisoformat(o[k]) for k in ("start_local", "end_local"))
        df = _read(f"{a:%Y-%m}")
        start_end = df["ts_end_local"] - pd.Timedelta(minutes=15)  # label = interval end
        win = df[(start_end >= a) & (start_end < b) & (df["POA-RC1 Irradiance"] > 100)]
        assert len(win) > 0, o
        for inv in o["inverters"]:
            assert (win[f"{inv} Pac"] == 0).all(), (inv, o)
        others = [i["id"] for i in TRUTH["inverters"] if i["id"] not in o["inverters"]]
        if others:
            assert (win[f"{others[0]} Pac"] > 0).all()


def test_flatline_is_constant_only_inside_its_window():
    fl = TRUTH["t_module_flatline"]
    a, b = (dt.datetime.fromisoformat(fl[k]) for k in ("start_local", "end_local"))
    df = pd.concat([_read("2024-04"), _read("2024-05")])
    start = df["ts_end_local"] - pd.Timedelta(minutes=15)
    inside = df.loc[(start >= a) & (start < b), f"{fl['sensor']} Temp"]
    assert len(inside) > 27 * 96 and inside.nunique() == 1
    assert inside.iloc[0] == fl["value_c"]
    before = df.loc[(start < a) & (start >= a - pd.Timedelta(days=1)), f"{fl['sensor']} Temp"]
    assert before.nunique() > 20  # a live sensor


def _noon_offset_min(df: pd.DataFrame) -> float:
    """Median over days of (irradiance-weighted centroid of POA-RC1) minus solar transit [min],
    reading the labels as correct local interval ends (clock check by solar transit, common practice)."""
    mid = df["ts_end_local"] - pd.Timedelta(minutes=7.5)
    g = df["POA-RC1 Irradiance"].clip(lower=0)
    day = mid.dt.date
    secs = (mid - mid.dt.normalize()).dt.total_seconds()
    centroid = (g * secs).groupby(day).sum() / g.groupby(day).sum()
    days = pd.DatetimeIndex(pd.to_datetime(list(centroid.index))).tz_localize("Europe/Madrid")
    tr = pvlib.solarposition.sun_rise_set_transit_spa(days, 38.90, -3.20)["transit"]
    tr_s = np.array([(t - t.normalize()).total_seconds() for t in tr])
    return float(np.median(centroid.to_numpy() - tr_s) / 60)


def test_clock_shift_month_is_late_against_solar_noon():
    cs = TRUTH["clock_shift"]
    assert cs["shift_minutes"] == 60
    jan, feb, mar = (_noon_offset_min(_read(m)) for m in ("2024-01", "2024-02", "2024-03"))
    # Jan and March are correct: centroid within 10 min of transit (common-practice flag limit);
    # February carries the injected +60 min
    assert abs(jan) < 10 and abs(mar) < 10
    assert feb == pytest.approx(60, abs=10)


def test_dst_repeated_hour_twice_missing_hour_absent():
    oct_labels = [ln.split(";")[0] for ln in _lines("exports/quillpond_2022-10.csv.gz")]
    for hm in ("02:00", "02:15", "02:30", "02:45"):
        assert oct_labels.count(f"30.10.2022 {hm}") == 2  # repeated autumn hour, in order
    assert oct_labels.count("30.10.2022 03:00") == 1
    mar_labels = [ln.split(";")[0] for ln in _lines("exports/quillpond_2022-03.csv.gz")]
    for hm in ("02:00", "02:15", "02:30", "02:45"):
        assert f"27.03.2022 {hm}" not in mar_labels  # skipped spring hour
    assert "27.03.2022 03:00" in mar_labels


def test_logger_gaps_absent():
    for g in TRUTH["logger_gaps"]:
        a, b = (dt.datetime.fromisoformat(g[k]) for k in ("start_local", "end_local"))
        df = _read(f"{a:%Y-%m}")
        start = df["ts_end_local"] - pd.Timedelta(minutes=15)
        assert not ((start >= a) & (start < b)).any()
        assert ((start >= a - pd.Timedelta(hours=2)) & (start < a)).any()


def test_pyranometer_drift_visible_against_reference_cell():
    d = TRUTH["poa_drift"]
    assert d["sensor"] == "POA-PY2" and d["rate_pct_per_yr"] == -0.8

    def ratio(month):
        x = _read(month)
        k = x["POA-RC1 Irradiance"] > 800  # near-normal incidence, clear: small IAM difference
        return (x["POA-PY2 Irradiance"][k] / x["POA-RC1 Irradiance"][k]).median()

    # June 2023 (before the drift start) vs June 2025 (~1.96 yr after): same season, so the
    # IAM difference cancels; expected 1 - 0.008 * 1.96 = 0.9843
    assert ratio("2025-06") / ratio("2023-06") == pytest.approx(0.9843, abs=0.003)
    assert ratio("2023-06") / ratio("2022-06") == pytest.approx(1.0, abs=0.003)


def test_corrupted_lines_are_where_truth_says():
    kinds = set()
    for c in TRUTH["corrupted_lines"]:
        lines = _lines(c["file"])
        header = lines[gen.PREAMBLE_LINES].split(";")
        line = lines[c["line"] - 1]
        kinds.add(c["kind"])
        if c["kind"] == "non_numeric":
            assert line.split(";")[header.index(c["column"])] == c["written"]
        elif c["kind"] == "truncated":
            assert len(line.split(";")) < len(header)
        elif c["kind"] == "bad_timestamp":
            ts = line.split(";")[0]
            assert ts == c["written"]
            with pytest.raises(ValueError):
                dt.datetime.strptime(ts, TS_FMT)
        elif c["kind"] == "duplicated":
            assert line == lines[c["line"] - 2]
    assert kinds == {"non_numeric", "truncated", "bad_timestamp", "duplicated"}


def test_demo_site_ingests_with_only_the_corrupted_lines_rejected(tmp_path):
    load = pytest.importorskip("ingest.load", reason="ingest.load (issue #2 ingest) not present")
    import sqlalchemy as sa

    from db import schema
    from db.engine import make_engine

    cfg = load_site_config(SITE / "quillpond.toml")
    files = sorted({c["file"] for c in TRUTH["corrupted_lines"]})
    # to keep the test fast, load each damaged file's first lines, up to a day past its last
    # damaged line (unchanged bytes of the committed file, so the line numbers hold); the
    # whole site was ingested by hand with the same result (issue #3 report)
    for f in files:
        last = max(c["line"] for c in TRUTH["corrupted_lines"] if c["file"] == f)
        head = _lines(f)[: last + 96]
        (tmp_path / Path(f).name).write_bytes(
            gzip.compress(("\r\n".join(head) + "\r\n").encode("latin-1"), mtime=0))
    eng = make_engine(tmp_path / "demo.sqlite")
    try:
        results = load.ingest_paths(eng, cfg, [tmp_path / Path(f).name for f in files])
        assert [r.status for r in results] == ["loaded"] * len(files), \
            [r.message for r in results]
        with eng.connect() as conn:
            rows = conn.execute(sa.select(schema.ingest_batch.c.file_name, schema.rejected_row.c.line_no,
                                          schema.rejected_row.c.column_name, schema.rejected_row.c.reason)
                                .join(schema.ingest_batch)).all()
    finally:
        eng.dispose()
    got = {(f, n) for f, n, _, _ in rows}
    want = {(Path(c["file"]).name, c["line"]) for c in TRUTH["corrupted_lines"]
            if c["kind"] != "duplicated"}
    assert got == want and all(reason for *_, reason in rows)
    by_col = {(f, n): col for f, n, col, _ in rows}
    for c in TRUTH["corrupted_lines"]:
        if c["kind"] == "non_numeric":
            assert by_col[(Path(c["file"]).name, c["line"])] == c["column"]
    # the repeated line is a duplicate, not an error; rows balance in every file
    dup = [c for c in TRUTH["corrupted_lines"] if c["kind"] == "duplicated"]
    counts = {r.file_name: r.counts for r in results}
    assert sum(counts[Path(c["file"]).name]["rows_duplicate"] for c in dup) == len(dup)
    for c in counts.values():
        assert c["rows_read"] == c["rows_loaded"] + c["rows_duplicate"] + c["rows_rejected"]


def test_cli_demo_data_small_fleet_and_bad_start(tmp_path):
    from click.testing import CliRunner

    from heliaudit.cli import main

    out = tmp_path / "fleet"
    res = CliRunner().invoke(main, ["demo-data", "--out", str(out), "--inverters", "2",
                                    "--years", "0.0833", "--start", "2023-03-01",
                                    "--site-id", "tiny"])
    assert res.exit_code == 0, res.output
    assert "1 export files" in res.output
    cfg = load_site_config(out / "tiny.toml")
    assert cfg.id == "tiny" and [i.id for i in cfg.inverters] == ["INV-01", "INV-02"]
    # March 2023: 31 days x 96 intervals, minus the 4 skipped by the spring DST change
    assert len(_lines_of(out / "exports" / "tiny_2023-03.csv.gz")) == 31 * 96 - 4 + gen.HEADER_LINES
    res = CliRunner().invoke(main, ["demo-data", "--out", str(out), "--start", "2023-03-15"])
    assert res.exit_code == 1
    assert "Error: --start must be the first day of a month, got 2023-03-15" in res.output


def _lines_of(path: Path) -> list[str]:
    with gzip.open(path, "rt", encoding="latin-1", newline="") as f:
        return f.read().split("\r\n")[:-1]
