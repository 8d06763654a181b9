"""Timestamps to UTC interval starts, checked against the tz database through zoneinfo.

Europe/Madrid (CET/CEST, EU rule: change at 01:00 UTC on the last Sunday of March/October):
2023-03-26 02:00 local does not exist (clocks go 02:00 CET -> 03:00 CEST); on 2023-10-29
the wall times 02:00-02:59 occur twice (03:00 CEST -> 02:00 CET).
"""

import datetime as dt
from zoneinfo import ZoneInfo

import numpy as np
import pytest

from ingest.config import ClockCorrection, TimestampSpec
from ingest.timestamps import NAT, TimestampConverter, describe_intervals, infer_intervals

MADRID = ZoneInfo("Europe/Madrid")


def zi(y, mo, d, h, mi, fold=0):
    """UTC epoch seconds of a Madrid wall time, from zoneinfo (the reference)."""
    return int(dt.datetime(y, mo, d, h, mi, tzinfo=MADRID, fold=fold).timestamp())


def conv(raw, **spec):
    c = TimestampConverter(TimestampSpec(**spec), "Europe/Madrid")
    out, why = c.convert(np.array(raw, dtype=object))
    return c, out, why


def test_summer_and_winter_offsets_match_zoneinfo():
    _, out, why = conv(["2023-07-01 12:00:00", "2023-01-15 12:00:00"])
    assert out.tolist() == [zi(2023, 7, 1, 12, 0), zi(2023, 1, 15, 12, 0)]
    assert out[0] == int(dt.datetime(2023, 7, 1, 10, 0, tzinfo=dt.UTC).timestamp())  # CEST = UTC+2
    assert all(w is None for w in why)


def test_autumn_repeated_hour_infer_from_order():
    raw = ["2023-10-29 01:30:00", "2023-10-29 02:00:00", "2023-10-29 02:30:00",
           "2023-10-29 02:00:00", "2023-10-29 02:30:00", "2023-10-29 03:00:00"]
    c, out, _ = conv(raw, ambiguous="infer")
    expected = [zi(2023, 10, 29, 1, 30), zi(2023, 10, 29, 2, 0, 0), zi(2023, 10, 29, 2, 30, 0),
                zi(2023, 10, 29, 2, 0, 1), zi(2023, 10, 29, 2, 30, 1), zi(2023, 10, 29, 3, 0)]
    assert out.tolist() == expected
    assert np.all(np.diff(out) == 1800)  # strictly 30 min apart in UTC
    assert c.notes()["dst_repeated_hour"]["2023-10-29"] == {"summer": 2, "standard": 2, "rule": "infer"}


def test_autumn_repeated_hour_first_second_reject():
    raw = ["2023-10-29 02:15:00"]
    assert conv(raw, ambiguous="first")[1][0] == zi(2023, 10, 29, 2, 15, fold=0)
    assert conv(raw, ambiguous="second")[1][0] == zi(2023, 10, 29, 2, 15, fold=1)
    c, out, why = conv(raw, ambiguous="reject")
    assert out[0] == NAT and "occurs twice" in why[0]
    assert c.notes()["dst_repeated_hour"]["2023-10-29"]["rejected"] == 1


def test_infer_state_carries_across_chunks():
    c = TimestampConverter(TimestampSpec(), "Europe/Madrid")
    a, _ = c.convert(np.array(["2023-10-29 02:00:00", "2023-10-29 02:30:00"], dtype=object))
    b, _ = c.convert(np.array(["2023-10-29 02:00:00", "2023-10-29 02:30:00"], dtype=object))
    assert b[0] - a[1] == 1800  # second pass is CET, one hour after the first pass


def test_spring_gap_is_rejected_and_reported():
    c, out, why = conv(["2023-03-26 01:59:00", "2023-03-26 02:00:00", "2023-03-26 02:30:00",
                        "2023-03-26 03:00:00"])
    assert out[0] == zi(2023, 3, 26, 1, 59) and out[3] == zi(2023, 3, 26, 3, 0)
    assert out[3] - out[0] == 60  # 01:59 CET and 03:00 CEST are one minute apart
    assert out[1] == NAT and out[2] == NAT
    assert "does not exist in Europe/Madrid" in why[1]
    assert c.notes()["dst_gap_rejected"] == {"2023-03-26": 2}


def test_utc_fixed_offset_epoch_iso():
    t = int(dt.datetime(2023, 6, 2, 10, 15, tzinfo=dt.UTC).timestamp())
    assert conv(["2023-06-02 10:15:00"], zone="UTC")[1][0] == t
    assert conv(["2023-06-02 12:15:00"], zone="+02:00")[1][0] == t  # UTC = wall - offset
    assert conv(["2023-06-02 07:15:00"], zone="-03:00")[1][0] == t
    assert conv([str(t)], format="epoch_s")[1][0] == t
    assert conv(["2023-06-02T12:15:00+02:00"], format="iso8601")[1][0] == t
    assert conv(["2023-06-02T10:15:00Z"], format="iso8601")[1][0] == t


def test_bad_timestamp_names_format():
    _, out, why = conv(["2023-06-02 25:00:00", "yesterday"])
    assert (out == NAT).all()
    assert why[1] == "timestamp 'yesterday' does not match format '%Y-%m-%d %H:%M:%S'"


def test_clock_correction_applied_before_utc():
    corr = ClockCorrection(dt.datetime(2023, 6, 6, 10, 0), dt.datetime(2023, 6, 6, 10, 30), -60, "ahead")
    c = TimestampConverter(TimestampSpec(zone="UTC"), "Europe/Madrid", (corr,))
    out, _ = c.convert(np.array(["2023-06-06 10:00:00", "2023-06-06 10:45:00"], dtype=object))
    assert out[0] == int(dt.datetime(2023, 6, 6, 9, 0, tzinfo=dt.UTC).timestamp())
    assert out[1] == int(dt.datetime(2023, 6, 6, 10, 45, tzinfo=dt.UTC).timestamp())
    assert c.notes()["clock_corrections"][0]["rows"] == 1


@pytest.mark.parametrize("label, expected", [
    # labels: 15-min steps to 2700 s, then 300-s steps, and a gap from 3600 to 7200 s.
    # End labels: a row covers the step before it (2700 covers 1800-2700: 900 s).
    ("end", [900, 900, 900, 900, 300, 300, 300, 300, 300]),
    # Start labels: a row covers the step after it (2700 covers 2700-3000: 300 s);
    # 3600 is followed by the gap, so it takes the step before (300 s).
    ("start", [900, 900, 900, 300, 300, 300, 300, 300, 300]),
])
def test_intervals_follow_change_and_skip_gaps(label, expected):
    u = np.array([0, 900, 1800, 2700, 3000, 3300, 3600, 7200, 7500])
    assert infer_intervals(u, label).tolist() == expected
    assert describe_intervals(np.array(expected, dtype=float)) == "900->300"


def test_interval_change_at_the_boundary_end_labels():
    # end labels 10:00, 10:15, 10:30 (15-min), then 10:35, 10:40: the 10:30 row still covers 15 min
    u = np.array([0, 900, 1800, 2100, 2400])
    assert infer_intervals(u, "end").tolist() == [900, 900, 900, 300, 300]


def test_single_label_has_unknown_interval():
    assert np.isnan(infer_intervals(np.array([100]), "end")[0])
