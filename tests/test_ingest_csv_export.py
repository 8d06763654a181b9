"""The CSV reader: dialects, line numbers, bad cells, header mapping, encodings.

Input text is hand-made in each test (or in tests/data); expected numbers are read off it.
"""

import gzip
import io

import numpy as np
import pytest
from numpy.testing import assert_allclose

from ingest.config import ColumnMap, Source, TimestampSpec
from ingest.errors import IngestError
from ingest.readers.csv_export import _parse, read_export


def src(**kw):
    cols = kw.pop("columns", (ColumnMap("A", "INV1", "p_ac_kw", "kW"),
                              ColumnMap("B", "POA1", "poa_wm2", "W/m2")))
    return Source(name="t", pattern="*.csv", timestamp=TimestampSpec(column="ts"),
                  columns=cols, **kw)


def parse(text, chunk_rows=1000, **kw):
    meta, chunks = _parse(io.StringIO(text), src(**kw), "x.csv", chunk_rows=chunk_rows)
    return meta, list(chunks)


def test_comma_delimited_fast_path():
    meta, ch = parse("ts,A,B\n2023-01-01 00:00:00,1.5,800\n2023-01-01 00:15:00,2.5,810\n")
    assert [c.header for c in meta.columns] == ["A", "B"]
    assert_allclose(ch[0].values, [[1.5, 800], [2.5, 810]])
    assert ch[0].line.tolist() == [2, 3]
    assert ch[0].ts_raw.tolist() == ["2023-01-01 00:00:00", "2023-01-01 00:15:00"]


@pytest.mark.parametrize("delim, dec, row", [
    (";", ",", "2023-01-01 00:00:00;1,5;800,25"),
    ("\t", ".", "2023-01-01 00:00:00\t1.5\t800.25"),
    ("\t", ",", "2023-01-01 00:00:00\t1,5\t800,25"),
    ("|", ".", "2023-01-01 00:00:00|1.5|800.25"),
])
def test_delimiters_and_decimal_separators(delim, dec, row):
    text = delim.join(["ts", "A", "B"]) + "\n" + row + "\n"
    _, ch = parse(text, delimiter=delim, decimal=dec)
    assert_allclose(ch[0].values, [[1.5, 800.25]])


@pytest.mark.parametrize("token", ["", "-", "NaN", "#N/A"])
def test_missing_value_tokens(token):
    _, ch = parse(f"ts,A,B\n2023-01-01 00:00:00,{token},5\n")
    assert np.isnan(ch[0].values[0, 0]) and ch[0].values[0, 1] == 5
    assert ch[0].bad_cells == []


def test_bad_cell_reported_with_line_and_column_others_kept():
    text = "ts,A,B\n2023-01-01 00:00:00,1,2\n2023-01-01 00:15:00,n/a,3\n"
    _, ch = parse(text)
    c = ch[0]
    assert c.values[1, 1] == 3 and np.isnan(c.values[1, 0])
    (row, col, raw, why), = c.bad_cells
    assert (int(c.line[row]), col, raw) == (3, 0, "n/a")
    assert why.startswith("value 'n/a' is not a number")


def test_decimal_point_where_comma_expected_is_bad():
    _, ch = parse("ts;A;B\n2023-01-01 00:00:00;1.5;2,5\n", delimiter=";", decimal=",")
    assert ch[0].values[0, 1] == 2.5
    assert ch[0].bad_cells[0][2] == "1.5"


def test_wrong_field_count_rejects_the_row():
    _, ch = parse("ts,A,B\n2023-01-01 00:00:00,1,2\n2023-01-01 00:15:00,1\n")
    assert ch[0].bad_rows == {1: "line has 2 fields, the header has 3"}


def test_skip_lines_unit_row_blank_lines_and_line_numbers_across_chunks():
    text = ("exported by logger\nsite X\nts,A,B\n,kW,W/m²\n"
            "2023-01-01 00:00:00,1,2\n\n2023-01-01 00:15:00,3,4\n2023-01-01 00:30:00,5,6\n")
    meta, ch = parse(text, chunk_rows=2, skip_lines=2, unit_row=True)
    assert meta.header_line == 3 and meta.units_seen == {"A": "kW", "B": "W/m²"}
    lines = np.concatenate([c.line for c in ch]).tolist()
    assert lines == [5, 7, 8]  # physical lines; the blank line 6 is not a row


def test_unit_row_contradicting_config_fails():
    with pytest.raises(IngestError) as e:
        parse("ts,A,B\n,W,W/m2\n2023-01-01 00:00:00,1,2\n", unit_row=True)
    assert str(e.value) == ("x.csv:2:A: the unit row says 'W' but the site config says unit = 'kW'; "
                            "fix the unit of this column in [[sources.columns]]")


def test_unmapped_and_missing_columns_fail_with_both_lists():
    with pytest.raises(IngestError) as e:
        parse("ts,A,C,D\n2023-01-01 00:00:00,1,2,3\n")
    assert str(e.value) == (
        "x.csv:1: columns do not match the site config (unmapped columns: 'C', 'D'; "
        "configured but missing: 'B'); map each column in [[sources.columns]] (header, "
        "device, quantity, unit) or list it in ignore_columns")


def test_ignore_columns_and_missing_configured_column():
    meta, ch = parse("ts,A,Status\n2023-01-01 00:00:00,1,OK\n", ignore_columns=("Status",))
    assert meta.missing == ["B"] and meta.ignored == ["Status"]
    assert_allclose(ch[0].values, [[1.0]])


def test_missing_timestamp_column():
    with pytest.raises(IngestError, match=r"x.csv:1: no timestamp column 'ts'; the header has: 'time', 'A'"):
        parse("time,A\n2023,1\n")


def test_utf8_bom_and_latin1_and_utf16_files(tmp_path):
    body = "ts,A,B\n2023-01-01 00:00:00,1,2\n"
    for enc, cfg_enc in (("utf-8-sig", "utf-8"), ("latin-1", "latin-1"), ("utf-16", "utf-16")):
        p = tmp_path / f"f_{enc}.csv"
        p.write_bytes(body.encode(enc))
        meta, chunks = read_export(p, src(encoding=cfg_enc))
        assert meta.header[0] == "ts"
        assert_allclose(next(chunks).values, [[1, 2]])


def test_decode_error_suggests_latin1(tmp_path):
    p = tmp_path / "site_a.csv"
    p.write_bytes(b"ts,A,B\n2023-01-01 00:00:00,1,2\n" + "Température,1,2\n".encode("latin-1"))
    meta, chunks = read_export(p, src())
    with pytest.raises(IngestError) as e:
        list(chunks)
    msg = str(e.value)
    assert msg.startswith("site_a.csv:3: cannot be decoded as utf-8")
    assert 'set encoding = "latin-1"' in msg


def test_utf16_read_as_utf8_suggests_utf16(tmp_path):
    p = tmp_path / "u16.csv"
    p.write_bytes("ts,A,B\n2023-01-01 00:00:00,1,2\n".encode("utf-16"))
    with pytest.raises(IngestError, match='set encoding = "utf-16"'):
        read_export(p, src())


def test_gzip_recognised_by_magic_bytes(tmp_path):
    p = tmp_path / "export.dat"  # no .gz suffix on purpose
    p.write_bytes(gzip.compress(b"ts,A,B\n2023-01-01 00:00:00,1,2\n"))
    meta, chunks = read_export(p, src())
    assert meta.compressed
    assert_allclose(next(chunks).values, [[1, 2]])


def test_empty_file(tmp_path):
    p = tmp_path / "empty.csv"
    p.write_bytes(b"")
    with pytest.raises(IngestError, match="empty.csv:1: file is empty: expected a header line"):
        read_export(p, src())


def test_truncated_gzip_is_an_ingest_error(tmp_path):
    data = gzip.compress(("ts,A,B\n" + "2023-01-01 00:00:00,1,2\n" * 5000).encode())
    p = tmp_path / "cut.csv.gz"
    p.write_bytes(data[: len(data) // 2])
    with pytest.raises(IngestError, match=r"cut.csv.gz:\d+: cannot be read: .*export it again"):
        meta, chunks = read_export(p, src())
        list(chunks)
