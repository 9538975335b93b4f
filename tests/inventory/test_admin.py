"""The admin as a records clerk uses it: every page of the record renders, search and filters
answer, every save goes through the entity services (revision bumped, history kept), and a
broken rule of the record is a form error on the field or inline row it names — never a server
error — with nothing written. A site edited through the admin always exports a file the
importer accepts.

The rules are the site file's (inventory/sitefile/validate.py and the JSON Schema); the
database constraints hold what a row can."""

from __future__ import annotations

import pytest
from django.urls import reverse

from inventory import models
from inventory.selectors import site_document
from inventory.services import site_import
from inventory.sitefile import validate_site_document
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


def _url(obj, action: str = "change") -> str:
    opts = obj._meta
    return reverse(f"admin:{opts.app_label}_{opts.model_name}_{action}", args=[obj.pk])


def _page_data(page) -> dict:
    """The POST the change page would send unchanged: the main form and every inline row."""
    data = {}
    form = page.context["adminform"].form
    for name in form.fields:
        value = form[name].value()
        if value is not None:
            data[name] = value
    for inline in page.context["inline_admin_formsets"]:
        formset = inline.formset
        management = formset.management_form
        for name in management.fields:
            data[f"{formset.prefix}-{name}"] = management[name].value()
        for i, row in enumerate(formset.forms):
            for name in row.fields:
                value = row[name].value()
                if value is not None:
                    data[f"{formset.prefix}-{i}-{name}"] = value
    return data


def _inline_prefix(page, model) -> str:
    for inline in page.context["inline_admin_formsets"]:
        if inline.formset.model is model:
            return inline.formset.prefix
    raise AssertionError(f"no inline of {model.__name__}")


def _errors(response) -> dict[str, list[str]]:
    """Every error on the re-shown page: main fields by name, inline rows as PREFIX-i-field,
    an inline's own errors as PREFIX."""
    assert response.status_code == 200, response.status_code
    found = {k: list(v) for k, v in response.context["adminform"].form.errors.items()}
    for inline in response.context["inline_admin_formsets"]:
        formset = inline.formset
        if formset.non_form_errors():
            found[formset.prefix] = list(formset.non_form_errors())
        for i, row in enumerate(formset.forms):
            for name, messages in row.errors.items():
                found[f"{formset.prefix}-{i}-{name}"] = list(messages)
    assert found, "the page came back without an error"
    return found


def _post_broken(staff, obj, change) -> tuple[dict, dict]:
    """POST the change page with ``change`` applied; expect errors and nothing written."""
    site = models.Site.objects.get(code="TST")
    before, revision = site_document(site), site.revision
    url = _url(obj)
    page = staff.get(url)
    data = _page_data(page)
    change(data, page)
    errors = _errors(staff.post(url, data))
    site.refresh_from_db()
    assert site.revision == revision
    assert site_document(site) == before
    return errors, data


@pytest.mark.parametrize("model", MODELS, ids=lambda m: m.__name__)
def test_changelist_and_change_form_render(staff, model):
    opts = model._meta
    listing = staff.get(reverse(f"admin:{opts.app_label}_{opts.model_name}_changelist"))
    assert listing.status_code == 200
    obj = model.objects.first()
    form = staff.get(_url(obj))
    assert form.status_code == 200
    assert b"Loopkeep" in form.content


def test_labels_carry_units(staff):
    page = staff.get(_url(models.CurrentTransformer.objects.first()))
    text = page.content.decode()
    for label in ("Secondary rating (A)", "Winding resistance (Ω at 75 °C)", "Rated burden (VA)"):
        assert label in text


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
    url = _url(wire)
    data = _page_data(staff.get(url))
    data["length_m"] = "120"
    response = staff.post(url, data)
    assert response.status_code == 302, _errors(response)
    wire.refresh_from_db()
    assert wire.length_m == 120
    assert models.Site.objects.get(pk=site.pk).revision == site.revision + 1
    assert wire.history.first().length_m == 120
    assert wire.history.first().history_user.username == "eng"


def test_changing_the_tap_in_the_admin_records_a_tap_change(staff):
    ct = models.CurrentTransformer.objects.get(code="CB-1-A")
    url = _url(ct)
    data = _page_data(staff.get(url))
    data.update({"tap_first": "X2", "tap_second": "X4", "tap_reason": "WO-1001"})
    response = staff.post(url, data)
    assert response.status_code == 302, _errors(response)
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
        _url(site), {"code": "TST", "name": site.name, "design_temp_c": "90", "notes": ""}
    )
    assert response.status_code == 302
    before = site.revision
    site.refresh_from_db()
    assert (site.design_temp_c, site.revision) == (90.0, before + 1)


# -- each rule broken through the admin: a form error on its field, nothing written ----------


def test_second_phase_a_ct_in_a_set(staff):
    ct = models.CurrentTransformer.objects.get(code="CB-1-B")
    errors, _ = _post_broken(staff, ct, lambda data, page: data.update(phase="A"))
    assert "already has a phase A CT (CB-1-A)" in " ".join(errors["phase"])


@pytest.mark.parametrize(
    ("first", "second"), [("X9", "X4"), ("X4", "X4")], ids=["unknown", "duplicate"]
)
def test_unknown_or_duplicate_tap_terminal(staff, first, second):
    ct = models.CurrentTransformer.objects.get(code="CB-1-A")
    errors, _ = _post_broken(
        staff, ct, lambda data, page: data.update(tap_first=first, tap_second=second)
    )
    assert "terminals in use must be two different terminals" in " ".join(errors["tap_first"])


def test_two_winding_terminals_at_one_position(staff):
    ct = models.CurrentTransformer.objects.get(code="CB-1-A")

    def change(data, page):
        prefix = _inline_prefix(page, models.Terminal)
        x2 = next(k for k, v in data.items() if k.startswith(prefix) and v == "X2")
        data[x2.replace("-name", "-position_a")] = "150"  # X3 is at 150 A

    errors, _ = _post_broken(staff, ct, change)
    assert "same point of the winding" in " ".join(" ".join(v) for v in errors.values())


def test_bad_accuracy_string(staff):
    ct = models.CurrentTransformer.objects.get(code="CB-1-A")
    # IEEE C57.13 relaying classes are C100, C200, C400, C800 (S-code of shared/reference.md
    # not needed: the class list is the parser's own, trade.accuracy).
    errors, _ = _post_broken(staff, ct, lambda data, page: data.update(accuracy="C450"))
    assert list(errors) == ["accuracy"]


def test_bad_ratio_string(staff):
    relay = models.Device.objects.get(code="R-1")
    errors, _ = _post_broken(staff, relay, lambda data, page: data.update(ratio_setting="400-5"))
    assert "must look like '400:5'" in " ".join(errors["ratio_setting"])


def test_unknown_conductor_size(staff):
    wire = models.Wire.objects.filter(length_m=80).first()
    errors, _ = _post_broken(staff, wire, lambda data, page: data.update(size="11AWG"))
    assert list(errors) == ["size"]


def test_wire_from_a_terminal_to_itself(staff):
    wire = models.Wire.objects.filter(length_m=80).first()
    errors, _ = _post_broken(
        staff, wire, lambda data, page: data.update(to_terminal_label=data["from_terminal_label"])
    )
    assert "from a terminal to itself" in " ".join(errors["to_terminal_label"])


def test_wire_to_a_terminal_whose_owner_does_not_exist(staff):
    wire = models.Wire.objects.filter(length_m=80).first()
    errors, _ = _post_broken(
        staff, wire, lambda data, page: data.update(to_terminal_label="TB-9:1")
    )
    assert "unknown owner 'TB-9'" in " ".join(errors["to_terminal_label"])


def test_switch_with_no_normal_position(staff):
    switch = models.Switch.objects.get(code="TS-1/1")

    def change(data, page):
        prefix = _inline_prefix(page, models.SwitchPosition)
        for key in [k for k in data if k.startswith(prefix) and k.endswith("-is_normal")]:
            data.pop(key)  # an unticked box is not posted

    errors, _ = _post_broken(staff, switch, change)
    assert "mark one normal position" in " ".join(" ".join(v) for v in errors.values())


def test_contact_closed_in_a_position_that_does_not_exist(staff):
    switch = models.Switch.objects.get(code="TS-1/1")
    prefix = {}

    def change(data, page):
        prefix["p"] = _inline_prefix(page, models.SwitchContact)
        data[f"{prefix['p']}-1-closed_in"] = "shorted"

    errors, _ = _post_broken(staff, switch, change)
    assert "'shorted' is not one of the positions" in " ".join(errors[f"{prefix['p']}-1-closed_in"])


def test_device_input_to_an_unknown_terminal_owner(staff):
    relay = models.Device.objects.get(code="R-1")
    prefix = {}

    def change(data, page):
        prefix["p"] = _inline_prefix(page, models.DeviceInput)
        data[f"{prefix['p']}-2-from_terminal_label"] = "NOWHERE:1"

    errors, _ = _post_broken(staff, relay, change)
    assert "unknown owner 'NOWHERE'" in " ".join(errors[f"{prefix['p']}-2-from_terminal_label"])


def test_procedure_step_to_a_position_that_does_not_exist(staff):
    procedure = models.Procedure.objects.get(code="P-1")
    prefix = {}

    def change(data, page):
        prefix["p"] = _inline_prefix(page, models.ProcedureStep)
        data[f"{prefix['p']}-1-op"] = '{"set": "TS-1/1", "to": "half-open"}'

    errors, _ = _post_broken(staff, procedure, change)
    assert "has no position 'half-open'" in " ".join(errors[f"{prefix['p']}-1-op"])


def test_bus_with_a_negative_fault_level(staff):
    bus = models.Bus.objects.get(code="B69")
    errors, _ = _post_broken(staff, bus, lambda data, page: data.update(ground_fault_ka="-3"))
    assert "ground_fault_ka must be greater than 0" in " ".join(
        " ".join(v) for v in errors.values()
    )


def test_deleting_a_device_that_is_still_wired_is_refused_with_the_reason(staff):
    relay = models.Device.objects.get(code="R-1")
    response = staff.post(_url(relay, "delete"), {"post": "yes"}, follow=True)
    assert response.status_code == 200
    shown = " ".join(str(m) for m in response.context["messages"])
    assert "unknown owner 'R-1'" in shown
    assert models.Device.objects.filter(code="R-1").exists()


def test_results_cannot_be_deleted_or_edited_by_hand(staff):
    from django.contrib.admin.sites import site as admin_site

    from analysis.admin import FindingAdmin, ProcedureVerdictAdmin
    from analysis.models import Finding, ProcedureVerdict

    request = staff.get("/admin/").wsgi_request
    for admin_class, model in ((FindingAdmin, Finding), (ProcedureVerdictAdmin, ProcedureVerdict)):
        model_admin = admin_class(model, admin_site)
        assert not model_admin.has_delete_permission(request)
        assert not model_admin.has_change_permission(request)
        assert not model_admin.has_add_permission(request)


# -- a site edited through the admin exports a file the importer accepts ---------------------


def test_a_site_edited_through_the_admin_exports_a_file_the_importer_accepts(staff):
    site = models.Site.objects.get(code="TST")

    def save(obj, change, add: bool = False):
        url = reverse(f"admin:inventory_{obj._meta.model_name}_add") if add else _url(obj)
        page = staff.get(url)
        data = _page_data(page)
        change(data, page)
        response = staff.post(url, data)
        assert response.status_code == 302, _errors(response)

    # A tap change, a renamed relay, a third position on a test switch, a new wire and link,
    # a new CT set member on the neutral, and a procedure step added.
    ct = models.CurrentTransformer.objects.get(code="CB-1-A")
    save(ct, lambda d, p: d.update(tap_first="X1", tap_second="X5", tap_reason="WO-7"))
    save(models.Device.objects.get(code="R-1"), lambda d, p: d.update(code="R-1A"))

    def add_position(data, page):
        prefix = _inline_prefix(page, models.SwitchPosition)
        total = int(data[f"{prefix}-TOTAL_FORMS"])
        data[f"{prefix}-TOTAL_FORMS"] = str(total + 1)
        data.update({f"{prefix}-{total}-order": "2", f"{prefix}-{total}-name": "test"})

    save(models.Switch.objects.get(code="TS-1/1"), add_position)
    wire = models.Wire(site=site)
    wire._meta  # noqa: B018 - the add page of the model
    save(
        wire,
        lambda d, p: d.update(
            site=site.pk,
            from_terminal_label="TB-1:N",
            to_terminal_label="TB-1:7",
            size="12AWG",
            length_ft="4",
            material="cu",
        ),
        add=True,
    )

    def add_step(data, page):
        prefix = _inline_prefix(page, models.ProcedureStep)
        total = int(data[f"{prefix}-TOTAL_FORMS"])
        data[f"{prefix}-TOTAL_FORMS"] = str(total + 1)
        data.update(
            {f"{prefix}-{total}-order": "6", f"{prefix}-{total}-op": '{"note": "tag R-1A"}'}
        )

    save(models.Procedure.objects.get(code="P-1"), add_step)

    doc = site_document(site)
    assert validate_site_document(doc) == []
    assert doc["procedures"][0]["devices"] == ["R-1A"]
    assert {"remove_device": "R-1A"} in doc["procedures"][0]["steps"]
    # The exported file imports as it stands (as another site) and exports identically.
    doc["site"]["code"] = "TST2"
    site_import(doc=doc)
    again = site_document(models.Site.objects.get(code="TST2"))
    for key in ("cts",):
        for entry in doc[key] + again[key]:
            entry.pop("tap_changes", None)
    assert again == doc


def test_analysis_pages_render_read_only_with_rounded_times(staff):
    from analysis.models import AnalysisRun

    run = AnalysisRun.objects.create(kind="site", site_ids=[1], sites_total=1, read_s=0.123456)
    listing = staff.get(reverse("admin:analysis_analysisrun_changelist"))
    assert listing.status_code == 200
    page = staff.get(reverse("admin:analysis_analysisrun_change", args=[run.pk]))
    assert page.status_code == 200
    assert b"0.12 s" in page.content and b"0.123456" not in page.content
    assert b'name="_save"' not in page.content
    for name in ("analysis_finding", "analysis_procedureverdict", "analysis_sitecomputation"):
        assert staff.get(reverse(f"admin:{name}_changelist")).status_code == 200
    # The outbox is the inventory's model, shown in the analysis admin beside the runs.
    assert staff.get(reverse("admin:inventory_sitechange_changelist")).status_code == 200


def test_adding_a_ct_with_its_winding_through_the_admin(staff):
    site = models.Site.objects.get(code="TST")
    url = reverse("admin:inventory_currenttransformer_add")
    page = staff.get(url)
    data = _page_data(page)
    prefix = _inline_prefix(page, models.Terminal)
    data.update(
        {
            "site": site.pk,
            "code": "CB-1-N",
            "equipment": models.Equipment.objects.get(code="CB-1").pk,
            "phase": "N",
            "set_name": "CB-1-R",
            "secondary_a": "5",
            "accuracy": "C200",
            "rating_factor": "1.0",
            "excitation": "null",
            "tap_first": "X1",
            "tap_second": "X2",
            f"{prefix}-TOTAL_FORMS": "2",
            f"{prefix}-0-name": "X1",
            f"{prefix}-0-position_a": "0",
            f"{prefix}-1-name": "X2",
            f"{prefix}-1-position_a": "200",
        }
    )
    response = staff.post(url, data)
    assert response.status_code == 302, _errors(response)
    entry = next(c for c in site_document(site)["cts"] if c["code"] == "CB-1-N")
    assert (entry["terminals"], entry["in_use"]) == ({"X1": 0, "X2": 200}, ["X1", "X2"])
    assert "tap_changes" not in entry  # the first tap is the CT's initial value, not a change
    # Without a tap in use the CT is not written: the site file needs one.
    data.update({"code": "CB-1-N2", "tap_first": "", "tap_second": ""})
    errors = _errors(staff.post(url, data))
    assert "tap_first" in errors
    assert not models.CurrentTransformer.objects.filter(code="CB-1-N2").exists()


def test_a_new_site_and_its_bus_through_the_admin(staff):
    response = staff.post(
        reverse("admin:inventory_site_add"),
        {"code": "NEW", "name": "New Yard", "design_temp_c": "75", "notes": ""},
    )
    assert response.status_code == 302
    site = models.Site.objects.get(code="NEW")
    assert validate_site_document(site_document(site)) == []
    bad = staff.post(
        reverse("admin:inventory_site_add"),
        {"code": "NEW 2", "name": "Spaced", "design_temp_c": "75", "notes": ""},
    )
    assert "a code has no spaces" in " ".join(" ".join(v) for v in _errors(bad).values())
    response = staff.post(
        reverse("admin:inventory_bus_add"),
        {"site": site.pk, "code": "B12", "kv": "12.47", "three_phase_fault_ka": "8"},
    )
    assert response.status_code == 302, _errors(response)
    assert site_document(site)["buses"] == [{"code": "B12", "kv": 12.47, "three_phase_fault_ka": 8}]


def test_history_is_read_only(staff):
    wire = models.Wire.objects.filter(length_m=80).first()
    version = wire.history.first()
    url = reverse("admin:inventory_wire_simple_history", args=[wire.pk, version.history_id])
    assert staff.get(url).status_code == 200
    assert staff.post(url, {"length_m": "1"}).status_code == 403
    assert staff.get(reverse("admin:inventory_wire_history", args=[wire.pk])).status_code == 200
