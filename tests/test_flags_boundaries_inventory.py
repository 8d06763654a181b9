"""The threshold inventory of docs/flags.md (issue #14): every test it names exists, and the
settings recorded with each flags computation state the documented values."""

import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
DOC = (ROOT / "docs" / "flags.md").read_text(encoding="utf-8")
FILES = {"FT": "test_flag_thresholds.py", "FR": "test_analytics_flag_rules.py",
         "PL": "test_analytics_plausibility.py", "SQ": "test_analytics_sensor_qa.py",
         "SO": "test_analytics_soiling.py", "PA": "test_jobs_flags_patterns.py",
         "B1": "test_flags_boundaries.py", "B2": "test_flags_boundaries_diag.py",
         "B3": "test_flags_boundaries_more.py"}


def _rows():
    return [line for line in DOC.splitlines()
            if line.startswith("| ") and not line.startswith("| Threshold")]


def test_every_row_names_an_existing_test():
    rows = _rows()
    assert len(rows) >= 70
    for row in rows:
        refs = re.findall(r"\b([A-Z][A-Z0-9])::(test_\w+)", row.split("|")[-2])
        assert refs, f"no test named in docs/flags.md row: {row}"
        for abbr, name in refs:
            src = (ROOT / "tests" / FILES[abbr]).read_text(encoding="utf-8")
            assert re.search(rf"^def {name}\(", src, re.M), f"{abbr}::{name} not found"


def test_readme_flags_links_the_inventory():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    flags = readme.split("### Flags", 1)[1].split("\n### ", 1)[0]
    assert "docs/flags.md" in flags


# The documented values (README Flags, docs/flags.md) against the settings the flags job
# records with each computation and passes to the detectors: a mismatch means the stored
# record of a computation misstates what was run (issue #14: the recorded soiling minimum
# said 14 days while 7 were used).
DOCUMENTED = [
    (("underperformance", "z_threshold"), -3.0),
    (("underperformance", "min_deficit"), 0.04),
    (("underperformance", "min_peers"), 5),
    (("underperformance", "window"), 5),
    (("underperformance", "k_required"), 3),
    (("underperformance", "escalate_days"), 14),
    (("underperformance", "clear_days"), 3),
    (("underperformance", "own_min_pi"), 0.80),
    (("underperformance", "own_history_deficit"), 0.10),
    (("outage", "min_poa_wm2"), 50.0),
    (("outage", "max_frac"), 0.01),
    (("outage", "min_duration_h"), 0.5),
    (("outage", "warning_h"), 1.0),
    (("outage", "alarm_h"), 4.0),
    (("outage", "min_elevation_deg"), 10.0),
    (("outage", "startup_frac"), 0.01),
    (("outage", "min_expected_multiple"), 5.0),
    (("outage", "edge_minutes"), 30.0),
    (("site_outage", "min_share"), 0.5),
    (("site_outage", "min_inverters"), 2),
    (("site_outage", "max_start_diff_s"), 7200),
    (("power_limit", "min_poa_wm2"), 600.0),
    (("power_limit", "tol_frac"), 0.003),
    (("power_limit", "min_share"), 0.1),
    (("power_limit", "max_level_frac"), 0.97),
    (("stopped", "min_days"), 3.0),
    (("input_mismatch", "min_deficit"), 0.05),
    (("input_mismatch", "window"), 5),
    (("input_mismatch", "k_required"), 3),
    (("clipping", "frac"), 0.98),
    (("soiling", "min_days"), 7),
    (("soiling", "min_rate_pct_per_day"), 0.04),
    (("soiling", "max_line_vs_step"), 1.25),
    (("soiling", "rain_threshold_mm"), 5.0),
    (("soiling", "min_loss"), 0.01),
    (("soiling", "horizon_days"), 30),
    (("soiling", "clear_share"), 0.5),
    (("soiling", "min_clear_days"), 3),
    (("sensor", "p_ac_flat_min_frac"), 0.05),
    (("sensor", "p_ac_flat_limit_band_frac"), 0.01),
    (("sensor", "dropout_min_h"), 1.0),
    (("sensor", "night_wm2"), 5.0),
    (("sensor", "night_elevation_deg"), -3.0),
    (("sensor", "drift_threshold_pct_per_yr"), 1.0),
    (("sensor", "daytime_elevation_deg"), 10.0),
    (("sensor", "validity", "night_elevation_deg"), -12.0),
    (("sensor", "validity", "night_max_wm2"), 5.0),
    (("sensor", "validity", "stuck_tol_wm2"), 0.5),
    (("sensor", "validity", "low_vs_power_factor"), 0.25),
    (("sensor", "validity", "high_vs_power_min_pr"), 0.4),
    (("sensor", "validity", "full_sun_wm2"), 600.0),
    (("sensor", "validity", "colder_than_ambient_margin_c"), 2.0),
    (("sensor", "validity", "model_margin_c"), 20.0),
    (("sensor", "validity", "ambient_night_max_c"), 4.0),
    (("sensor", "validity", "ambient_day_max_c"), 3.0),
    (("clock", "threshold_min"), 10.0),
    (("clock", "n_clear"), 7),
]


@pytest.mark.parametrize("path,value", DOCUMENTED, ids=[".".join(p) for p, _ in DOCUMENTED])
def test_recorded_settings_state_the_documented_values(path, value):
    from heliaudit.jobs_flags import PARAMS

    got = PARAMS
    for k in path:
        got = got[k]
    assert got == value
