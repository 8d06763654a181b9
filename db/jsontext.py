"""JSON text for the store's ``*_json`` columns: numpy scalars to Python, NaN/inf to null
(JSON has no NaN), dates to ISO 8601, keys sorted so equal content gives equal text."""

from __future__ import annotations

import datetime as dt
import json
import math

import numpy as np
import pandas as pd


def clean(o):
    """JSON-safe copy: numpy scalars to Python, NaN/inf to None, dates to ISO text."""
    if isinstance(o, dict):
        return {str(k): clean(v) for k, v in o.items()}
    if isinstance(o, list | tuple | np.ndarray):
        return [clean(v) for v in o]
    if isinstance(o, np.bool_ | bool):
        return bool(o)
    if isinstance(o, np.integer):
        return int(o)
    if isinstance(o, np.floating | float):
        f = float(o)
        return f if math.isfinite(f) else None
    if isinstance(o, pd.Timestamp | dt.date | dt.datetime):
        return o.isoformat()
    return o


def to_json(obj) -> str | None:
    """Compact JSON text of ``obj`` (None stays None), NaN-free."""
    return None if obj is None else json.dumps(clean(obj), allow_nan=False, sort_keys=True, default=str)
