"""The Frictionless descriptor in schemas/ and the pandera schema built from it agree.

Outside references: the Frictionless Table Schema standard (validated with the
``frictionless`` package) and pandera's own translator
``pandera.io.pandas_io.from_frictionless_schema``.
"""

from __future__ import annotations

import json

import pandas as pd
import pandera.errors as pe
import pytest
from frictionless import Schema
from pandera.io.pandas_io import from_frictionless_schema

from refit._util.resources import schemas_dir
from refit.curate.schema import build_schema, field_names, load_descriptor, required_fields

DESCRIPTOR = load_descriptor()


def _checks(column):
    return sorted((c.name, repr(c.statistics)) for c in column.checks)


def test_descriptor_is_a_valid_frictionless_table_schema():
    # Frictionless Table Schema standard, checked by the frictionless package
    report = Schema.validate_descriptor(DESCRIPTOR)
    assert report.valid, [e.message for e in report.errors]


def test_validation_of_descriptor_can_fail():
    # guard: the validity test above would catch a broken descriptor
    broken = json.loads(json.dumps(DESCRIPTOR))
    broken["fields"][1]["type"] = "numbr"
    assert not Schema.validate_descriptor(broken).valid


def test_every_field_has_a_pandera_column_with_the_same_checks():
    ours = build_schema()
    # pandera's own Frictionless translator is the outside reference for the checks
    reference = from_frictionless_schema(DESCRIPTOR)
    assert list(ours.columns) == field_names() == list(reference.columns)
    for name, col in ours.columns.items():
        assert _checks(col) == _checks(reference.columns[name]), name
        assert col.unique == reference.columns[name].unique, name
        assert col.nullable == reference.columns[name].nullable, name


def test_required_fields_are_required_columns_and_not_nullable():
    ours = build_schema()
    assert required_fields() == ["profile_id", "latitude", "longitude", "source"]
    for name, col in ours.columns.items():
        assert col.required == (name in required_fields()), name
        assert col.nullable == (name not in required_fields()), name


def test_numeric_fields_are_float64_and_text_fields_are_unchecked():
    ours = build_schema()
    for field in DESCRIPTOR["fields"]:
        dtype = ours.columns[field["name"]].dtype
        if field["type"] == "number":
            assert str(dtype) == "float64"
        else:
            assert dtype is None


@pytest.mark.parametrize("field,low,high", [
    ("latitude", -90, 90), ("longitude", -180, 180), ("map_mm", 0, 12000),
    ("mat_c", -40, 40), ("bk_depth_cm", 0, 1000), ("bk_thickness_cm", 0, 1000),
    ("by_depth_cm", 0, 1000), ("al2o3_wt", 0, 100), ("sio2_wt", 0, 100),
])
def test_ranges_from_the_issue(field, low, high):
    cons = {f["name"]: f for f in DESCRIPTOR["fields"]}[field]["constraints"]
    assert (cons["minimum"], cons["maximum"]) == (low, high)


def test_mar_has_only_a_lower_bound():
    cons = {f["name"]: f for f in DESCRIPTOR["fields"]}["mar_mm"]["constraints"]
    assert cons == {"minimum": 0}


# the unit in each column name: suffix -> unit code in the descriptor
SUFFIX_UNIT = {"_mm": "mm", "_cm": "cm", "_c": "degC", "_wt": "percent", "_m": "m",
               "_ka": "ka", "_deg": "degree"}


def test_unit_is_in_the_column_name():
    for field in DESCRIPTOR["fields"]:
        if "unit" not in field or field["name"] in ("latitude", "longitude"):
            continue
        suffix = "_" + field["name"].rsplit("_", 1)[1]
        assert SUFFIX_UNIT[suffix] == field["unit"], field["name"]


def test_closed_vocabularies_mirror_the_descriptor_enums():
    vocab = json.loads((schemas_dir() / "vocabularies.json").read_text())
    fields = {f["name"]: f for f in DESCRIPTOR["fields"]}
    for name in vocab["closed"]:
        assert vocab[name] == fields[name]["constraints"]["enum"]
    # USDA Soil Taxonomy has twelve orders
    assert len(vocab["soil_order"]) == 12


def test_schema_rejects_out_of_range_and_keeps_extra_columns():
    frame = pd.DataFrame({"profile_id": ["a", "b"], "latitude": [10.0, 91.0],
                          "longitude": [0.0, 0.0], "source": ["s", "s"],
                          "extra": [1, 2]})
    with pytest.raises(pe.SchemaErrors) as err:
        build_schema().validate(frame, lazy=True)
    cases = err.value.failure_cases
    assert cases[["column", "index"]].values.tolist() == [["latitude", 1]]
    assert "extra" in build_schema(columns=frame.columns).validate(frame.iloc[:1]).columns
