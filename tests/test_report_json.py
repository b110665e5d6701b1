"""The JSON form of a fit validates against its documented schema (draft 2020-12)."""

from __future__ import annotations

import json

import jsonschema
import pytest

from fitkit.report.json_schema import fit_result_json, fit_result_schema
from support.report_results import FORM_NAMES, make_result


@pytest.fixture(scope="module")
def validator():
    schema = fit_result_schema()
    # the schema itself is a valid draft 2020-12 schema (jsonschema's meta-schema check)
    jsonschema.Draft202012Validator.check_schema(schema)
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    return jsonschema.Draft202012Validator(schema)


@pytest.mark.parametrize("model", FORM_NAMES)
def test_every_form_validates(validator, model):
    result = make_result(model, undetermined=("step",), components={"R1": (1e3, "Ohm")},
                         warnings=("a warning",))
    data = json.loads(fit_result_json(result))
    validator.validate(data)
    assert data["parameters"]["step"]["determined"] is False
    assert data["parameters"]["step"]["ci95"] is None


def test_nan_becomes_null_and_output_is_strict_json(validator):
    result = make_result("first-order")  # holds a candidate that did not converge (NaN criterion)
    text = fit_result_json(result)
    assert "NaN" not in text and "Infinity" not in text
    data = json.loads(text)
    validator.validate(data)
    failed = [c for c in data["selection"] if not c["converged"]]
    assert failed and failed[0]["criterion"] is None


def test_schema_rejects_broken_records(validator):
    good = make_result("underdamped").to_dict()
    for breakage in ("missing model", "interval of three", "determined as text", "warning not text"):
        bad = json.loads(json.dumps(good))
        if breakage == "missing model":
            del bad["model"]
        elif breakage == "interval of three":
            bad["parameters"]["f0"]["ci95"] = [1.0, 2.0, 3.0]
        elif breakage == "determined as text":
            bad["derived"]["Q"]["determined"] = "yes"
        else:
            bad["warnings"] = [3]
        assert not validator.is_valid(bad), breakage


def test_every_stable_key_is_documented():
    schema = fit_result_schema()
    record_keys = set(make_result("underdamped", components={"C1": (1e-9, "F")}).to_dict())
    assert record_keys <= set(schema["properties"])
    for key, spec in schema["properties"].items():
        assert len(spec.get("description", "")) > 20, key
    for name in ("estimate", "candidate", "diagnostics"):
        for key, spec in schema["$defs"][name]["properties"].items():
            assert spec.get("description"), (name, key)


def test_schema_is_returned_as_a_fresh_copy():
    a = fit_result_schema()
    a["title"] = "changed"
    assert fit_result_schema()["title"] != "changed"
