"""Flags in the store: replace-in-one-transaction, filtered reads (real SQLite file)."""

import datetime as dt
import json

import numpy as np
import pandas as pd
import pytest
import sqlalchemy as sa

from db import schema
from db.engine import make_engine
from db.flags import read_flags, write_flags


@pytest.fixture
def engine(tmp_path):
    eng = make_engine(tmp_path / "flags.sqlite")
    now = dt.datetime(2026, 12, 1, tzinfo=dt.UTC).isoformat()
    with eng.begin() as conn:
        for sid in ("s1", "s2"):
            conn.execute(schema.site.insert().values(
                site_id=sid, name=sid, timezone="UTC", latitude_deg=0, longitude_deg=0,
                altitude_m=0, tilt_deg=0, azimuth_deg=180, albedo=0.2, config_toml="",
                config_sha256="0" * 64, updated_utc=now))
    return eng


def _flags():
    return pd.DataFrame([
        dict(device_id="inv01", kind="outage", start_s=1000, end_s=2000, severity="alarm",
             lost_kwh=12.5, details={"hours_out": 3.0, "whole_days": np.int64(0),
                                      "x": float("nan")}),
        dict(device_id=None, kind="soiling", start_s=500, end_s=5000, severity="info",
             lost_kwh=np.nan, details={"rate": -0.1}),
        dict(device_id="inv02", kind="clipping", start_s=3000, end_s=4000, severity="info",
             lost_kwh=None, details={"hours": 2}),
    ])


def test_roundtrip_and_filters(engine):
    assert write_flags(engine, "s1", _flags(), None) == 3
    df = read_flags(engine, "s1")
    assert list(df.columns) == ["flag_id", "site_id", "device_id", "kind", "start_s", "end_s",
                                "severity", "lost_kwh", "details_json"]
    assert list(df["kind"]) == ["soiling", "outage", "clipping"]  # ordered by start_s
    assert df.loc[df["kind"] == "soiling", "device_id"].iloc[0] is None
    assert np.isnan(df.loc[df["kind"] == "clipping", "lost_kwh"].iloc[0])
    det = json.loads(df.loc[df["kind"] == "outage", "details_json"].iloc[0])
    assert det == {"hours_out": 3.0, "whole_days": 0, "x": None}  # NaN -> null
    assert list(read_flags(engine, "s1", device_id="inv01")["kind"]) == ["outage"]
    assert list(read_flags(engine, "s1", kind="clipping")["device_id"]) == ["inv02"]
    # overlap of [start_s, end_s): outage 1000-2000 and soiling 500-5000 overlap [1500, 2500)
    assert list(read_flags(engine, "s1", start_s=1500, end_s=2500)["kind"]) == ["soiling", "outage"]
    assert read_flags(engine, "s1", start_s=5000).empty  # soiling ends at 5000 (exclusive)
    assert read_flags(engine, "s2").empty


def test_write_replaces_site_only(engine):
    write_flags(engine, "s1", _flags(), None)
    write_flags(engine, "s2", _flags().iloc[:1], None)
    write_flags(engine, "s1", _flags().iloc[1:2], None)
    assert list(read_flags(engine, "s1")["kind"]) == ["soiling"]
    assert list(read_flags(engine, "s2")["kind"]) == ["outage"]
    write_flags(engine, "s1", _flags().iloc[0:0], None)  # an empty set clears the site
    assert read_flags(engine, "s1").empty


def test_bad_rows_are_refused_and_nothing_is_lost(engine):
    write_flags(engine, "s1", _flags(), None)
    bad = _flags()
    bad.loc[2, "kind"] = "gremlins"
    with pytest.raises(ValueError, match="row 2: unknown kind 'gremlins'"):
        write_flags(engine, "s1", bad, None)
    bad = _flags()
    bad.loc[0, "end_s"] = 10
    with pytest.raises(ValueError, match="end_s 10 is before start_s 1000"):
        write_flags(engine, "s1", bad, None)
    assert len(read_flags(engine, "s1")) == 3  # the previous set is intact


def test_transaction_rolls_back_on_database_error(engine):
    write_flags(engine, "s1", _flags(), None)
    with pytest.raises(sa.exc.IntegrityError):  # no such computation row: foreign key
        write_flags(engine, "s1", _flags(), computation_id=999)
    assert len(read_flags(engine, "s1")) == 3
