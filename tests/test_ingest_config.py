"""Site configuration validation: every problem names its TOML key (ingest/config.py)."""

from pathlib import Path

import pytest

from ingest.config import ConfigError, load_site_config, parse_site_config

DATA = Path(__file__).resolve().parent / "data"
BASE = (DATA / "site_basic.toml").read_text()


def problems(text):
    with pytest.raises(ConfigError) as e:
        parse_site_config(text, "s.toml")
    return e.value.problems, str(e.value)


def test_basic_config_loads_and_expands_inverter_template():
    cfg = load_site_config(DATA / "site_basic.toml")
    assert [c.header for c in cfg.sources[0].columns] == ["INV1_PAC", "INV2_PAC", "Irr", "TMod"]
    assert cfg.sources[0].timestamp.zone == "UTC"
    assert len(cfg.sha256) == 64


def test_positive_gamma_names_key():
    probs, text = problems(BASE.replace("gamma_pmp_per_c = -0.0037", "gamma_pmp_per_c = 0.35", 1))
    assert probs == [("inverters[0].gamma_pmp_per_c",
                      "expected a negative number per °C (e.g. -0.0035 for -0.35 %/°C), got 0.35")]
    assert text.startswith("s.toml: inverters[0].gamma_pmp_per_c: ")


def test_all_problems_reported_together():
    t = BASE.replace('poa_sensor = "POA1"', 'poa_sensor = "POA9"', 1).replace(
        'mounting = "open_rack_glass_polymer"', 'mounting = "roof"', 1)
    probs, _ = problems(t)
    keys = [k for k, _ in probs]
    assert "inverters[0].poa_sensor" in keys and "inverters[0].mounting" in keys


@pytest.mark.parametrize("old, new, key, fragment", [
    ('unit = "kW" }', 'unit = "K" }', "sources[0].columns[0].unit", "unit 'K' is not one of kW, W, MW"),
    ('zone = "UTC"', 'zone = "CET"', "sources[0].timestamp.zone", "expected 'local', 'UTC' or a fixed offset"),
    ('label = "start"', 'label = "middle"', "sources[0].timestamp.label", "must be one of start, end"),
    ('name = "scada"', 'name = "scada"\ndelimiter = ":"', "sources[0].delimiter", "expected ','"),
    ('name = "scada"', 'name = "scada"\nencoding = "klingon"', "sources[0].encoding", "unknown text encoding"),
    ('name = "scada"', 'name = "scada"\ndecimal = ","', "sources[0].decimal",
     "cannot equal the delimiter"),  # ',' is the default delimiter
])
def test_source_problems_name_key(old, new, key, fragment):
    probs, _ = problems(BASE.replace(old, new, 1))
    assert any(k == key and fragment in m for k, m in probs), probs


def test_unknown_top_level_key():
    probs, _ = problems("colour = 'blue'\n" + BASE)
    assert probs[0][0] == "colour" and probs[0][1].startswith("unknown key")


def test_clock_correction_end_before_start():
    t = BASE + ('\n[[sources.clock_corrections]]\nstart = 2023-06-02T00:00:00\n'
                'end = 2023-06-01T00:00:00\nshift_minutes = 60\n')
    probs, _ = problems(t)
    assert ("sources[0].clock_corrections[0]", "end is before start") in probs


def test_ignore_columns_read():
    cfg = parse_site_config(BASE.replace('name = "scada"', 'name = "scada"\nignore_columns = ["Status"]', 1))
    assert cfg.sources[0].ignore_columns == ("Status",)
