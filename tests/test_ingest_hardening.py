"""Ingest hardening (issue #12): timestamps, value limits, NaN spellings, reader edge cases."""

import datetime as dt

import numpy as np

from ingest.config import TimestampSpec
from ingest.timestamps import NAT, TimestampConverter


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
