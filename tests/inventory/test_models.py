"""Invariants of the record: named database constraints, and the same rules in ``clean()`` so
the admin and the API report them as field errors."""

from __future__ import annotations

import pytest
from django.core.exceptions import ValidationError
from django.db import IntegrityError, transaction

from inventory import models
from inventory.services import ct_change_tap, site_import
from tests.inventory.docs import small_site

pytestmark = pytest.mark.django_db


@pytest.fixture
def site() -> models.Site:
    site_import(doc=small_site())
    return models.Site.objects.get(code="TST")


def test_unique_ct_code_per_site(site):
    ct = models.CurrentTransformer.objects.get(code="CB-1-A")
    with pytest.raises(IntegrityError), transaction.atomic():
        models.CurrentTransformer.objects.create(
            site=site, code="CB-1-A", equipment=ct.equipment, phase="A", secondary_a=5
        )
    other = models.Site.objects.create(code="OTHER", name="Other")
    eq = models.Equipment.objects.create(site=other, code="CB-1", kind="breaker")
    # The same code at another site is fine: natural keys are per site.
    models.CurrentTransformer.objects.create(
        site=other, code="CB-1-A", equipment=eq, phase="A", secondary_a=5
    )


@pytest.mark.parametrize(
    ("field", "value", "constraint"),
    [
        ("length_m", -5.0, "wire_length_m_positive"),
        ("length_m", 0.0, "wire_length_m_positive"),
        ("r_ohm", -0.1, "wire_r_positive"),
        ("r_ohm", 0.0, "wire_r_positive"),
    ],
)
def test_wire_lengths_and_resistance_must_be_physical(site, field, value, constraint):
    wire = models.Wire.objects.filter(length_m__isnull=False).first()
    setattr(wire, field, value)
    if field == "r_ohm":
        wire.length_m = None
        wire.size = ""
    with pytest.raises(IntegrityError, match=f"(?i){constraint}|check"), transaction.atomic():
        wire.save()


def test_secondary_rating_is_1_or_5_a(site):
    ct = models.CurrentTransformer.objects.get(code="CB-1-A")
    ct.secondary_a = 2
    with (
        pytest.raises(IntegrityError, match="(?i)ct_secondary_1_or_5_a|check"),
        transaction.atomic(),
    ):
        ct.save()


def test_one_normal_position_per_switch(site):
    position = models.SwitchPosition.objects.get(switch__code="TS-1/1", name="open")
    position.is_normal = True
    with pytest.raises(IntegrityError), transaction.atomic():
        position.save()


def test_tap_in_use_is_one_pair_of_distinct_terminals(site):
    x5 = models.Terminal.objects.get(owner="CB-1-A", name="X5")
    x5.tap_role = "first"  # X1 is already the first terminal in use
    with pytest.raises(IntegrityError), transaction.atomic():
        x5.save()


def test_device_input_has_exactly_one_burden_form(site):
    inp = models.DeviceInput.objects.get(name="IA")
    inp.burden_r_ohm, inp.burden_x_ohm = 0.1, 0.0  # now both forms
    with pytest.raises(IntegrityError), transaction.atomic():
        inp.save()
    with pytest.raises(ValidationError, match="either as VA with pf, or as R"):
        inp.clean()


def test_clean_rejects_an_accuracy_string_that_is_not_a_class(site):
    ct = models.CurrentTransformer.objects.get(code="CB-1-A")
    ct.accuracy = "C450X"
    with pytest.raises(ValidationError) as info:
        ct.full_clean()
    assert "accuracy" in info.value.message_dict


def test_clean_rejects_a_decreasing_excitation_curve(site):
    ct = models.CurrentTransformer.objects.get(code="CB-1-A")
    ct.excitation = [[0.01, 50], [0.005, 80]]
    with pytest.raises(ValidationError) as info:
        ct.full_clean()
    assert info.value.message_dict["excitation"] == [
        "points must increase in both current and voltage; point 1 [0.005, 80] does not "
        "exceed point 0 [0.01, 50]"
    ]


def test_clean_rejects_a_ratio_setting_that_is_not_a_ratio(site):
    device = models.Device.objects.get(code="R-1")
    device.ratio_setting = "400 to 5"
    with pytest.raises(ValidationError) as info:
        device.full_clean()
    assert info.value.message_dict["ratio_setting"] == [
        "ratio setting must look like '400:5' or '1000:1', got '400 to 5'"
    ]


def test_tap_change_service_records_the_event_and_bumps_the_revision(site):
    ct = models.CurrentTransformer.objects.get(code="CB-1-B")
    change = ct_change_tap(ct=ct, to=("X2", "X5"), by="engineer", reason="WO-77")
    assert (change.from_tap, change.to_tap) == (["X1", "X4"], ["X2", "X5"])
    roles = dict(
        models.Terminal.objects.filter(ct=ct).exclude(tap_role="").values_list("tap_role", "name")
    )
    assert roles == {"first": "X2", "second": "X5"}
    assert models.Site.objects.get(pk=site.pk).revision == site.revision + 1
    with pytest.raises(ValidationError, match="two different terminals of CB-1-B"):
        ct_change_tap(ct=ct, to=("X2", "X2"))
    with pytest.raises(ValidationError, match="two different terminals of CB-1-B"):
        ct_change_tap(ct=ct, to=("X2", "X7"))


def test_history_is_kept_for_imported_rows(site):
    ct = models.CurrentTransformer.objects.get(code="CB-1-A")
    assert ct.history.count() == 1
    assert models.Wire.history.filter(history_type="+").count() == models.Wire.objects.count()


# -- rules of the record the database holds (migration 0003), and the same rules in clean() ---


def test_one_ct_per_phase_in_a_named_set(site):
    # A three-phase set has one CT per phase (the site file's rule, validate.py check_cts).
    b = models.CurrentTransformer.objects.get(code="CB-1-B")
    b.phase = "A"
    with pytest.raises(ValidationError) as info:
        b.full_clean()
    # Said once, on the field, not again as a form-wide constraint message.
    assert list(info.value.message_dict) == ["phase"]
    with (
        pytest.raises(IntegrityError, match="(?i)ct_one_phase_per_set|unique"),
        transaction.atomic(),
    ):
        b.save()


def test_neutral_cts_and_cts_of_no_set_are_not_counted(site):
    equipment = models.Equipment.objects.get(code="CB-1")
    for code in ("N-1", "N-2"):
        models.CurrentTransformer.objects.create(
            site=site, code=code, equipment=equipment, phase="N", set_name="CB-1-R", secondary_a=5
        )
    for code in ("A-1", "A-2"):
        models.CurrentTransformer.objects.create(
            site=site, code=code, equipment=equipment, phase="A", secondary_a=5
        )


def test_two_terminals_of_a_ct_cannot_sit_at_one_position(site):
    x3 = models.Terminal.objects.get(owner="CB-1-A", name="X3")
    x3.position_a = 100.0  # X2's position
    with pytest.raises(ValidationError) as info:
        x3.full_clean()
    assert list(info.value.message_dict) == ["position_a"]
    with pytest.raises(IntegrityError), transaction.atomic():
        x3.save()
    # Terminals of no CT have no position and never collide.
    models.Terminal.objects.create(site=site, owner="TB-1", name="20")
    models.Terminal.objects.create(site=site, owner="TB-1", name="21")


def test_an_output_cannot_target_its_own_terminal(site):
    output = models.DeviceOutput.objects.get(name="TRIP")
    output.target = output.terminal
    with pytest.raises(ValidationError) as info:
        output.full_clean()
    assert list(info.value.message_dict) == ["target"]
    with pytest.raises(IntegrityError), transaction.atomic():
        output.save()


@pytest.mark.parametrize(
    ("model", "code"),
    [(models.Device, "R 1"), (models.Device, "R:1"), (models.Switch, "TS/1/2")],
    ids=["space", "colon", "two-slashes"],
)
def test_codes_have_the_site_file_form(site, model, code):
    # schema.json $defs code / switch_code: no spaces, no ':' ("OWNER:NAME" names a terminal).
    obj = model.objects.first()
    obj.code = code
    with pytest.raises(ValidationError, match="a code has no spaces"):
        obj.full_clean()
    with pytest.raises(IntegrityError), transaction.atomic():
        obj.save()


@pytest.mark.parametrize(
    ("model", "field", "value"),
    [
        (models.Site, "design_temp_c", 300.0),
        (models.CurrentTransformer, "rating_factor", 0.8),
        (models.Wire, "r_ohm", 0.0),
        (models.DeviceInput, "burden_x_ohm", -0.1),
    ],
)
def test_ranges_of_the_site_file_are_held_by_the_database(site, model, field, value):
    # schema.json: design_temp_c -50..250, rating_factor ≥ 1, r_ohm > 0, burden_ohm items ≥ 0.
    if model is models.Wire:
        obj = models.Wire.objects.filter(length_m__isnull=False).first()
        obj.size, obj.length_m = "", None
    elif model is models.DeviceInput:
        obj = models.DeviceInput.objects.get(name="IN")
    else:
        obj = model.objects.first()
    setattr(obj, field, value)
    with pytest.raises(IntegrityError), transaction.atomic():
        obj.save()
