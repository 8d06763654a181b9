"""The results document against its JSON Schema (issue #15): docs/results.schema.json is a
valid draft 2020-12 schema (checked by the jsonschema reference implementation's meta-schema),
real output of the pipeline validates against it, it rejects what it must reject, and the
"Results export" section of docs/results.md names exactly the schema's fields."""

from __future__ import annotations

import copy
import json
import re
from pathlib import Path

import pytest

jsonschema = pytest.importorskip("jsonschema")

ROOT = Path(__file__).resolve().parents[1]
SCHEMA = json.loads((ROOT / "docs" / "results.schema.json").read_text(encoding="utf-8"))
VALIDATOR = jsonschema.Draft202012Validator(
    SCHEMA, format_checker=jsonschema.Draft202012Validator.FORMAT_CHECKER)


def _errors(doc) -> list[str]:
    return [f"{list(e.path)}: {e.message}" for e in VALIDATOR.iter_errors(doc)]


@pytest.fixture(scope="module")
def document(dashboard_store):
    from db.engine import make_engine
    from heliaudit.jobs_degradation import results_document

    eng = make_engine(dashboard_store["url"], create=False)
    try:
        # the text `heliaudit results` writes, read back
        return json.loads(json.dumps(results_document(eng, dashboard_store["site_id"]),
                                     allow_nan=False, default=str))
    finally:
        eng.dispose()


def test_the_schema_is_a_valid_draft_2020_12_schema():
    jsonschema.Draft202012Validator.check_schema(SCHEMA)
    assert SCHEMA["properties"]["schema"]["const"] == "heliaudit-results/2"


def test_real_output_validates(document):
    assert _errors(document) == []
    assert document["inverters"], "the document holds inverters"


def test_the_schema_rejects_old_codes_and_wrong_types(document):
    bad = copy.deepcopy(document)
    block = bad["inverters"][0]["degradation"]
    block["yoy"] = next(iter(block.values()))  # a schema-1 method code
    assert any("yoy" in e for e in _errors(bad))
    bad = copy.deepcopy(document)
    bad["schema"] = "heliaudit-results/1"
    assert _errors(bad)
    bad = copy.deepcopy(document)
    bad["flags"].append({"flag_id": 1, "device_id": None, "kind": "outage",
                         "start": "yesterday", "end": "2024-01-01T00:00:00Z",
                         "severity": "critical", "lost_kwh": None, "details": None})
    errs = _errors(bad)
    assert any("critical" in e for e in errs) and any("yesterday" in e for e in errs)
    bad = copy.deepcopy(document)
    del bad["site_result"]["period"]
    assert _errors(bad)


def _schema_names(node, out: set) -> set:
    if isinstance(node, dict):
        for k, v in (node.get("properties") or {}).items():
            out.add(k)
            _schema_names(v, out)
        for k, v in node.items():
            if k != "properties":
                _schema_names(v, out)
        for v in node.get("enum", []) if isinstance(node.get("enum"), list) else []:
            out.add(str(v))
    elif isinstance(node, list):
        for v in node:
            _schema_names(v, out)
    return out


def _readme_json_part() -> str:
    """The JSON part of "Results export" in docs/results.md (moved there from README.md)."""
    text = (ROOT / "docs" / "results.md").read_text(encoding="utf-8")
    part = text.split("## Results export", 1)[1].split("\n## ", 1)[0]
    return part.split("**JSON", 1)[1].split("**CSV", 1)[0]


FIELD = re.compile(r"`([a-z][a-z0-9_]*)(?:\[\])?`")


def test_readme_field_names_are_the_schemas():
    names = _schema_names(SCHEMA, set())
    documented = set(FIELD.findall(_readme_json_part()))
    assert documented, "docs/results.md documents no field"
    assert documented - names == set(), "docs/results.md names fields the schema does not have"
    # and every field of the main blocks is documented
    d = SCHEMA["$defs"]
    for block in (SCHEMA, d["device"], d["method_result"], d["recommended"], d["caveat"],
                  d["flag"], d["period"], d["change_point"], d["segment"], d["warranty"]):
        missing = set(block["properties"]) - documented
        assert missing == set(), f"not in docs/results.md: {sorted(missing)}"
    assert "rate_pct_per_year" not in _readme_json_part()  # the JSON writes _per_yr


def test_degradation_csv_carries_warnings_caveats_and_notice(dashboard_store):
    import csv
    import io

    from click.testing import CliRunner

    from heliaudit.cli import main

    url, site = dashboard_store["url"], dashboard_store["site_id"]
    r = CliRunner().invoke(main, ["--db", url, "results", "--site", site, "--format", "csv"])
    assert r.exit_code == 0, r.output
    rows = list(csv.DictReader(io.StringIO(r.output)))
    assert {"warnings", "reasons", "caveats", "notice", "recommended"} <= set(rows[0])
    assert not {row["method"] for row in rows} & {"overview", "summary"}  # no pseudo-method
    for dev in {row["device_id"] for row in rows}:  # the recommended rate, once per device
        recs = [row for row in rows if row["device_id"] == dev and row["method"] == "recommended"]
        assert len(recs) <= 1
    assert all(row["notice"].startswith("Screening evidence") for row in rows)
    for dev in {row["device_id"] for row in rows}:  # at most one recommended row per device
        assert sum(row["recommended"] == "True" for row in rows if row["device_id"] == dev) <= 1
    # no float printed with 16 digits: rates to 0.0001 %/yr
    for row in rows:
        for col in ("rate_pct_per_yr", "ci_low", "ci_high"):
            if row[col]:
                assert len(row[col].split(".")[-1]) <= 4, (col, row[col])
