"""Site configuration hardening (issue #12): one test per defect found by the malformed-config
sweep. Each must give a ConfigError naming the key, never a traceback and never a silent pass."""

import os
from pathlib import Path

import pytest

from ingest import config as C
from ingest.config import ConfigError, Key, load_site_config, parse_site_config, register
from ingest.load import discover

DATA = Path(__file__).resolve().parent / "data"
BASE = (DATA / "site_basic.toml").read_text()


def problems(text):
    with pytest.raises(ConfigError) as e:
        parse_site_config(text, "s.toml")
    return e.value.problems


def has(probs, key, fragment):
    return any(k == key and fragment in m for k, m in probs)


def test_unknown_key_names_the_closest_valid_one():
    probs = problems(BASE.replace("azimuth_deg = 180", "azimuth_deg = 180\nalbedoo = 0.3"))
    assert has(probs, "site.albedoo", "did you mean `albedo`?"), probs


def test_unknown_key_in_nested_tables_and_arrays():
    t = BASE.replace('mounting = "open_rack_glass_polymer"',
                     'mounting = "open_rack_glass_polymer"\np_ac_max_kW = 3', 1)
    t = t.replace('zone = "UTC"', 'zone = "UTC", lable = "start"')
    probs = problems(t)
    assert has(probs, "inverters[0].p_ac_max_kW", "did you mean `p_ac_max_kw`?"), probs
    assert has(probs, "sources[0].timestamp.lable", "did you mean `label`?"), probs


@pytest.mark.parametrize("value", ["nan", "inf", "-inf"])
def test_nan_and_inf_fail_numeric_checks(value):
    probs = problems(BASE.replace("latitude_deg = 40.4", f"latitude_deg = {value}"))
    assert has(probs, "site.latitude_deg", "finite number"), probs


@pytest.mark.parametrize("old, new, key", [
    ("[site]", "economics = 5\n[site]", "economics"),
    ("[site]", "warranty = \"soon\"\n[site]", "warranty"),
    ("[site]", "filters = [1, 2]\n[site]", "filters"),
    ('timestamp = { column = "Time", format = "%Y-%m-%d %H:%M", zone = "UTC", label = "start" }',
     'timestamp = "Time"', "sources[0].timestamp"),
])
def test_wrong_type_of_a_table_is_a_message(old, new, key):
    probs = problems(BASE.replace(old, new, 1))
    assert has(probs, key, "expected a table"), probs


def test_long_layout_wrong_types():
    t = BASE.replace('name = "scada"', 'name = "scada"\nlayout = "long"\nlong = 5')
    assert has(problems(t), "sources[0].long", "expected a table")
    t = BASE.replace('name = "scada"', 'name = "scada"\nlayout = "long"\nlong = { quantities = [1, 2] }')
    assert has(problems(t), "sources[0].long.quantities", "expected a table")
    t = BASE.replace('name = "scada"', 'name = "scada"\nlayout = "long"\nlong = { quantities = { P = 5 } }')
    assert has(problems(t), "sources[0].long.quantities.P", "expected { quantity")


def test_wrong_scalar_types_everywhere():
    t = BASE.replace('id = "INV1"', 'id = 7', 1).replace("p_dc_kwp = 120.0", 'p_dc_kwp = "120"', 1)
    t = t.replace('name = "scada"', 'name = "scada"\nmissing_values = ["-", 3]\nskip_lines = 1.5')
    probs = problems(t)
    assert has(probs, "inverters[0].id", "expected an id")
    assert has(probs, "inverters[0].p_dc_kwp", "expected a number")
    assert has(probs, "sources[0].missing_values[1]", "expected a string")
    assert has(probs, "sources[0].skip_lines", "expected an integer")


@pytest.mark.parametrize("fmt", ["%Y-%m-%d %Q", "%", "%Y %Y", "", "daily"])
def test_bad_strftime_pattern(fmt):
    t = BASE.replace('format = "%Y-%m-%d %H:%M"', f'format = "{fmt}"')
    assert any(k == "sources[0].timestamp.format" for k, _ in problems(t))


def test_non_utf8_config_file(tmp_path):
    p = tmp_path / "s.toml"
    p.write_bytes(BASE.replace("Test site", "Planta Peña").encode("latin-1"))
    with pytest.raises(ConfigError) as e:
        load_site_config(p)
    assert e.value.problems[0][0] == "(file)" and "not UTF-8" in e.value.problems[0][1]


def test_clock_correction_with_utc_offset_is_refused():
    t = BASE + ('\n[[sources.clock_corrections]]\nstart = 2023-06-01T00:00:00+02:00\n'
                'end = 2023-06-02T00:00:00\nshift_minutes = 60\n')
    assert has(problems(t), "sources[0].clock_corrections[0].start", "without a UTC offset")


@pytest.mark.parametrize("pattern, fragment", [
    ("", "must not be empty"), ("a**b.csv", "whole path part"), ("../other/*.csv", "'..'"),
    ("/etc/*.csv", "must be relative"), ("exports/**", "file name pattern"),
])
def test_bad_patterns(pattern, fragment):
    t = BASE.replace('pattern = "basic_*.csv*"', f'pattern = "{pattern}"')
    assert has(problems(t), "sources[0].pattern", fragment), problems(t)


@pytest.mark.parametrize("zone", ["+25:99", "+14:30", "-13:00", "+01:60", "+1:00"])
def test_fixed_offset_out_of_range(zone):
    t = BASE.replace('zone = "UTC"', f'zone = "{zone}"')
    assert has(problems(t), "sources[0].timestamp.zone", "fixed offset")


def test_valid_extreme_offsets_pass():
    for zone in ("+14:00", "-12:00", "+05:45"):
        parse_site_config(BASE.replace('zone = "UTC"', f'zone = "{zone}"'))


@pytest.mark.parametrize("value, fragment", [
    ('""', "must not be empty"), ('"   "', "must not be empty"), ('" INV1"', "spaces"),
    ('"(site)"', "reserved"), ('"' + "X" * 65 + '"', "at most 64 characters"),
    ('"IN\\u0000V"', "NUL"), ('"IN\\tV"', "control characters"),
])
def test_inverter_id_limits(value, fragment):
    t = BASE.replace('id = "INV1"', f"id = {value}", 1)
    assert has(problems(t), "inverters[0].id", fragment), problems(t)


def test_nul_in_any_string_is_refused():
    t = BASE.replace('name = "Test site"', 'name = "Test\\u0000site"')
    assert has(problems(t), "site.name", "NUL")


def test_site_id_over_store_limit():
    t = BASE.replace('id = "testsite"', 'id = "' + "s" * 65 + '"')
    assert has(problems(t), "site.id", "at most 64")


def test_patterns_stay_inside_the_config_folder(tmp_path):
    site = tmp_path / "site"
    outside = tmp_path / "outside"
    site.mkdir()
    outside.mkdir()
    (outside / "basic_secret.csv").write_text("root:x:0:0\n")
    os.symlink(outside / "basic_secret.csv", site / "basic_link.csv")
    os.symlink(outside, site / "sub")
    (site / "basic_ok.csv").write_text("Time\n")
    cfg_path = site / "s.toml"
    cfg_path.write_text(BASE.replace('pattern = "basic_*.csv*"', 'pattern = "**/basic_*.csv"'))
    found = [f.name for f, _s in discover(load_site_config(cfg_path))]
    assert found == ["basic_ok.csv"]


def test_explicit_folder_may_lie_outside(tmp_path):
    site, outside = tmp_path / "site", tmp_path / "outside"
    site.mkdir()
    outside.mkdir()
    (outside / "basic_1.csv").write_text("Time\n")
    cfg_path = site / "s.toml"
    cfg_path.write_text(BASE.replace('name = "scada"', f'name = "scada"\nfolder = "{outside}"'))
    assert [f.name for f, _s in discover(load_site_config(cfg_path))] == ["basic_1.csv"]


def test_new_keys_are_registered_in_one_place(monkeypatch):
    """Other features add keys by declaring them in the key table (ingest.config.SCHEMA)."""
    monkeypatch.setitem(C.SCHEMA, "site", dict(C.SCHEMA["site"]))
    t = BASE.replace("azimuth_deg = 180", "azimuth_deg = 180\nsoiling_station = true")
    assert has(problems(t), "site.soiling_station", "unknown key")
    register("site", soiling_station=Key("bool"))
    parse_site_config(t)


def test_every_problem_of_a_bad_file_is_a_config_error_not_a_traceback():
    """A handful of structurally wrong files (lists where tables belong and vice versa)."""
    for text in ["site = 5", "sensors = 5\n[site]\nid='a'", "[[site]]\nid='a'",
                 "sources = [1]\n[site]\nid='x'", "inverters = {a = 1}\n[site]\nid='x'",
                 "[site]\nid='x'\ntimezone=5", "[site]\nid='x'\ntimezone='Not/AZone'"]:
        with pytest.raises(ConfigError):
            parse_site_config(text)


@pytest.mark.parametrize("sid", ["(site)", "+25:99", "a b", "-x", "é"])
def test_site_id_is_a_command_line_word(sid):
    t = BASE.replace('id = "testsite"', f'id = "{sid}"')
    assert has(problems(t), "site.id", "letters, digits")
