"""The admin is good enough to edit a CT, its taps and its wiring by hand: every page of the
record renders, search and filters answer, and an edit through the admin bumps the site
revision (so results go stale and are recomputed)."""

from __future__ import annotations

import pytest
from django.urls import reverse

from inventory import models
from inventory.services import site_import
from tests.inventory.docs import small_site

pytestmark = pytest.mark.django_db

MODELS = [
    models.Site,
    models.Bus,
    models.Equipment,
    models.TerminalBlock,
    models.CurrentTransformer,
    models.Terminal,
    models.Device,
    models.Wire,
    models.Link,
    models.Ground,
    models.Switch,
    models.Procedure,
]


@pytest.fixture
def staff(client, django_user_model):
    user = django_user_model.objects.create_superuser("eng", "eng@example.invalid", "pw")
    client.force_login(user)
    site_import(doc=small_site())
    return client


@pytest.mark.parametrize("model", MODELS, ids=lambda m: m.__name__)
def test_changelist_and_change_form_render(staff, model):
    opts = model._meta
    listing = staff.get(reverse(f"admin:{opts.app_label}_{opts.model_name}_changelist"))
    assert listing.status_code == 200
    obj = model.objects.first()
    form = staff.get(reverse(f"admin:{opts.app_label}_{opts.model_name}_change", args=[obj.pk]))
    assert form.status_code == 200


def test_ct_search_and_filter(staff):
    url = reverse("admin:inventory_currenttransformer_changelist")
    found = staff.get(url, {"q": "CB-1-B"})
    assert found.status_code == 200
    assert list(found.context["cl"].result_list.values_list("code", flat=True)) == ["CB-1-B"]
    by_phase = staff.get(url, {"phase": "C"})
    assert list(by_phase.context["cl"].result_list.values_list("code", flat=True)) == ["CB-1-C"]


def test_editing_a_wire_in_the_admin_bumps_the_site_revision(staff):
    site = models.Site.objects.get(code="TST")
    wire = models.Wire.objects.filter(length_m=80).first()
    url = reverse("admin:inventory_wire_change", args=[wire.pk])
    response = staff.post(
        url,
        {
            "site": site.pk,
            "from_terminal": wire.from_terminal_id,
            "to_terminal": wire.to_terminal_id,
            "size": "10AWG",
            "material": "cu",
            "length_m": "120",
            "length_ft": "",
            "r_ohm": "",
        },
    )
    assert response.status_code == 302, response.content[:2000]
    wire.refresh_from_db()
    assert wire.length_m == 120
    assert models.Site.objects.get(pk=site.pk).revision == site.revision + 1
    assert wire.history.first().length_m == 120


def test_changing_the_tap_in_the_admin_records_a_tap_change(staff):
    ct = models.CurrentTransformer.objects.get(code="CB-1-A")
    url = reverse("admin:inventory_currenttransformer_change", args=[ct.pk])
    page = staff.get(url)
    data = {k: v for k, v in page.context["adminform"].form.initial.items() if v is not None}
    data.update(
        {
            "site": ct.site_id,
            "equipment": ct.equipment_id,
            "excitation": "null",
            "tap_first": "X2",
            "tap_second": "X4",
            "tap_reason": "WO-1001",
        }
    )
    for inline in page.context["inline_admin_formsets"]:
        formset = inline.formset
        management = formset.management_form
        for name, field in management.fields.items():
            data[f"{formset.prefix}-{name}"] = management.initial.get(name, field.initial)
        for i, form in enumerate(formset.forms):
            for name in form.fields:
                value = form[name].value()
                if value is not None:
                    data[f"{formset.prefix}-{i}-{name}"] = value
    response = staff.post(url, data)
    assert response.status_code == 302, [
        f.formset.errors for f in response.context["inline_admin_formsets"]
    ]
    change = models.TapChange.objects.get(ct=ct)
    assert (change.from_tap, change.to_tap, change.reason) == (
        ["X1", "X4"],
        ["X2", "X4"],
        "WO-1001",
    )
    assert change.changed_by == "eng"


def test_editing_the_site_itself_bumps_its_revision(staff):
    site = models.Site.objects.get(code="TST")
    response = staff.post(
        reverse("admin:inventory_site_change", args=[site.pk]),
        {"code": "TST", "name": site.name, "design_temp_c": "90", "notes": ""},
    )
    assert response.status_code == 302
    before = site.revision
    site.refresh_from_db()
    assert (site.design_temp_c, site.revision) == (90.0, before + 1)
