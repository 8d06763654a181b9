"""Ingest hardening (issue #12): timestamps, value limits, NaN spellings, reader edge cases."""

import datetime as dt
import gzip
import re
import shutil
from pathlib import Path

import numpy as np
import pytest
import sqlalchemy as sa
from click.testing import CliRunner

from heliaudit.cli import main
from ingest.config import TimestampSpec
from ingest.timestamps import NAT, TimestampConverter
from tests.helpers_store import stored_readings


def test_rows_outside_the_plausible_date_window_are_rejected_with_the_reason():
    spec = TimestampSpec(format="%Y-%m-%d %H:%M", zone="UTC", earliest=dt.date(2020, 1, 1),
                         latest=dt.date(2024, 12, 31))
    c = TimestampConverter(spec, "UTC")
    out, why = c.convert(np.array(["2019-12-31 23:45", "2020-01-01 00:00", "2024-12-31 23:45",
                                   "2025-01-01 00:00", "2261-06-01 00:00"], dtype=object))
    assert (out == NAT).tolist() == [True, False, False, True, True]
    assert "outside the plausible dates 2020-01-01 .. 2024-12-31" in why[0]
    assert why[1] is None and why[2] is None


def test_default_window_rejects_far_future_rows():
    c = TimestampConverter(TimestampSpec(format="%Y-%m-%d %H:%M", zone="UTC"), "UTC")
    out, why = c.convert(np.array(["2023-06-01 12:00", "2261-01-01 00:00", "1970-01-01 00:15"],
                                  dtype=object))
    assert out[0] != NAT and out[1] == NAT and out[2] == NAT
    assert "plausible dates 1990-01-01" in why[1]


# ---------------------------------------------------------------- through the CLI

DATA = Path(__file__).resolve().parent / "data"
HEAD = "Time,INV1_PAC,INV2_PAC,Irr,TMod\n"


def rows(n, start="2023-06-01 00:00", step_min=15):
    t0 = np.datetime64(start.replace(" ", "T"))
    return [f"{str(t0 + k * np.timedelta64(step_min, 'm'))[:16].replace('T', ' ')},"
            f"{10 + k % 7},{11 + k % 5},{300 + k},{25.5}" for k in range(n)]


@pytest.fixture
def site(tmp_path):
    shutil.copy(DATA / "site_basic.toml", tmp_path / "site.toml")
    return tmp_path


def ingest(site, name, data: bytes | str, config="site.toml"):
    f = site / name
    f.write_bytes(data.encode("utf-8") if isinstance(data, str) else data)
    r = CliRunner().invoke(main, ["--db", str(site / "s.sqlite"), "ingest", "--no-compute",
                                  str(site / config), str(f)], catch_exceptions=False)
    assert "Traceback" not in r.output and "Aborted!" not in r.output, r.output
    return r


def counts_of(output):
    m = re.search(r": (\d+) rows: (\d+) loaded, (\d+) duplicate, (\d+) rejected(?:, (\d+) blank)?",
                  output)
    assert m, output
    return [int(x or 0) for x in m.groups()]


def stored(site, quantity=None):
    """The stored readings (db.readings read path) as a DataFrame."""
    eng = sa.create_engine(f"sqlite:///{site / 's.sqlite'}")
    out = stored_readings(eng, quantity=quantity)
    eng.dispose()
    return out


def test_stray_quote_rejects_one_line_and_swallows_nothing(site):
    body = rows(300)
    body[4] = body[4].replace(",1", ',"1', 1)  # a quote opening a field, never closed
    r = ingest(site, "basic_q.csv", HEAD + "\n".join(body) + "\n")
    read, loaded, dup, rej, blank = counts_of(r.output)
    assert (read, loaded, rej) == (300, 299, 1)
    assert "basic_q.csv:6: a quote" in r.output


def test_lone_cr_and_huge_field_reject_their_lines_only(site):
    body = rows(20)
    body[2] = body[2][:5] + "\r" + body[2][5:]
    body[7] = body[7].split(",")[0] + ',"' + "9" * 140_000 + '",1,300,25'
    r = ingest(site, "basic_cr.csv", HEAD + "\n".join(body) + "\n")
    read, loaded, dup, rej, blank = counts_of(r.output)
    assert (read, loaded, rej) == (20, 18, 2)
    assert "basic_cr.csv:4: a carriage return (CR) inside the line" in r.output


def test_whitespace_only_lines_are_counted_as_blank(site):
    body = rows(10)
    text = HEAD + "\n".join(body[:3] + ["\f", "\u00a0 ", " \v", ""] + body[3:]) + "\n"
    r = ingest(site, "basic_ws.csv", text)
    read, loaded, dup, rej, blank = counts_of(r.output)
    assert (read, loaded, rej, blank) == (10, 10, 0, 4)
    assert r.exit_code == 0


@pytest.mark.parametrize("damage", ["corrupt", "truncated", "tiny"])
def test_damaged_gzip_is_one_error_line(site, damage):
    data = gzip.compress((HEAD + "\n".join(rows(2000)) + "\n").encode())
    if damage == "corrupt":
        data = data[:200] + bytes([data[200] ^ 0xFF]) + data[201:]
    elif damage == "truncated":
        data = data[: len(data) // 2]
    else:
        data = data[:5]
    r = ingest(site, "basic_z.csv.gz", data)
    assert r.exit_code == 1
    assert re.search(r"basic_z\.csv\.gz:\d+: cannot be read", r.output), r.output
    assert len(stored(site)) == 0  # nothing of the damaged file is kept


def test_utf16_without_bom_is_one_error_line_with_a_hint(site):
    cfg = (site / "site.toml").read_text().replace('name = "scada"', 'name = "scada"\nencoding = "utf-16"')
    (site / "site16.toml").write_text(cfg)
    r = ingest(site, "basic_u.csv", (HEAD + "\n".join(rows(5)) + "\n").encode("utf-16-le"),
               config="site16.toml")
    assert r.exit_code == 1
    assert "basic_u.csv:1: cannot be decoded as utf-16" in r.output and "utf-16-le" in r.output


def test_years_outside_the_window_are_rejected_not_a_traceback(site):
    body = rows(10)
    body[3] = "1500" + body[3][4:]
    body[5] = "2300" + body[5][4:]
    body[9] = "2261" + body[9][4:]  # the row that once made the recompute span 240 years
    r = ingest(site, "basic_y.csv", HEAD + "\n".join(body) + "\n")
    read, loaded, dup, rej, blank = counts_of(r.output)
    assert (loaded, rej) == (7, 3)
    assert "outside the plausible dates 1990-01-01" in r.output


def test_nan_spellings_are_missing_only_when_configured(site):
    body = rows(6)
    for k, tok in enumerate(["nAn", "NAN", "-nan"]):
        c = body[k].split(",")
        c[1] = tok
        body[k] = ",".join(c)
    c = body[4].split(",")
    c[1] = "NaN"  # configured (default missing_values)
    body[4] = ",".join(c)
    r = ingest(site, "basic_n.csv", HEAD + "\n".join(body) + "\n")
    assert r.output.count("is not a number") == 3  # nAn, NAN, -nan; NaN is configured as missing
    assert "'-nan' is not a number" in r.output
    n = len(stored(site, "p_ac_kw"))
    assert n == 12 - 4  # 6 rows x 2 inverters, 4 INV1 values not loaded


def test_irradiance_and_counter_limits_both_ways(site):
    body = rows(6)
    for k, g in enumerate(["9999", "1e300", "-500", "1700"]):
        c = body[k].split(",")
        c[3] = g
        body[k] = ",".join(c)
    r = ingest(site, "basic_g.csv", HEAD + "\n".join(body) + "\n")
    assert "irradiance above 2141.5" in r.output and "irradiance below -10" in r.output
    vals = stored(site, "poa_wm2").value.tolist()
    assert 1700.0 in vals and max(vals) <= 2141.5 and min(vals) >= -10  # cloud enhancement kept


def test_file_without_a_usable_row_exits_1(site):
    body = ["x" + b[1:] for b in rows(5)]
    r = ingest(site, "basic_bad.csv", HEAD + "\n".join(body) + "\n")
    assert r.exit_code == 1
    assert "no usable row" in r.output and "5 rows rejected" in r.output


def test_mixed_offset_rows_are_rejected_not_shifted(site):
    cfg = (site / "site.toml").read_text().replace('format = "%Y-%m-%d %H:%M", zone = "UTC"',
                                                   'format = "iso8601", zone = "+02:00"')
    (site / "siso.toml").write_text(cfg)
    body = ["2023-06-01T10:00:00+02:00,1,1,300,25", "2023-06-01T10:15:00,1,1,300,25",
            "2023-06-01T10:30:00+02:00,1,1,300,25", "2023-06-01T10:45:00+02:00,1,1,300,25"]
    r = ingest(site, "basic_iso.csv", HEAD + "\n".join(body) + "\n", config="siso.toml")
    read, loaded, dup, rej, blank = counts_of(r.output)
    assert (loaded, rej) == (3, 1)
    assert "has no UTC offset, unlike the file's first timestamp" in r.output
    ts = sorted(set(stored(site).ts_s.tolist()))
    assert ts[0] == 1685606400  # 2023-06-01 08:00 UTC = 10:00 +02:00


def test_row_after_a_gap_never_takes_the_gap_as_its_interval(site):
    cfg = (site / "site.toml").read_text().replace('label = "start"', 'label = "end"')
    (site / "send.toml").write_text(cfg)
    body = rows(20) + ["2023-06-02 12:00,10,11,300,25.5"]  # a lone row 1 day 7 hours later
    r = ingest(site, "basic_gap.csv", HEAD + "\n".join(body) + "\n", config="send.toml")
    assert counts_of(r.output)[1] == 21
    last = int(stored(site).ts_s.max())
    # interval-end label 12:00 with the file's 15-min interval: the interval starts at 11:45
    assert last == 1685706300  # 2023-06-02 11:45 UTC (not 2023-06-01 04:45, the gap's start)
    assert "interval 900 s" in r.output


@pytest.mark.postgres
def test_nul_bytes_and_odd_text_in_an_export_on_postgres(pg_engine, tmp_path):
    """PostgreSQL text cannot hold NUL: rejected lines keep their text with U+FFFD instead."""
    from ingest.config import load_site_config
    from ingest.load import ingest_paths

    body = rows(5)
    body[1] = body[1].replace(",", ",\x00", 1)
    body[2] = "\x00garbage\ud800"[:8]
    f = tmp_path / "basic_nul.csv"
    f.write_bytes((HEAD + "\n".join(body) + "\n").encode("utf-8", "surrogatepass")
                  .replace(b"\xed\xa0\x80", b"\xff"))
    cfg = (DATA / "site_basic.toml").read_text().replace('name = "scada"',
                                                         'name = "scada"\nencoding = "latin-1"')
    (tmp_path / "site.toml").write_text(cfg)
    (res,) = ingest_paths(pg_engine, load_site_config(tmp_path / "site.toml"), [f])
    assert res.status == "loaded", res.message
    # the NUL before a value rejects that value; the garbage line is a rejected row
    assert (res.counts["rows_rejected"], res.counts["values_rejected"]) == (1, 1)
    with pg_engine.connect() as c:
        raw = c.execute(sa.text("SELECT raw_text FROM rejected_row ORDER BY line_no")).scalars().all()
    assert len(raw) == 2 and all("\x00" not in x for x in raw) and "\ufffd" in raw[0]


def test_offset_decision_is_kept_for_the_whole_source(site):
    cfg = (site / "site.toml").read_text().replace('format = "%Y-%m-%d %H:%M", zone = "UTC"',
                                                   'format = "iso8601", zone = "+02:00"')
    (site / "siso.toml").write_text(cfg)
    first = ["2023-06-01T10:00:00+02:00,1,1,300,25", "2023-06-01T10:15:00+02:00,1,1,300,25"]
    assert ingest(site, "basic_a.csv", HEAD + "\n".join(first) + "\n", config="siso.toml").exit_code == 0
    later = ["2023-06-02T10:00:00,1,1,300,25", "2023-06-02T10:15:00,1,1,300,25"]
    r = ingest(site, "basic_b.csv", HEAD + "\n".join(later) + "\n", config="siso.toml")
    assert r.exit_code == 1 and counts_of(r.output)[3] == 2  # both rejected, none shifted
    assert "has no UTC offset, unlike earlier files of this source" in r.output
