"""End-to-end loads of the hand-made dialect files in tests/data into a real SQLite file.

Expected values are read off the files (tests/data/make_dialect_files.py) and converted by
hand with the SI conversions (BIPM SI brochure, 9th ed.); UTC instants of local times come
from the tz database through zoneinfo.
"""

import datetime as dt
import json
import shutil
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest
import sqlalchemy as sa
from numpy.testing import assert_allclose

from db import readings
from db.ingest_log import ingest_log, rejected_rows, site_summary
from ingest.config import load_site_config
from ingest.load import ingest_file, ingest_paths, match_source, touched_ranges
from tests.helpers_store import stored_readings

DATA = Path(__file__).resolve().parent / "data"
MADRID = ZoneInfo("Europe/Madrid")


def utc(y, mo, d, h, mi):
    return int(dt.datetime(y, mo, d, h, mi, tzinfo=dt.UTC).timestamp())


def madrid(y, mo, d, h, mi, fold=0):
    return int(dt.datetime(y, mo, d, h, mi, tzinfo=MADRID, fold=fold).timestamp())


def series(engine, site, device, quantity):
    df = stored_readings(engine, site, device, quantity)
    return dict(zip(df.ts_s.tolist(), df.value.tolist(), strict=True))


def n_readings(engine):
    with engine.connect() as conn:
        return readings.count_readings(conn)


@pytest.fixture
def dialects():
    return load_site_config(DATA / "dialects.toml")


def load_one(engine, cfg, name, **kw):
    path = DATA / name
    (res,) = ingest_paths(engine, cfg, [path], **kw)
    c = res.counts
    if res.status == "loaded":
        assert c["rows_read"] == c["rows_loaded"] + c["rows_duplicate"] + c["rows_rejected"]
    return res


def test_semicolon_decimal_comma_latin1_skip_lines_unit_row(engine, dialects):
    res = load_one(engine, dialects, "d_semicolon_latin1.csv")
    assert res.status == "loaded", res.message
    # labels 12:15..13:00 at +02:00 are interval ends; starts are 10:00..10:45 UTC
    t = [utc(2023, 6, 2, 10, m) for m in (0, 15, 30, 45)]
    assert series(engine, "dialects", "INV1", "p_ac_kw") == {t[0]: 50.5, t[1]: 52.0005, t[3]: 54.0}
    assert series(engine, "dialects", "INV2", "p_ac_kw") == {t[0]: 51.0, t[2]: 53.0, t[3]: 54.0}
    poa = series(engine, "dialects", "POA1", "poa_wm2")  # kW/m² x 1000
    assert_allclose([poa[x] for x in t], [800.0, 825.0, 850.0, 900.0])
    assert res.notes["unit_row"]["Einstrahlung"] == "kW/m²"
    assert res.counts == {"rows_read": 4, "rows_loaded": 4, "rows_duplicate": 0, "rows_rejected": 0,
                          "values_loaded": 14, "values_duplicate": 0, "values_conflict": 0,
                          "values_rejected": 0}
    assert res.interval_s == "900"


def test_utf16_tab_epoch_megawatt_kelvin(engine, dialects):
    res = load_one(engine, dialects, "d_utf16_tab.txt")
    assert res.status == "loaded", res.message
    assert series(engine, "dialects", "INV1", "p_ac_kw") == pytest.approx(
        {1685700000: 50.5, 1685700300: 51.0})  # 0.0505 MW = 50.5 kW
    assert series(engine, "dialects", "TMOD1", "t_module_c") == pytest.approx(
        {1685700000: 40.5, 1685700300: 41.0, 1685700600: 41.5})  # K - 273.15


def test_utf8_bom_iso8601_fahrenheit(engine, dialects):
    res = load_one(engine, dialects, "d_bom.csv")
    assert res.status == "loaded", res.message
    t = [utc(2023, 6, 2, 10, m) for m in (0, 5, 10)]
    # (104 - 32) x 5/9 = 40; (105.8 - 32) x 5/9 = 41; (107.6 - 32) x 5/9 = 42
    assert series(engine, "dialects", "TMOD1", "t_module_c") == pytest.approx(dict(zip(t, [40.0, 41.0, 42.0], strict=True)))


def test_gzip(engine, dialects):
    res = load_one(engine, dialects, "d_gzip.csv.gz")
    assert res.status == "loaded" and res.notes["compressed"] is True
    assert series(engine, "dialects", "INV2", "p_ac_kw") == {utc(2023, 6, 3, 10, 0): 61.0,
                                                          utc(2023, 6, 3, 10, 15): 63.0}


def test_dst_autumn_repeated_hour_end_labels(engine, dialects):
    res = load_one(engine, dialects, "d_dst_autumn.csv")
    labels = [madrid(2023, 10, 29, 1, 30), madrid(2023, 10, 29, 2, 0, 0), madrid(2023, 10, 29, 2, 30, 0),
              madrid(2023, 10, 29, 2, 0, 1), madrid(2023, 10, 29, 2, 30, 1), madrid(2023, 10, 29, 3, 0),
              madrid(2023, 10, 29, 3, 30)]
    starts = [x - 1800 for x in labels]  # interval-end labels, 30-min intervals
    assert series(engine, "dialects", "INV1", "p_ac_kw") == dict(zip(starts, [1.0, 2, 3, 4, 5, 6, 7], strict=True))
    assert res.notes["dst_repeated_hour"] == {"2023-10-29": {"summer": 2, "standard": 2, "rule": "infer"}}
    assert res.interval_s == "1800"


def test_dst_spring_gap_rejected_and_reported(engine, dialects):
    res = load_one(engine, dialects, "d_dst_spring.csv")
    assert res.counts["rows_rejected"] == 1 and res.counts["rows_loaded"] == 5
    s = series(engine, "dialects", "INV1", "p_ac_kw")
    # 03:00 CEST (01:00 UTC) ends the interval that started at 01:30 CET (00:30 UTC)
    assert s[madrid(2023, 3, 26, 3, 0) - 1800] == 3.0
    assert madrid(2023, 3, 26, 3, 0) - 1800 == utc(2023, 3, 26, 0, 30)
    assert 9.0 not in s.values()
    rej = rejected_rows(engine, "dialects")
    assert rej.line_no.tolist() == [4] and rej.column_name.isna().all()
    assert "2023-03-26 02:30:00 does not exist in Europe/Madrid" in rej.reason[0]
    assert rej.raw_text[0] == "2023-03-26 02:30,9.0"
    assert res.notes["dst_gap_rejected"] == {"2023-03-26": 1}


def test_counter_to_interval_energy_with_rollover_and_reset(engine, dialects):
    res = load_one(engine, dialects, "d_counter.csv")
    e = series(engine, "dialects", "INV1", "e_ac_kwh")
    # starts 09:45..11:00; 9995-9990 = 5; 2+10000-9995 = 7; 10-2 = 8; 10 -> 0.5 reset; 5.5-0.5 = 5
    assert e == pytest.approx({utc(2023, 6, 4, 10, 0): 5.0, utc(2023, 6, 4, 10, 15): 7.0,
                               utc(2023, 6, 4, 10, 30): 8.0, utc(2023, 6, 4, 11, 0): 5.0})
    assert len(series(engine, "dialects", "INV1", "e_ac_total_kwh")) == 6
    inv = res.notes["counters"]["INV1"]
    assert inv["resets"]["count"] == 1 and inv["rollovers"]["count"] == 1
    assert inv["resets"]["first"][0]["ts_s"] == utc(2023, 6, 4, 10, 45)
    assert res.notes["e_ac_kwh_derived"] == 4


def test_counter_continues_from_stored_reading(engine, dialects, tmp_path):
    a = tmp_path / "d_counter.csv"
    a.write_text("Time,INV1_E\n2023-06-04 10:00,100.0\n2023-06-04 10:15,101.0\n")
    load_one_path = ingest_paths(engine, dialects, [a])[0]
    assert load_one_path.status == "loaded"
    b = tmp_path / "b" / "d_counter.csv"
    b.parent.mkdir()
    b.write_text("Time,INV1_E\n2023-06-04 10:30,103.0\n2023-06-04 10:45,106.0\n")
    assert ingest_paths(engine, dialects, [b])[0].status == "loaded"
    e = series(engine, "dialects", "INV1", "e_ac_kwh")
    # 101 -> 103 across the two files is the 10:15-10:30 interval: 2 kWh
    assert e == pytest.approx({utc(2023, 6, 4, 10, 0): 1.0, utc(2023, 6, 4, 10, 15): 2.0,
                               utc(2023, 6, 4, 10, 30): 3.0})


def test_interval_changes_mid_file(engine, dialects):
    res = load_one(engine, dialects, "d_interval_change.csv")
    assert res.interval_s == "900->300"
    starts = sorted(series(engine, "dialects", "INV1", "p_ac_kw"))
    assert starts == [utc(2023, 6, 5, 9, 45), utc(2023, 6, 5, 10, 0), utc(2023, 6, 5, 10, 15),
                      utc(2023, 6, 5, 10, 30), utc(2023, 6, 5, 10, 35), utc(2023, 6, 5, 10, 40)]


def test_clock_correction_recorded_in_notes(engine, dialects):
    load_one(engine, dialects, "d_clock.csv")
    assert sorted(series(engine, "dialects", "INV1", "p_ac_kw")) == [
        utc(2023, 6, 6, 9, 0), utc(2023, 6, 6, 9, 15), utc(2023, 6, 6, 9, 30),
        utc(2023, 6, 6, 10, 45), utc(2023, 6, 6, 11, 0)]
    log = ingest_log(engine, "dialects")
    notes = json.loads(log.notes_json[0])
    assert notes["clock_corrections"][0]["rows"] == 3
    assert notes["clock_corrections"][0]["note"] == "logger an hour ahead"


def test_long_layout(engine, dialects):
    res = load_one(engine, dialects, "d_long.csv")
    assert res.counts["rows_read"] == 6 and res.counts["rows_loaded"] == 4
    assert res.counts["rows_rejected"] == 2 and res.counts["values_rejected"] == 2
    assert series(engine, "dialects", "INV1", "p_ac_kw") == {utc(2023, 6, 7, 10, 0): 50.0,
                                                          utc(2023, 6, 7, 10, 15): 52.0}
    rej = rejected_rows(engine, "dialects")
    assert rej.line_no.tolist() == [6, 7]
    assert "unknown device 'INV9'" in rej.reason[0]
    assert rej.reason[1].startswith("value 'bad' is not a number")


# ---------------------------------------------------------------- accounting and rules

def test_row_accounting_and_rejected_values(engine):
    cfg = load_site_config(DATA / "site_basic.toml")
    (res,) = ingest_paths(engine, cfg, [DATA / "basic_2023-06-01.csv"])
    # 6 rows: line 4 has no values, line 6 a bad timestamp -> 2 rejected; 4 loaded.
    # Line 3 INV2 'n/a' and line 5 Irr -50 W/m² are rejected values of loaded rows.
    c = res.counts
    assert (c["rows_read"], c["rows_loaded"], c["rows_duplicate"], c["rows_rejected"]) == (6, 4, 0, 2)
    assert c["values_rejected"] == 2 and c["values_loaded"] == 14
    rej = rejected_rows(engine, "testsite")
    assert list(zip(rej.line_no, rej.column_name.fillna(""), strict=True)) == [
        (3, "INV2_PAC"), (4, ""), (5, "Irr"), (6, "")]
    assert rej.raw_text.tolist()[2] == "-50"
    assert n_readings(engine) == 14


def test_unchanged_file_does_nothing(engine):
    cfg = load_site_config(DATA / "site_basic.toml")
    ingest_paths(engine, cfg, [DATA / "basic_2023-06-01.csv"])
    before = n_readings(engine)
    (res,) = ingest_paths(engine, cfg, [DATA / "basic_2023-06-01.csv"])
    assert res.status == "unchanged" and "same content (SHA-256) as batch 1" in res.message
    assert n_readings(engine) == before
    assert ingest_log(engine, "testsite").status.tolist() == ["unchanged", "loaded"]
    assert touched_ranges([res]) == {}


def test_overlapping_exports_last_wins_conflicts_counted(engine, tmp_path):
    cfg = load_site_config(DATA / "site_basic.toml")
    a = tmp_path / "basic_a.csv"
    a.write_text("Time,INV1_PAC,INV2_PAC,Irr,TMod\n"
                 "2023-06-01 10:00,50,51,800,40\n2023-06-01 10:15,52,53,810,41\n")
    b = tmp_path / "basic_b.csv"
    b.write_text("Time,INV1_PAC,INV2_PAC,Irr,TMod\n"
                 "2023-06-01 10:15,52,99,810,41\n2023-06-01 10:30,54,55,820,42\n")
    ra, rb = ingest_paths(engine, cfg, [a, b])
    # b's 10:15 row: INV2 53 -> 99 is a conflict, the 3 other values are duplicates
    assert rb.counts["values_conflict"] == 1 and rb.counts["values_duplicate"] == 3
    assert rb.counts["values_loaded"] == 5  # 1 changed + 4 new at 10:30
    assert (rb.counts["rows_loaded"], rb.counts["rows_duplicate"]) == (2, 0)
    assert series(engine, "testsite", "INV2", "p_ac_kw")[utc(2023, 6, 1, 10, 15)] == 99.0
    # a file fully contained in what is stored: every row is a duplicate
    c = tmp_path / "basic_c.csv"
    c.write_text("Time,INV1_PAC,INV2_PAC,Irr,TMod\n2023-06-01 10:30,54,55,820,42\n")
    (rc,) = ingest_paths(engine, cfg, [c])
    assert (rc.counts["rows_duplicate"], rc.counts["values_duplicate"]) == (1, 4)
    assert rc.touched is None


def test_repeated_timestamp_within_file(engine, tmp_path):
    cfg = load_site_config(DATA / "site_basic.toml")
    f = tmp_path / "basic_dup.csv"
    f.write_text("Time,INV1_PAC,INV2_PAC,Irr,TMod\n"
                 "2023-06-01 10:00,50,51,800,40\n"
                 "2023-06-01 10:15,52,53,810,41\n"
                 "2023-06-01 10:15,52,53,810,41\n"   # identical: duplicate
                 "2023-06-01 10:00,50,77,800,40\n"   # different: rejected
                 "2023-06-01 10:30,54,55,820,42\n")
    for chunk_rows in (1000, 2):  # also across chunk boundaries
        eng = sa.create_engine(f"sqlite:///{tmp_path}/c{chunk_rows}.sqlite")
        from db.migrate import upgrade
        upgrade(eng)
        res = ingest_file(eng, cfg, cfg.sources[0], f, chunk_rows=chunk_rows)
        c = res.counts
        assert (c["rows_loaded"], c["rows_duplicate"], c["rows_rejected"]) == (3, 1, 1), chunk_rows
        assert series(eng, "testsite", "INV2", "p_ac_kw")[utc(2023, 6, 1, 10, 0)] == 51.0
        rej = rejected_rows(eng, "testsite")
        assert rej.line_no.tolist() == [5] and "duplicate timestamp" in rej.reason[0]
        eng.dispose()


def test_unmappable_file_fails_and_store_unchanged(engine, tmp_path):
    cfg = load_site_config(DATA / "site_basic.toml")
    ingest_paths(engine, cfg, [DATA / "basic_2023-06-01.csv"])
    before = n_readings(engine)
    bad = tmp_path / "basic_bad.csv"
    bad.write_text("Time,INV1_PAC,PAC3,Irr\n2023-06-01 12:00,1,2,3\n")
    (res,) = ingest_paths(engine, cfg, [bad])
    assert res.status == "failed"
    assert res.message == (
        "basic_bad.csv:1: columns do not match the site config (unmapped columns: 'PAC3'; "
        "configured but missing: 'INV2_PAC', 'TMod'); map each column in [[sources.columns]] "
        "(header, device, quantity, unit) or list it in ignore_columns")
    assert n_readings(engine) == before
    log = ingest_log(engine, "testsite")
    assert log.status.tolist() == ["failed", "loaded"] and log.message[0] == res.message


def test_decode_error_mid_file_rolls_back(engine, dialects, tmp_path):
    # a Latin-1 byte far into a UTF-8 file, after several chunks were written
    body = "Time,INV1_PAC\n" + "".join(f"2023-06-05 {h:02d}:{m:02d},{h}\n"
                                       for h in range(24) for m in range(0, 60, 5))
    p = tmp_path / "d_interval_change.csv"
    p.write_bytes(body.encode() + "2023-06-06 00:00,é\n".encode("latin-1"))
    res = ingest_file(engine, dialects, match_source(dialects, p), p, chunk_rows=50)
    assert res.status == "failed"
    assert res.message.startswith("d_interval_change.csv:290: cannot be decoded as utf-8")
    assert n_readings(engine) == 0


def test_summary_frame(engine, dialects):
    for name in ("d_gzip.csv.gz", "d_dst_spring.csv"):
        load_one(engine, dialects, name)
    s = site_summary(engine).iloc[0]
    assert (s.site_id, s.n_inverters, s.n_sensors) == ("dialects", 2, 3)
    assert s.batches_loaded == 2 and s.rows_rejected == 1
    assert s.first_utc == dt.datetime(2023, 3, 25, 23, 30, tzinfo=dt.UTC)


def test_default_paths_from_config_folder(engine, tmp_path):
    shutil.copy(DATA / "site_basic.toml", tmp_path / "site.toml")
    shutil.copy(DATA / "basic_2023-06-01.csv", tmp_path / "basic_2023-06-01.csv")
    cfg = load_site_config(tmp_path / "site.toml")
    (res,) = ingest_paths(engine, cfg)
    assert res.status == "loaded" and res.file_name == "basic_2023-06-01.csv"
