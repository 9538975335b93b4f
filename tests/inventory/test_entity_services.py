"""Entity services: one write of the record at a time, one transaction, the rules of the
record checked over the resulting site (the site-file validator), field errors that name the
edited entity's field, nothing written on a broken rule, and the revision bumped on success.

The rules themselves are the site file's (inventory/sitefile/validate.py); a rule of the trade
is marked "common practice, no source" where it is one."""

from __future__ import annotations

import pytest
from django.core.exceptions import ValidationError

from inventory import models, services
from inventory.selectors import site_document
from inventory.services import site_import
from inventory.sitefile import validate_site_document
from tests.inventory.docs import small_site

pytestmark = pytest.mark.django_db


@pytest.fixture
def site() -> models.Site:
    site_import(doc=small_site())
    return models.Site.objects.get(code="TST")


def _errors(exc: pytest.ExceptionInfo) -> dict[str, list[str]]:
    return exc.value.message_dict


def _unchanged(site: models.Site, before: dict) -> None:
    site.refresh_from_db()
    assert site_document(site) == before


def test_a_good_ct_edit_is_saved_bumps_the_revision_and_exports_a_valid_file(site):
    ct = models.CurrentTransformer.objects.get(code="CB-1-A")
    ct.accuracy = "C800"
    ct.winding_ohm = 0.45
    services.ct_save(ct=ct, in_use=("X1", "X5"), by="clerk", reason="WO-9")
    revision = site.revision
    site.refresh_from_db()
    assert site.revision == revision + 1
    doc = site_document(site)
    assert validate_site_document(doc) == []
    entry = next(c for c in doc["cts"] if c["code"] == "CB-1-A")
    assert (entry["accuracy"], entry["winding_ohm"], entry["in_use"]) == (
        "C800",
        0.45,
        ["X1", "X5"],
    )
    assert entry["tap_changes"][-1]["to"] == ["X1", "X5"]


def test_second_phase_a_ct_in_a_set_is_a_field_error_and_nothing_is_written(site):
    # One CT per phase in a three-phase set: the site file's rule (validate.py check_cts).
    before = site_document(site)
    ct = models.CurrentTransformer.objects.get(code="CB-1-B")
    ct.phase = "A"
    with pytest.raises(ValidationError) as exc:
        services.ct_save(ct=ct)
    assert "already has a phase A CT" in " ".join(_errors(exc)["phase"])
    _unchanged(site, before)


def test_new_ct_in_a_taken_phase_names_the_phase(site):
    ct = models.CurrentTransformer(
        site=site,
        code="CB-1-A2",
        equipment=models.Equipment.objects.get(code="CB-1"),
        phase="A",
        set_name="CB-1-R",
        secondary_a=5,
    )
    with pytest.raises(ValidationError) as exc:
        services.ct_save(ct=ct, terminals={"X1": 0, "X2": 600}, in_use=("X1", "X2"))
    assert list(_errors(exc)) == ["phase"]
    assert not models.CurrentTransformer.objects.filter(code="CB-1-A2").exists()


@pytest.mark.parametrize(
    ("in_use", "field"),
    [(("X1", "X9"), "in_use"), (("X4", "X4"), "in_use")],
    ids=["unknown", "same-twice"],
)
def test_bad_tap_is_an_in_use_error(site, in_use, field):
    before = site_document(site)
    ct = models.CurrentTransformer.objects.get(code="CB-1-A")
    with pytest.raises(ValidationError) as exc:
        services.ct_save(ct=ct, in_use=in_use)
    assert list(_errors(exc)) == [field]
    _unchanged(site, before)


def test_two_terminals_at_one_point_of_the_winding_is_a_terminals_error(site):
    ct = models.CurrentTransformer.objects.get(code="CB-1-A")
    with pytest.raises(ValidationError) as exc:
        services.ct_save(ct=ct, terminals={"X1": 0, "X2": 100, "X3": 100, "X4": 400, "X5": 600})
    assert "same point of the winding" in " ".join(_errors(exc)["terminals"])


def test_winding_positions_can_be_reordered_in_one_edit(site):
    # Swapping two positions meets the distinct-positions constraint halfway unless the
    # service parks the moving rows first.
    ct = models.CurrentTransformer.objects.get(code="CB-1-A")
    services.ct_save(ct=ct, terminals={"X1": 0, "X2": 150, "X3": 100, "X4": 400, "X5": 600})
    positions = dict(models.Terminal.objects.filter(ct=ct).values_list("name", "position_a"))
    assert (positions["X2"], positions["X3"]) == (150, 100)


def test_a_wired_terminal_cannot_be_removed_from_the_winding(site):
    ct = models.CurrentTransformer.objects.get(code="CB-1-A")
    with pytest.raises(ValidationError) as exc:
        services.ct_save(ct=ct, terminals={"X2": 100, "X3": 150, "X4": 400, "X5": 600})
    assert "still in use" in " ".join(_errors(exc)["terminals"])


def test_bad_accuracy_and_ratio_strings_are_field_errors(site):
    ct = models.CurrentTransformer.objects.get(code="CB-1-A")
    ct.accuracy = "C450"  # not a standard C class (IEEE C57.13 lists C100..C800)
    with pytest.raises(ValidationError) as exc:
        services.ct_save(ct=ct)
    assert list(_errors(exc)) == ["accuracy"]
    relay = models.Device.objects.get(code="R-1")
    relay.ratio_setting = "400-5"
    with pytest.raises(ValidationError) as exc:
        services.device_save(device=relay)
    assert list(_errors(exc)) == ["ratio_setting"]


def test_device_inputs_are_checked_row_by_row(site):
    relay = models.Device.objects.get(code="R-1")
    doc = site_document(site)
    inputs = next(d for d in doc["devices"] if d["code"] == "R-1")["inputs"]
    inputs[1] = {**inputs[1], "to": inputs[1]["from"]}
    inputs[2] = {**inputs[2], "from": "NOWHERE:1"}
    with pytest.raises(ValidationError) as exc:
        services.device_save(device=relay, inputs=inputs)
    # The model's own rule, said in the site file's words for a row.
    assert _errors(exc) == {"inputs.1.to": ["an input from a terminal to itself"]}
    inputs[1] = {**inputs[1], "to": "R-1:IB2"}
    with pytest.raises(ValidationError) as exc:
        services.device_save(device=relay, inputs=inputs)
    # The record's rule (a terminal's owner must exist), found on the exported site.
    assert "unknown owner 'NOWHERE'" in " ".join(_errors(exc)["inputs.2.from"])


def test_unknown_conductor_size_and_wire_to_itself(site):
    wire = models.Wire.objects.filter(length_m=80).first()
    ends = (wire.from_terminal.label, wire.to_terminal.label)
    wire.size = "11AWG"  # no such gauge in the conductor table (ASTM B258 gauges are whole)
    with pytest.raises(ValidationError) as exc:
        services.wire_save(wire=wire, ends=ends)
    assert list(_errors(exc)) == ["size"]
    wire.size = "10AWG"
    with pytest.raises(ValidationError) as exc:
        services.wire_save(wire=wire, ends=(ends[0], ends[0]))
    assert list(_errors(exc)) == ["to_terminal"]


def test_wire_to_a_terminal_of_no_owner_is_reported_where_it_is(site):
    wire = models.Wire(site=site, size="10AWG", length_m=5)
    with pytest.raises(ValidationError) as exc:
        services.wire_save(wire=wire, ends=("TB-1:1", "TB-9:1"))
    assert "unknown owner 'TB-9'" in " ".join(_errors(exc)["to_terminal"])
    assert not models.Terminal.objects.filter(owner="TB-9").exists()


def test_switch_without_a_normal_position_or_with_a_contact_in_a_missing_position(site):
    switch = models.Switch.objects.get(code="TS-1/1")
    doc = site_document(site)
    entry = next(s for s in doc["switches"] if s["code"] == "TS-1/1")
    with pytest.raises(ValidationError) as exc:
        services.switch_save(switch=switch, positions=["closed", "open"], normal=None)
    assert list(_errors(exc)) == ["normal"]
    contacts = [*entry["contacts"]]
    contacts[1] = {**contacts[1], "closed_in": ["shorted"]}
    with pytest.raises(ValidationError) as exc:
        services.switch_save(switch=switch, contacts=contacts)
    assert "not one of the positions" in " ".join(_errors(exc)["contacts.1.closed_in"])
    assert site_document(site) == doc


def test_switch_positions_and_contacts_replace_as_a_whole(site):
    switch = models.Switch.objects.get(code="TS-1/1")
    services.switch_save(
        switch=switch,
        positions=["open", "closed", "test"],
        normal="closed",
        contacts=[
            {"between": ["TS-1:1L", "TS-1:1R"], "closed_in": ["closed", "test"]},
            {"between": ["TS-1:1L", "TS-1:SB"], "closed_in": ["open"]},
        ],
    )
    entry = next(s for s in site_document(site)["switches"] if s["code"] == "TS-1/1")
    assert entry["positions"] == ["open", "closed", "test"]
    assert entry["normal"] == "closed"
    assert entry["contacts"][0]["closed_in"] == ["closed", "test"]


def test_procedure_steps_are_checked_against_the_record(site):
    procedure = models.Procedure.objects.get(code="P-1")
    with pytest.raises(ValidationError) as exc:
        services.procedure_save(
            procedure=procedure, steps=[{"set": "TS-1/1", "to": "half-open"}, {"note": "x"}]
        )
    assert "has no position 'half-open'" in " ".join(_errors(exc)["steps.0.to"])
    services.procedure_save(procedure=procedure, steps=[{"set": "TS-1/T1", "to": "open"}])
    assert list(procedure.steps.values_list("op", flat=True)) == [{"set": "TS-1/T1", "to": "open"}]


def test_renaming_a_device_keeps_its_wiring(site):
    relay = models.Device.objects.get(code="R-1")
    relay.code = "R-2"
    services.device_save(device=relay)
    doc = site_document(site)
    assert validate_site_document(doc) == []
    assert any(w["from"] == "R-2:IN2" for w in doc["wires"])


def test_deleting_wired_equipment_is_refused_with_the_reason(site):
    equipment = models.Equipment.objects.get(code="CB-1")
    with pytest.raises(ValidationError) as exc:
        services.equipment_delete(equipment=equipment)
    assert "still in use" in " ".join(_errors(exc)["__all__"])
    # A device whose terminals are still wired leaves those wires without an owner.
    with pytest.raises(ValidationError) as exc:
        services.device_delete(device=models.Device.objects.get(code="R-1"))
    assert "unknown owner 'R-1'" in " ".join(_errors(exc)["__all__"])
    assert models.Device.objects.filter(code="R-1").exists()
