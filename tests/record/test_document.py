"""Site file ↔ typed record, without the database: the record holds everything the file holds
(a document in the export's canonical form comes back identical) and fills the file's defaults
the way the importer stores them."""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import pytest

import record as rec
from fixtures.fleet import generate_site
from inventory.sitefile.validate import load_site_file, validate_site_document
from tests.inventory.docs import small_site

DEMO_FILES = sorted((Path(__file__).resolve().parents[2] / "fixtures" / "demo").glob("*.json"))


def canonical_document(doc: dict) -> dict:
    return rec.record_to_document(rec.canonical(rec.record_from_document(doc)))


def test_small_site_converts_field_by_field():
    r = rec.record_from_document(small_site())
    assert r.site == rec.Site(code="TST", name=r.site.name, design_temp_c=75.0)
    ct = r.cts[0]
    assert ct.code == "CB-1-A" and ct.set_name == "CB-1-R" and ct.phase == "A"
    assert ct.positions == {"X1": 0.0, "X2": 100.0, "X3": 150.0, "X4": 400.0, "X5": 600.0}
    assert ct.in_use == ("X1", "X4") and ct.secondary_a == 5.0 and ct.rating_factor == 1.5
    assert ct.excitation == ((0.005, 20.0), (0.02, 120.0), (0.06, 300.0), (0.5, 420.0))
    relay = r.devices[0]
    assert relay.inputs[0] == rec.DeviceInput("IA", "R-1:IA1", "R-1:IA2", 5.0, 0.2, 1.0, None)
    assert relay.inputs[3].burden_ohm == (0.05, 0.01) and relay.inputs[3].pf is None
    assert r.switches[0].contacts[1] == rec.Contact(("TS-1:1L", "TS-1:SB"), ("open",))
    steps = small_site()["procedures"][0]["steps"]
    assert r.procedures[0].steps == tuple(rec.operation_from_json(op) for op in steps)
    assert isinstance(r.procedures[0].steps[0], rec.SetSwitch)


def test_the_site_file_defaults_are_filled_as_the_importer_stores_them():
    doc = small_site()
    del doc["site"]["design_temp_c"]
    del doc["cts"][0]["rating_factor"]
    del doc["devices"][0]["inputs"][0]["pf"]
    doc["equipment"][0].pop("in_service", None)
    r = rec.record_from_document(doc)
    assert r.site.design_temp_c == 75.0  # design.md: default 75 °C
    assert r.cts[0].rating_factor == 1.0
    assert r.devices[0].inputs[0].pf == 1.0  # a VA burden without pf is resistive
    assert r.equipment[0].in_service is True
    out = rec.record_to_document(r)
    assert out["site"]["design_temp_c"] == 75 and out["cts"][0]["rating_factor"] == 1


def test_the_record_is_frozen():
    r = rec.record_from_document(small_site())
    with pytest.raises(dataclasses.FrozenInstanceError):
        r.cts[0].code = "X"  # type: ignore[misc]


def test_a_step_that_is_no_operation_names_its_pointer():
    doc = small_site()
    doc["procedures"][0]["steps"][1] = {"open": "TS-1/1"}
    with pytest.raises(rec.RecordError, match=r"^/procedures/0/steps/1: an operation names"):
        rec.record_from_document(doc)


@pytest.mark.parametrize("path", DEMO_FILES, ids=lambda p: p.stem)
def test_demo_file_record_file_is_identical_in_canonical_form(path):
    doc = load_site_file(path)
    assert validate_site_document(doc) == []
    first = canonical_document(doc)
    assert rec.record_to_document(rec.record_from_document(first)) == first
    assert json.dumps(canonical_document(first), indent=2) == json.dumps(first, indent=2)
    # nothing lost: the same parts, element by element, as the shipped file
    for section in ("buses", "equipment", "cts", "devices", "switches", "procedures"):
        assert sorted(x["code"] for x in first[section]) == sorted(x["code"] for x in doc[section])
    assert first["wires"] == [
        {k: v for k, v in w.items() if not (k == "material" and v == "cu")} for w in doc["wires"]
    ]
    assert first["links"] == doc["links"] and first["grounds"] == doc["grounds"]


def test_generated_sites_record_file_is_identical():
    for index in range(0, 500, 50):
        doc = generate_site(index, seed=1)
        first = canonical_document(doc)
        assert rec.record_to_document(rec.record_from_document(first)) == first
        assert len(first["cts"]) == len(doc["cts"]) and first["wires"] == [
            {k: v for k, v in w.items() if not (k == "material" and v == "cu")}
            for w in doc["wires"]
        ]


def test_tap_change_times_are_kept_in_utc():
    """A time written with an offset is the same instant in UTC (ISO 8601); the file is then
    written with ``Z``, as the database gives it back."""
    doc = small_site()
    doc["cts"][0]["tap_changes"] = [
        {"from": ["X1", "X5"], "to": ["X1", "X4"], "at": "2023-04-18T08:45:00+01:00"},
        {"from": ["X1", "X4"], "to": ["X1", "X5"], "at": "2023-05-01T10:00:00"},
    ]
    r = rec.record_from_document(doc)
    assert [c.at.isoformat() for c in r.cts[0].tap_changes] == [
        "2023-04-18T07:45:00+00:00",
        "2023-05-01T10:00:00+00:00",
    ]
    out = rec.record_to_document(r)["cts"][0]["tap_changes"]
    assert [e["at"] for e in out] == ["2023-04-18T07:45:00Z", "2023-05-01T10:00:00Z"]
    doc["cts"][0]["tap_changes"][0]["at"] = "last spring"
    with pytest.raises(rec.RecordError, match=r"^/cts/0/tap_changes/0/at: 'last spring'"):
        rec.record_from_document(doc)
