"""Site model in the configuration (#11): planes, trackers, arrays, sensor planes, the
irradiance source chosen per array, optional ratings and the temperature-sensor rule.

Expected values are the configuration rules documented in docs/config.md ("Site configuration") and README ("Methods:
irradiance and cell temperature of each array"); sums are hand arithmetic.
"""

from pathlib import Path

import pytest

from ingest.config import ConfigError, load_site_config, parse_site_config

DATA = Path(__file__).resolve().parent / "data"
BASE = (DATA / "site_basic.toml").read_text()
QUILLPOND = Path(__file__).resolve().parents[1] / "sample_scada" / "quillpond" / "quillpond.toml"

PLANES = """
[[planes]]
id = "roof10"
tilt_deg = 10
azimuth_deg = 90

[[planes]]
id = "trk"
kind = "single_axis"
axis_azimuth_deg = 180
max_angle_deg = 55
backtrack = true
gcr = 0.4

[[sensors]]
id = "GHI1"
quantity = "ghi_wm2"
instrument = "thermopile_pyranometer"

[[sensors]]
id = "POA10"
quantity = "poa_wm2"
instrument = "reference_cell"
plane = "roof10"

[[sensors]]
id = "TAMB"
quantity = "t_amb_c"
"""


def _with(extra_inverter: str, base: str = BASE) -> str:
    head, tail = base.split("[[sources]]", 1)
    return head + PLANES + extra_inverter + "\n[[sources]]" + tail


def problems(text):
    with pytest.raises(ConfigError) as e:
        parse_site_config(text, "s.toml")
    return e.value.problems


def test_todays_config_is_unchanged_one_array_in_the_site_plane():
    cfg = load_site_config(QUILLPOND)
    for inv in cfg.inverters:
        (a,) = inv.arrays
        assert a.p_dc_kwp == inv.p_dc_kwp and a.plane.same_as(cfg.site_plane)
        assert (a.irradiance_basis, a.irradiance_sensor) == ("poa_same_plane", inv.poa_sensor)
        assert not inv.p_ac_max_assumed and inv.commissioned is not None
    assert cfg.sensor("POA-RC1").plane.same_as(cfg.site_plane)


def test_arrays_on_two_planes_pick_their_sources_in_order():
    cfg = parse_site_config(_with("""
[[inverters]]
id = "INV3"
gamma_pmp_per_c = -0.004
mounting = "open_rack_glass_polymer"
poa_sensor = "POA10"
ghi_sensor = "GHI1"
t_amb_sensor = "TAMB"

[[inverters.arrays]]
id = "east"
p_dc_kwp = 30
plane = "roof10"

[[inverters.arrays]]
id = "tracker"
p_dc_kwp = 12.5
plane = "trk"
"""))
    inv = cfg.inverter("INV3")
    assert inv.p_dc_kwp == pytest.approx(42.5)  # 30 + 12.5 kWp
    east, trk = inv.arrays
    assert (east.irradiance_basis, east.irradiance_sensor) == ("poa_same_plane", "POA10")
    # no sensor on the tracker: GHI transposed beats the POA sensor of another plane
    assert (trk.irradiance_basis, trk.irradiance_sensor) == ("ghi_transposed", "GHI1")
    assert trk.plane.is_tracker and trk.plane.gcr == 0.4 and trk.plane.max_angle_deg == 55
    # optional ratings: AC rating -> DC nameplate, commissioning unknown, modelled temperature
    assert inv.p_ac_max_assumed and inv.p_ac_max_kw == pytest.approx(42.5)
    assert inv.commissioned is None and inv.t_module_sensor is None
    assert inv.irradiance_sensor == "POA10"


def test_other_plane_poa_used_when_no_ghi():
    cfg = parse_site_config(_with("""
[[inverters]]
id = "INV3"
p_dc_kwp = 10
gamma_pmp_per_c = -0.004
mounting = "open_rack_glass_polymer"
tilt_deg = 35
azimuth_deg = 200
poa_sensor = "POA10"
t_amb_sensor = "TAMB"
"""))
    (a,) = cfg.inverter("INV3").arrays
    assert a.plane.tilt_deg == 35 and a.plane.azimuth_deg == 200
    assert a.irradiance_basis == "poa_other_plane_transposed"


@pytest.mark.parametrize("inv, key, fragment", [
    ('p_dc_kwp = 10\nt_amb_sensor = "TAMB"', "inverters[2]", "no irradiance sensor"),
    ('p_dc_kwp = 10\nghi_sensor = "GHI1"', "inverters[2]", "neither measured"),
    ('p_dc_kwp = 10\nghi_sensor = "GHI1"\nt_amb_sensor = "TAMB"\nplane = "roof99"',
     "inverters[2].plane", "no plane 'roof99'"),
    ('p_dc_kwp = 10\nghi_sensor = "POA10"\nt_amb_sensor = "TAMB"',
     "inverters[2].ghi_sensor", "measures poa_wm2"),
    ('p_dc_kwp = 50\nghi_sensor = "GHI1"\nt_amb_sensor = "TAMB"\n'
     '[[inverters.arrays]]\np_dc_kwp = 20\n[[inverters.arrays]]\np_dc_kwp = 20',
     "inverters[2].p_dc_kwp", "add up to 40 kWp"),
])
def test_site_model_problems_name_their_key(inv, key, fragment):
    text = _with('\n[[inverters]]\nid = "INV3"\ngamma_pmp_per_c = -0.004\n'
                 'mounting = "open_rack_glass_polymer"\n' + inv + "\n")
    probs = problems(text)
    assert any(k == key and fragment in m for k, m in probs), probs


def test_ghi_sensor_cannot_be_tilted_and_tracker_has_no_fixed_tilt():
    text = _with("").replace('id = "GHI1"\nquantity = "ghi_wm2"',
                             'id = "GHI1"\nquantity = "ghi_wm2"\nplane = "roof10"')
    text = text.replace('kind = "single_axis"', 'kind = "single_axis"\ntilt_deg = 20')
    keys = [k for k, _m in problems(text)]
    assert "sensors[2].plane" in keys and "planes[1].tilt_deg" in keys
