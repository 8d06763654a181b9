"""Forward migrations of the store (db/migrate.py)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import sqlalchemy as sa

from db import readings, schema
from db.engine import make_engine
from db.migrate import METHOD_RENAMES_V3, MigrationError, current_version, upgrade
from tests.helpers_store import readings_to_old_layout


def test_v2_store_gets_the_schema_2_method_names(tmp_path):
    """A version-2 store with schema-1 method codes is renamed in place (issue #10)."""
    eng = sa.create_engine(f"sqlite:///{tmp_path}/v2.sqlite")
    with eng.begin() as conn:
        schema.metadata.create_all(conn)
        conn.execute(schema.schema_version.insert().values(version=2, applied_utc="x", note="v2"))
        conn.execute(schema.site.insert().values(
            site_id="s1", name="s1", timezone="UTC", latitude_deg=0.0, longitude_deg=0.0,
            altitude_m=0.0, tilt_deg=0.0, azimuth_deg=180.0, albedo=0.2, config_toml="",
            config_sha256="0" * 64, updated_utc="x"))
        for old in METHOD_RENAMES_V3:
            conn.execute(schema.degradation_result.insert().values(
                site_id="s1", device_id="INV1", method=old, rate_pct_per_yr=-0.5))
    assert upgrade(eng) == schema.SCHEMA_VERSION
    with eng.connect() as conn:
        assert current_version(conn) == schema.SCHEMA_VERSION
        got = sorted(conn.execute(sa.select(schema.degradation_result.c.method)).scalars())
    assert got == sorted(METHOD_RENAMES_V3.values())
    assert "yoy" not in got and "summary" not in got


def test_v3_store_gets_the_site_model_columns_and_keeps_its_inverters(tmp_path):
    """v3 -> v5 (#11; the v5 step): daily_inverter gains irradiance_basis / t_cell_basis; inverter rows are
    kept while commissioned and t_module_sensor_id become optional (SQLite: table rebuilt)."""
    eng = sa.create_engine(f"sqlite:///{tmp_path}/v3.sqlite")
    with eng.begin() as conn:
        # the v3 shape of the two tables: without the v5 columns, NOT NULL where v3 had it
        conn.execute(sa.text(
            "CREATE TABLE inverter (device_pk INTEGER PRIMARY KEY, p_dc_kwp FLOAT NOT NULL, "
            "p_ac_max_kw FLOAT NOT NULL, gamma_pmp_per_c FLOAT NOT NULL, eta_inv_nom FLOAT NOT NULL, "
            "mounting VARCHAR(48) NOT NULL, commissioned DATE NOT NULL, "
            "poa_sensor_id VARCHAR(64) NOT NULL, t_module_sensor_id VARCHAR(64) NOT NULL, "
            "t_amb_sensor_id VARCHAR(64), wind_sensor_id VARCHAR(64), peer_group VARCHAR(64) NOT NULL)"))
        schema.metadata.create_all(conn, tables=[t for t in schema.metadata.sorted_tables
                                                 if t.name not in ("inverter", "daily_inverter")])
        conn.execute(sa.text("CREATE TABLE daily_inverter (device_pk INTEGER, day DATE, pr FLOAT)"))
        conn.execute(schema.schema_version.insert().values(version=3, applied_utc="x", note="v3"))
        conn.execute(sa.text(
            "INSERT INTO inverter VALUES (1, 100.0, 80.0, -0.004, 0.97, 'open_rack_glass_glass', "
            "'2020-01-01', 'POA1', 'TMOD1', NULL, NULL, 'site')"))
    assert upgrade(eng) == schema.SCHEMA_VERSION
    with eng.begin() as conn:
        cols = {c["name"]: c for c in sa.inspect(conn).get_columns("inverter")}
        assert cols["commissioned"]["nullable"] and cols["t_module_sensor_id"]["nullable"]
        row = conn.execute(sa.select(schema.inverter)).mappings().one()
        assert (row["p_dc_kwp"], row["poa_sensor_id"], row["t_module_sensor_id"]) == (100.0, "POA1", "TMOD1")
        conn.execute(schema.inverter.update().values(commissioned=None, t_module_sensor_id=None))
        daily = {c["name"] for c in sa.inspect(conn).get_columns("daily_inverter")}
    assert {"irradiance_basis", "t_cell_basis"} <= daily


def test_v5_step_on_postgres_drops_not_null(pg_engine):
    """The PostgreSQL branch of the v5 site-model step (ALTER COLUMN ... DROP NOT NULL), run on a store
    put back to the v3 constraints."""
    from db.migrate import STEPS
    with pg_engine.begin() as conn:
        conn.execute(sa.text("ALTER TABLE inverter ALTER COLUMN commissioned SET NOT NULL, "
                             "ALTER COLUMN t_module_sensor_id SET NOT NULL"))
        conn.execute(sa.text("ALTER TABLE daily_inverter DROP COLUMN irradiance_basis, "
                             "DROP COLUMN t_cell_basis"))
    with pg_engine.begin() as conn:
        STEPS[5](conn)
    with pg_engine.connect() as conn:
        cols = {c["name"]: c for c in sa.inspect(conn).get_columns("inverter")}
        daily = {c["name"] for c in sa.inspect(conn).get_columns("daily_inverter")}
    assert cols["commissioned"]["nullable"] and cols["t_module_sensor_id"]["nullable"]
    assert {"irradiance_basis", "t_cell_basis"} <= daily


# ---------------------------------------------------------------- v6: packed readings (#16)

def _old_readings(rng):
    """Readings as pre-v6 stores held them: several channels, irregular times, decimals, full
    doubles, a lifetime counter, two batches, NULL and recorded intervals."""
    out = []
    for ch in (1, 2, 3):
        ts = np.unique(rng.integers(1_577_836_800, 1_577_836_800 + 40 * 86_400, 3000)) // 300 * 300
        ts = np.unique(ts)
        v = {1: np.round(rng.normal(50, 30, ts.size), 2), 2: rng.normal(0, 1, ts.size),
             3: np.round(1.2e6 + np.cumsum(rng.uniform(0, 5, ts.size)), 3)}[ch]
        b = np.where(ts < 1_577_836_800 + 20 * 86_400, 1, 2)
        iv = np.where(rng.random(ts.size) < 0.5, 300, -1)
        out += list(zip([ch] * ts.size, ts.tolist(), v.tolist(), b.tolist(), iv.tolist(), strict=True))
    return out


def _check_moved(eng, old, with_interval):
    with eng.connect() as conn:
        assert current_version(conn) == schema.SCHEMA_VERSION
        assert not sa.inspect(conn).has_table("reading")
        note = conn.execute(sa.select(schema.schema_version.c.note)
                            .where(schema.schema_version.c.version == 6)).scalar()
        assert f"{len(old)} readings of 3 channels moved" in note and "sha256" in note
        for ch in (1, 2, 3):
            mine = [r for r in old if r[0] == ch]
            got = readings.read_rows(conn, ch, batches=True)
            # the input is the truth: every reading back bit for bit, with batch and interval
            assert got["ts_s"].tolist() == [r[1] for r in mine]
            assert got["value"].tolist() == [r[2] for r in mine]
            assert got["batch_id"].tolist() == [r[3] for r in mine]
            want_iv = [float(r[4]) if with_interval and r[4] > 0 else None for r in mine]
            assert [None if x != x else x for x in got["interval_s"].tolist()] == want_iv


def test_v2_store_readings_move_to_day_rows_without_losing_a_value(tmp_path):
    """A version-2 store (readings one per row, no interval_s yet) goes through v3..v6; the v6
    step moves every reading into reading_day, checks counts and a checksum, and drops
    the old table."""
    eng = sa.create_engine(f"sqlite:///{tmp_path}/v2.sqlite")
    old = _old_readings(np.random.default_rng(3))
    with eng.begin() as conn:
        schema.metadata.create_all(conn, tables=[t for t in schema.metadata.sorted_tables
                                                 if t.name != "reading_day"])
        conn.execute(sa.text("CREATE TABLE reading (channel_id INTEGER NOT NULL, ts_s INTEGER "
                             "NOT NULL, value FLOAT NOT NULL, batch_id INTEGER NOT NULL, "
                             "PRIMARY KEY (channel_id, ts_s)) WITHOUT ROWID"))
        conn.execute(sa.text("INSERT INTO reading VALUES (:c, :t, :v, :b)"),
                     [{"c": c, "t": t, "v": v, "b": b} for c, t, v, b, _i in old])
        conn.execute(schema.schema_version.insert().values(version=2, applied_utc="x", note="v2"))
    assert upgrade(eng) == schema.SCHEMA_VERSION
    _check_moved(eng, old, with_interval=False)


def _v5_store(eng, old):
    with eng.begin() as conn:
        conn.execute(schema.reading_day.delete())
        readings_to_old_layout(conn)  # the v5 reading table, empty
        conn.execute(sa.text("INSERT INTO reading (channel_id, ts_s, value, batch_id, interval_s) "
                             "VALUES (:c, :t, :v, :b, :i)"),
                     [{"c": c, "t": t, "v": v, "b": b, "i": i if i > 0 else None}
                      for c, t, v, b, i in old])
        conn.execute(schema.schema_version.delete())
        conn.execute(schema.schema_version.insert().values(version=5, applied_utc="x", note="v5"))


def test_v5_store_readings_move_to_day_rows(tmp_path):
    eng = make_engine(tmp_path / "v5.sqlite")
    old = _old_readings(np.random.default_rng(5))
    _v5_store(eng, old)
    eng.dispose()
    eng = sa.create_engine(f"sqlite:///{tmp_path}/v5.sqlite")
    assert upgrade(eng) == schema.SCHEMA_VERSION
    _check_moved(eng, old, with_interval=True)


def test_v5_store_readings_move_on_postgres(pg_engine):
    old = _old_readings(np.random.default_rng(6))
    _v5_store(pg_engine, old)
    assert upgrade(pg_engine) == schema.SCHEMA_VERSION
    _check_moved(pg_engine, old, with_interval=True)


def test_v6_step_refuses_a_lossy_move(tmp_path, monkeypatch):
    """If a packed channel did not read back equal, the step fails and the store stays at v5
    with its readings where they were (the step's transaction is rolled back)."""
    from db import daypack
    eng = make_engine(tmp_path / "v5.sqlite")
    old = _old_readings(np.random.default_rng(7))
    _v5_store(eng, old)
    real = daypack.pack
    monkeypatch.setattr(daypack, "pack", lambda ch, ts, v, iv, b: real(ch, ts, v + 1e-3, iv, b))
    with pytest.raises(MigrationError, match="differ from the stored ones"):
        upgrade(eng)
    with eng.connect() as conn:
        assert current_version(conn) == 5
        assert conn.execute(sa.text("SELECT count(*) FROM reading")).scalar() == len(old)


# ---------------------------------------------------------------- v7: sensor days (#16)

def test_v6_store_gains_the_sensor_day_columns_and_keeps_its_rows(tmp_path):
    """A v6 store (flag_day with the inverter columns only, one row kept) reaches v7: the
    sensors' day-judgement columns exist, the row is unchanged, and the new columns
    round-trip (a float array as bytes)."""
    from db.flags import read_flag_days
    from tests.helpers_store import add_site

    path = tmp_path / "v6.sqlite"
    eng = make_engine(path)
    with eng.begin() as conn:
        conn.execute(sa.text("DROP TABLE flag_day"))
        conn.execute(sa.text(
            "CREATE TABLE flag_day (site_id VARCHAR(64) NOT NULL, device_id VARCHAR(64) NOT NULL, "
            "day_no INTEGER NOT NULL, soiling_pi FLOAT, withheld_kwh FLOAT, "
            "clock_delta_min FLOAT, clock_clear BOOLEAN, PRIMARY KEY (site_id, device_id, day_no))"))
        add_site(conn, "s1")
        conn.execute(sa.text("INSERT INTO flag_day VALUES ('s1', 'inv1', 19000, 0.97, NULL, "
                             "-2.5, 1)"))
        conn.execute(schema.schema_version.delete())
        conn.execute(schema.schema_version.insert().values(version=6, applied_utc="x", note="v6"))
    eng.dispose()
    eng = sa.create_engine(f"sqlite:///{path}")
    assert upgrade(eng, target=7) == 7  # step 7 alone (step 8 is tested below)
    cols = {c["name"] for c in sa.inspect(eng).get_columns("flag_day")}
    assert {"valid_reason", "sky_ratio", "jump_ratio", "rain_mm", "amb_night_c",
            "amb_day_c"} <= cols
    with eng.begin() as conn:
        conn.execute(schema.flag_day.insert().values(
            site_id="s1", device_id="poa1", day_no=19000, valid_reason="stuck", sky_ratio=0.98,
            amb_night_c=np.array([1.5, -0.25]).astype("<f8").tobytes()))
    days = read_flag_days(eng, "s1").set_index("device_id")
    assert days.loc["inv1", "soiling_pi"] == 0.97 and days.loc["inv1", "clock_clear"] is True
    assert days.loc["poa1", "valid_reason"] == "stuck"
    assert days.loc["poa1", "amb_night_c"].tolist() == [1.5, -0.25]
    with eng.connect() as conn:
        notes = conn.execute(sa.select(schema.schema_version.c.note).where(
            schema.schema_version.c.version == 7)).scalar()
    assert "sensor" in notes


def test_v7_step_on_postgres_adds_the_sensor_day_columns(pg_engine):
    """The PostgreSQL branch of step 7 (BYTEA for the sample arrays) on a v6-shaped flag_day."""
    with pg_engine.begin() as conn:
        for c in ("valid_reason", "sky_ratio", "jump_ratio", "rain_mm", "amb_night_c",
                  "amb_day_c"):
            conn.execute(sa.text(f"ALTER TABLE flag_day DROP COLUMN {c}"))
        conn.execute(schema.schema_version.delete())
        conn.execute(schema.schema_version.insert().values(version=6, applied_utc="x", note="v6"))
    assert upgrade(pg_engine, target=7) == 7
    cols = {c["name"]: c["type"] for c in sa.inspect(pg_engine).get_columns("flag_day")}
    assert isinstance(cols["amb_night_c"], sa.LargeBinary)
    assert {"valid_reason", "sky_ratio", "jump_ratio", "rain_mm", "amb_day_c"} <= set(cols)


# ---------------------------------------------------------------- v8: packed inverter days (#16)

def _v7_flag_days(eng) -> None:
    """A store at v7: flag_day holds every device's days (two inverters, one sensor, one
    device of no site record); no flag_day_pack."""
    from tests.helpers_store import add_inverter, add_sensor, add_site

    with eng.begin() as conn:
        add_site(conn, "s1")
        add_sensor(conn, "s1", "poa1", "poa_wm2")
        add_sensor(conn, "s1", "tmod1", "t_module_c")
        for inv in ("inv1", "inv2"):
            add_inverter(conn, "s1", inv, poa_sensor_id="poa1", t_module_sensor_id="tmod1")
        conn.execute(sa.text("DROP TABLE flag_day_pack"))
        t = schema.flag_day
        blank = {c.name: None for c in t.columns}
        conn.execute(t.insert(), [{**blank, **r} for r in [
            dict(site_id="s1", device_id="inv1", day_no=19000, soiling_pi=0.97,
                 withheld_kwh=None, clock_delta_min=-2.5, clock_clear=True),
            dict(site_id="s1", device_id="inv1", day_no=19001, soiling_pi=None,
                 withheld_kwh=1.25, clock_delta_min=3.0, clock_clear=False),
            dict(site_id="s1", device_id="inv1", day_no=19002, soiling_pi=0.955,
                 withheld_kwh=None, clock_delta_min=None, clock_clear=None),
            dict(site_id="s1", device_id="inv2", day_no=18999, soiling_pi=1.01,
                 withheld_kwh=0.0, clock_delta_min=0.5, clock_clear=True),
            dict(site_id="s1", device_id="old9", day_no=19000, soiling_pi=0.9,
                 withheld_kwh=None, clock_delta_min=None, clock_clear=None),
            dict(site_id="s1", device_id="poa1", day_no=19000, valid_reason="",
                 sky_ratio=0.98, clock_delta_min=1.5, clock_clear=True),
            dict(site_id="s1", device_id="poa1", day_no=19001, valid_reason="stuck"),
            dict(site_id="s1", device_id="tmod1", day_no=19000,
                 amb_night_c=np.array([1.5, -0.25]).astype("<f8").tobytes()),
        ]])
        conn.execute(schema.schema_version.delete())
        conn.execute(schema.schema_version.insert().values(version=7, applied_utc="x", note="v7"))


def _assert_v8_keeps_the_days(eng) -> None:
    """Common practice for a migration: every value it moves reads back as before (the
    same frame from ``read_flag_days``, whole and with the sensors named), the inverters'
    days in one packed row each, the sensors' rows where they were."""
    from db.flags import read_flag_days

    with eng.begin() as conn:  # read the v7 rows (the reader wants the table, empty here)
        schema.flag_day_pack.create(conn)
    before = read_flag_days(eng, "s1")
    before_s = read_flag_days(eng, "s1", ["poa1", "tmod1"])
    with eng.begin() as conn:
        schema.flag_day_pack.drop(conn)  # as a v7 store: step 8 creates it
    assert upgrade(eng, target=8) == 8
    after, after_s = read_flag_days(eng, "s1"), read_flag_days(eng, "s1", ["poa1", "tmod1"])
    for b, a in ((before, after), (before_s, after_s)):
        assert len(a) == 8
        pd.testing.assert_frame_equal(
            a.drop(columns=["amb_night_c", "amb_day_c"]),
            b.drop(columns=["amb_night_c", "amb_day_c"]), check_exact=True)
        assert [type(v) for v in a["clock_clear"]] == [type(v) for v in b["clock_clear"]]
        assert [None if v is None else v.tolist() for v in a["amb_night_c"]] == \
            [None if v is None else v.tolist() for v in b["amb_night_c"]]
    inv1 = after[after["device_id"] == "inv1"]
    assert inv1["day_no"].tolist() == [19000, 19001, 19002]
    assert inv1["clock_clear"].tolist() == [True, False, None]
    assert inv1["withheld_kwh"].isna().tolist() == [True, False, True]
    with eng.connect() as conn:
        rows = conn.execute(sa.select(schema.flag_day.c.device_id)).scalars().all()
        packs = conn.execute(sa.select(schema.flag_day_pack.c.device_id,
                                       schema.flag_day_pack.c.n_days)).all()
        note = conn.execute(sa.select(schema.schema_version.c.note).where(
            schema.schema_version.c.version == 8)).scalar()
    assert sorted(rows) == ["poa1", "poa1", "tmod1"]
    assert sorted(packs) == [("inv1", 3), ("inv2", 1), ("old9", 1)]
    assert "moved 5 days of 3 inverters" in note


def test_v7_store_packs_the_inverters_days_and_reads_them_back_unchanged(tmp_path):
    path = tmp_path / "v7.sqlite"
    eng = make_engine(path)
    _v7_flag_days(eng)
    eng.dispose()
    _assert_v8_keeps_the_days(sa.create_engine(f"sqlite:///{path}"))


def test_v7_store_packs_the_inverters_days_on_postgres(pg_engine):
    _v7_flag_days(pg_engine)
    _assert_v8_keeps_the_days(pg_engine)


# ---------------------------------------------------------------- v9: the flags' daily pack (#16)

def _v8_then_upgrade(eng) -> None:
    """A v8 store (no flag_daily_pack) is brought to v9: the table exists and is empty (a
    cache the next flags run fills; until then the daily table is read, as before)."""
    with eng.begin() as conn:
        schema.flag_daily_pack.drop(conn)
        conn.execute(schema.schema_version.delete())
        conn.execute(schema.schema_version.insert().values(version=8, applied_utc="x", note="v8"))
    assert not sa.inspect(eng).has_table("flag_daily_pack")
    assert upgrade(eng) == schema.SCHEMA_VERSION
    assert sa.inspect(eng).has_table("flag_daily_pack")
    with eng.connect() as conn:
        assert conn.execute(sa.select(sa.func.count()).select_from(
            schema.flag_daily_pack)).scalar() == 0
        note = conn.execute(sa.select(schema.schema_version.c.note).where(
            schema.schema_version.c.version == 9)).scalar()
    assert "flag_daily_pack" in note


def test_v8_store_gets_the_empty_daily_pack(tmp_path):
    _v8_then_upgrade(make_engine(tmp_path / "v8.sqlite"))


def test_v8_store_gets_the_empty_daily_pack_on_postgres(pg_engine):
    _v8_then_upgrade(pg_engine)
