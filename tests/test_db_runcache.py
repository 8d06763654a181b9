"""db.runcache: within a compute run each channel is read from the store once (issue #16).

Known answers of our own bookkeeping: the readings returned through the cache equal those
read directly, for every range asked, and the store is read once per channel.
"""

import numpy as np

from db import runcache
from db.timeseries import read_channel
from tests.helpers_store import add_readings, add_sensor, add_site, make_store


def test_each_channel_read_once_and_ranges_served_exactly(tmp_path):
    eng = make_store(tmp_path)
    ts = np.arange(0, 100 * 900, 900)
    with eng.begin() as conn:
        add_site(conn, "s1")
        ch = add_sensor(conn, "s1", "poa1", "poa_wm2")
        add_readings(conn, ch, ts, np.arange(100.0))
    ranges = [(None, None), (900 * 10, 900 * 20), (900 * 95, None), (None, 900 * 3)]
    with eng.connect() as conn:
        direct = [read_channel(conn, ch, a, b, with_interval=True) for a, b in ranges]
        with runcache.read_once() as stats:
            # a day-aligned range around all the data first (as a full daily recompute asks)
            wide = read_channel(conn, ch, -86400, 200 * 900)
            cached = [read_channel(conn, ch, a, b, with_interval=True) for a, b in ranges]
    assert stats["reads"] == 1 and stats["readings_read"] == 100
    np.testing.assert_array_equal(wide[0], ts)
    for got, ref in zip(cached, direct, strict=True):
        for x, y in zip(got, ref, strict=True):
            np.testing.assert_array_equal(x, y)
    assert not runcache.active()


def test_narrow_read_grows_to_the_union(tmp_path):
    eng = make_store(tmp_path)
    ts = np.arange(0, 50 * 900, 900)
    with eng.begin() as conn:
        add_site(conn, "s1")
        ch = add_sensor(conn, "s1", "poa1", "poa_wm2")
        add_readings(conn, ch, ts, np.ones(50))
    with eng.connect() as conn, runcache.read_once() as stats:
        assert read_channel(conn, ch, 900 * 40, 900 * 45)[0].size == 5
        assert read_channel(conn, ch, 900 * 10, None)[0].size == 40  # a miss: union read
        assert read_channel(conn, ch, 900 * 20, 900 * 30)[0].size == 10  # served
    assert stats["reads"] == 2 and stats["hits"] == 1
