"""Demo site end to end (issue #7): recovered degradation rates against the generator's truth.

Builds (or reuses) a store from ``sample_scada/quillpond`` through ingest -> daily -> flags ->
degradation, then compares each inverter's rate with ``truth.json`` (the invented site's
injected rates; known answers of our own generator):

each at the README's own figures ("What the main job does", "Degradation rates"):

* inverters on the stable POA sensor (POA-RC1) and without faults: year-on-year within
  0.05 %/yr of the injected rate, and it is their recommended rate, except for the two whose
  soiling costs 2 % (the soiling-corrected rate, 0.22-0.25 %/yr too steep, inside its interval);
* inverters on POA-PY2 (the generator drifts it −0.8 %/yr from 2023-07-01): the sensor is
  judged to drift, from about 2023-05-04 at about 0.63 %/yr (the whole-period year pairs read
  0.41), the year-on-year rate reads 0.65-0.75 %/yr too optimistic, the recommended rate
  is the clear-sky one, 0.17-0.25 %/yr too pessimistic and inside its interval;
* INV-05 (a string opens on 2023-09-12): a level shift on that day, sized −5.6 %, and the
  within-segment rate −0.92 %/yr (truth −0.93) recommended;
* the fleet's median recovered rate is near the published median for crystalline silicon,
  0.5 %/yr loss (Jordan & Kurtz 2013), here within the generator's truth range.

Ingesting and computing 3.5 years of 15-minute data for 14 inverters takes minutes, so the
test runs only when ``HELIAUDIT_DEMO_DB`` names a store built from the demo (e.g.
``heliaudit --db /tmp/demo.sqlite ingest sample_scada/quillpond/quillpond.toml``) or when
``HELIAUDIT_SLOW=1`` lets it build one; otherwise it skips with that reason.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "sample_scada" / "quillpond"
TRUTH = DEMO / "truth.json"

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def demo_engine(tmp_path_factory):
    if not TRUTH.exists():
        pytest.skip("sample_scada/quillpond/truth.json not generated yet (heliaudit demo-data)")
    url = os.environ.get("HELIAUDIT_DEMO_DB")
    from db.engine import make_engine

    if url:
        engine = make_engine(url)
    elif os.environ.get("HELIAUDIT_SLOW") == "1":
        from click.testing import CliRunner

        from heliaudit.cli import main
        path = tmp_path_factory.mktemp("demo") / "demo.sqlite"
        r = CliRunner().invoke(main, ["--db", str(path), "ingest", "--silent",
                                      str(DEMO / "quillpond.toml")])
        assert r.exit_code == 0, r.output[-2000:]
        engine = make_engine(path)
    else:
        pytest.skip("slow (minutes): set HELIAUDIT_DEMO_DB to a store built from the demo, "
                    "or HELIAUDIT_SLOW=1 to build one")
    from db.degradation import degradation_results

    if degradation_results(engine, "quillpond").empty:
        from heliaudit.jobs_degradation import run_degradation
        run_degradation(engine, "quillpond")
    return engine


@pytest.fixture(scope="module")
def results(demo_engine):
    from db.degradation import degradation_results

    return degradation_results(demo_engine, "quillpond").set_index(["device_id", "method"])


@pytest.fixture(scope="module")
def truth():
    return json.loads(TRUTH.read_text())


def _sensor_of(truth, dev):
    return next(i["poa_sensor"] for i in truth["inverters"] if i["id"] == dev)


def test_stable_sensor_inverters_within_readme_figure(results, truth):
    # README "What the main job does": the year-on-year rates of the inverters on the stable
    # reference cell land within 0.05 %/yr of the injected truth (0.006-0.050 too pessimistic),
    # and for them the recommended rate is the year-on-year rate, except where soiling costs
    # 2 % or more (the soiling-corrected rate, README "Degradation rates").
    rates = truth["degradation"]["per_inverter_pct_per_yr"]
    faulty = {truth["string_failure"]["inverter"]}
    checked = soiled = 0
    for dev, rd in rates.items():
        if _sensor_of(truth, dev) != "POA-RC1" or dev in faulty:
            continue
        got = results.loc[(dev, "sensor_year_pairs"), "rate_pct_per_yr"]
        assert -0.0505 < got - rd <= 0.0, (dev, got, rd)
        rec = results.loc[(dev, "recommended")]
        unsoiled = results.loc[(dev, "sensor_year_pairs_unsoiled")]
        loss = (unsoiled["details"] or {}).get("soiling_loss_pct") or 0.0
        if loss >= 2.0:
            # README "Degradation rates" (the recommended rate, rule 3): material soiling -> the soiling-corrected
            # rate (INV-03, INV-06: 2.0 % loss), 0.22-0.25 %/yr too steep here, its 95 %
            # interval (which carries the soiling correction's uncertainty) holding the truth
            assert rec["details"]["chosen_method"] == "sensor_year_pairs_unsoiled", dev
            assert -0.25 <= rec["rate_pct_per_yr"] - rd <= -0.22, (dev, rec["rate_pct_per_yr"], rd)
            assert rec["ci_low"] <= rd <= rec["ci_high"], dev
            assert unsoiled["details"]["correction_sd_pct_per_yr"] > 0
            soiled += 1
        else:
            assert rec["details"]["chosen_method"] == "sensor_year_pairs", dev
            assert rec["rate_pct_per_yr"] == got
        checked += 1
    assert checked >= 4 and soiled == 2


def test_drifting_pyranometer_judged_and_recommended_rate_sensor_independent(results, truth):
    # README: POA-PY2 (drifting -0.8 %/yr from 2023-07-01) is judged to drift, from about
    # 2023-05-04 at about 0.63 %/yr (whole-period pairs: 0.41); its inverters' year-on-year
    # rates read 0.65-0.75 %/yr too optimistic; the recommended rate is the clear-sky one,
    # 0.07-0.13 %/yr too pessimistic and inside its 95 % interval, and every one carries the
    # "check its calibration" warning with the onset.
    rates = truth["degradation"]["per_inverter_pct_per_yr"]
    drift = truth["poa_drift"]["sensor"]
    devs = [d for d in rates if _sensor_of(truth, d) == drift]
    assert len(devs) == 7
    for dev in devs:
        yoy = results.loc[(dev, "sensor_year_pairs"), "rate_pct_per_yr"]
        assert 0.645 <= yoy - rates[dev] <= 0.755, (dev, yoy)
        rec = results.loc[(dev, "recommended")]
        assert rec["details"]["chosen_method"] == "modelled_sky_year_pairs", dev
        assert -0.135 <= rec["rate_pct_per_yr"] - rates[dev] <= -0.065, (dev, rec["rate_pct_per_yr"])
        assert rec["ci_low"] <= rates[dev] <= rec["ci_high"]
        assert rec["details"]["caveats"][0]["kind"] == "sensor_drift"
        summary = results.loc[(dev, "overview"), "details"]
        assert any("check its calibration" in w for w in summary["warnings"])
        assert summary["sensor_drift"]["judged"] is True
        assert summary["sensor_drift"]["onset_day"] == "2023-05-04"
        assert round(summary["sensor_drift"]["drift_pct_per_yr"], 2) == 0.63
        assert round(summary["sensor_drift"]["whole_period_pct_per_yr"], 2) == 0.41
        assert "since about 2023-05-04" in rec["details"]["caveats"][0]["text"]
    # the stable reference cell is not judged to drift
    rc = next(d for d in rates if _sensor_of(truth, d) == "POA-RC1")
    assert results.loc[(rc, "overview"), "details"]["sensor_drift"]["judged"] is False


def test_string_failure_found_as_level_shift_on_that_day(results, truth):
    # README: INV-05's injected -6 % step on 2023-09-12 is found on that day
    import datetime as dt

    sf = truth["string_failure"]
    day = dt.date.fromisoformat(sf["from_local"][:10])
    cps = results.loc[(sf["inverter"], "overview"), "details"]["change_points"]
    assert [c["day"] for c in cps if c["kind"] == "drop"] == [day.isoformat()], cps


def test_fleet_median_near_published_median(results, truth):
    # Jordan & Kurtz 2013: median field degradation ≈ 0.5 %/yr loss for crystalline Si; the
    # demo's injected rates span -0.31..-0.93 %/yr (median -0.66): the recovered median of the
    # stable-sensor inverters must lie in that range.
    rates = truth["degradation"]["per_inverter_pct_per_yr"]
    got = [results.loc[(d, "sensor_year_pairs"), "rate_pct_per_yr"] for d in rates
           if _sensor_of(truth, d) == "POA-RC1"]
    med = float(np.nanmedian(got))
    assert min(rates.values()) <= med <= max(rates.values())
    assert -1.0 < med < -0.3


def test_string_failure_step_sized_and_within_segment_rate(results, truth):
    # README: the step is sized -5.6 % (truth: one string of INV-05, 6 % of DC power, on top
    # of its degradation) and the recommended rate is the within-segment rate, -0.92 %/yr
    # against the injected -0.93 %/yr.
    sf = truth["string_failure"]
    dev = sf["inverter"]
    cps = [c for c in results.loc[(dev, "overview"), "details"]["change_points"]
           if c["kind"] == "drop"]
    assert len(cps) == 1 and round(cps[0]["size_pct"], 1) == -5.6, cps
    assert cps[0]["energy_kwh"] < 0
    rd = truth["degradation"]["per_inverter_pct_per_yr"][dev]
    rec = results.loc[(dev, "recommended")]
    assert rec["details"]["chosen_method"] == "sensor_year_pairs_between_shifts"
    assert round(rec["rate_pct_per_yr"], 2) == -0.92 and rd == -0.93, (rec["rate_pct_per_yr"], rd)


def test_soiling_differences_are_not_level_shifts(results, truth):
    # truth.json: soiling multipliers differ between inverters (0.82-1.11), so peer-relative
    # indices rise at each wash-off; the only level shift the generator injected is INV-05's
    # string failure: no other inverter may show a drop or a rise (recoveries are cleanings).
    for d in truth["degradation"]["per_inverter_pct_per_yr"]:
        if d == truth["string_failure"]["inverter"]:
            continue
        kinds = [c["kind"] for c in results.loc[(d, "overview"), "details"]["change_points"]]
        assert not {"drop", "rise"} & set(kinds), (d, kinds)


def test_clear_sky_pessimism_is_soiling(demo_engine, results, truth):
    # README Methods, "Why the clear-sky rate reads too steep on the demo": the clear-sky rates
    # of the 13 inverters without a step are 0.01-0.14 %/yr too pessimistic (days from 180
    # after commissioning on, as every method), and dividing the clear-day index by the
    # generator's own soiling ratio (the demo generator's soiling model,
    # heliaudit.demo_generator.soiling, with truth.json's rain) moves each one by +0.12 to
    # +0.32 %/yr: soiling pulls them down (and the true ratio over-corrects, README).
    import pandas as pd

    from analytics import clearsky as acs
    from analytics import degradation as adeg
    from analytics.daily import standard_utc_offset_h
    from db import queries
    from db.registry import site_row
    from heliaudit import demo_generator as dg
    from heliaudit import jobs_degradation as jd

    site = site_row(demo_engine, "quillpond")
    invs = queries.inverters(demo_engine, "quillpond")
    clear, _, why = jd._clearsky_daily(demo_engine, site, invs,
                                       standard_utc_offset_h(site["timezone"]), dict(jd.DEFAULTS))
    assert why is None
    rain = truth["daily_weather"]["rain_mm"]
    days = pd.date_range(truth["period"]["start"], periods=len(rain), freq="D")
    sr_base, _ = dg.soiling(dg.quillpond_scenario(), np.array([d.date() for d in days]),
                            np.array(rain))
    rates = truth["degradation"]["per_inverter_pct_per_yr"]
    mult = truth["soiling"]["multiplier_per_inverter"]
    moves = []
    for dev, rd in rates.items():
        if dev == truth["string_failure"]["inverter"]:
            continue
        sky = results.loc[(dev, "modelled_sky_year_pairs"), "rate_pct_per_yr"]
        assert -0.15 <= sky - rd <= 0.0, (dev, sky, rd)
        sr = pd.Series(1 - mult[dev] * (1 - sr_base), days)
        # the stabilisation period the job skips (180 days after commissioning)
        until = pd.Timestamp(invs.set_index("device_id").loc[dev, "commissioned"]) \
            + pd.Timedelta(days=jd.DEFAULTS["stabilisation_days"])
        c = clear[dev][pd.to_datetime(clear[dev].index) >= until]
        c = c.where((c >= 0.3) & (c <= 1.3))
        dense = acs.densify_clear_days((c / sr.reindex(c.index)).dropna(), window_days=15)
        unsoiled = adeg.degradation_yoy(dense, reference="start", n_resamples=200).rate_pct_per_yr
        moves.append(unsoiled - sky)
        assert 0.11 <= unsoiled - sky <= 0.33, (dev, sky, unsoiled)


def test_every_method_skips_the_stabilisation_period(demo_engine, results):
    # README Methods: the first 180 days after commissioning are skipped (light-induced and
    # metastable effects; Jordan et al. 2018 name the first months, from memory). Every
    # method of a device rests on the same days: the clear-sky year pairs too (before, they
    # started on the first day of data, half a year earlier than the sensor-based ones).
    import datetime as dt

    from db import queries

    invs = queries.inverters(demo_engine, "quillpond").set_index("device_id")
    for dev, inv in invs.iterrows():
        until = inv["commissioned"] + dt.timedelta(days=180)
        for method in ("sensor_year_pairs", "modelled_sky_year_pairs"):
            d = results.loc[(dev, method), "details"]
            assert dt.date.fromisoformat(d["first_pair_day"]) >= until, (dev, method, d)
