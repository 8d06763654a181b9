"""A bad cell coerces only its own column (issue #16).

Before, one value that was not a number sent its whole chunk to the cell-by-cell Python
parser. Now the chunk stays with pandas' C parser; only the column holding the bad cell is
coerced cell by cell, and the bad cell is still reported with its line and column. The
reference values are the numbers written in the text (hand-checkable).
"""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from ingest.readers import csv_export
from tests.test_ingest_csv_export import parse


@pytest.mark.parametrize("delim,dec", [(",", "."), (";", ",")])
def test_bad_cell_keeps_the_chunk_on_the_fast_path(monkeypatch, delim, dec):
    def no_slow(*a, **k):
        raise AssertionError("the whole chunk went to the cell-by-cell parser")

    monkeypatch.setattr(csv_export, "_slow", no_slow)
    coerced = []
    orig = csv_export._coerce_column
    monkeypatch.setattr(csv_export, "_coerce_column",
                        lambda raw, *a, **k: coerced.append(len(raw)) or orig(raw, *a, **k))
    rows = [f"2023-01-01 00:{m:02d}:00{delim}{m}{'.5' if dec == '.' else ',5'}{delim}"
            f"{'oops' if m == 15 else str(100 + m)}" for m in (0, 15, 30, 45)]
    text = delim.join(["ts", "A", "B"]) + "\n" + "\n".join(rows) + "\n"
    _, ch = parse(text, delimiter=delim, decimal=dec)
    c = ch[0]
    assert_allclose(c.values[:, 0], [0.5, 15.5, 30.5, 45.5])  # as written
    assert_allclose(c.values[[0, 2, 3], 1], [100, 130, 145])
    assert np.isnan(c.values[1, 1])
    (row, col, raw, why), = c.bad_cells
    assert (int(c.line[row]), col, raw) == (3, 1, "oops")
    assert why.startswith("value 'oops' is not a number")
    assert coerced == [4]  # one column coerced, the other converted at once
