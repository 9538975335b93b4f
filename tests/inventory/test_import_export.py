"""Site file import/export through the database: round trip, upsert in place, tap change
events, atomicity of failed imports (a failed re-import leaves the site exactly as it was)."""

from __future__ import annotations

import copy
import io
import json
from pathlib import Path

import pytest
from django.core.management import call_command
from django.core.management.base import CommandError

from inventory import models
from inventory.selectors import site_document
from inventory.services import SiteImportError, site_import
from inventory.sitefile.validate import load_site_file
from tests.inventory.docs import small_site

pytestmark = pytest.mark.django_db


def export(code: str = "TST") -> dict:
    return site_document(models.Site.objects.get(code=code))


def history_rows() -> int:
    return sum(
        m.history.model.objects.count()
        for m in (
            models.Site,
            models.CurrentTransformer,
            models.Terminal,
            models.Wire,
            models.Device,
            models.DeviceInput,
            models.Switch,
            models.TapChange,
        )
    )


def test_export_import_export_is_identical():
    site_import(doc=small_site())
    first = export()
    result = site_import(doc=copy.deepcopy(first))
    assert not result.changed
    assert export() == first
    assert json.dumps(export(), indent=2) == json.dumps(first, indent=2)


DEMO_FILES = sorted((Path(__file__).resolve().parents[2] / "fixtures" / "demo").glob("*.json"))


@pytest.mark.parametrize("path", DEMO_FILES, ids=lambda p: p.stem)
def test_demo_site_round_trip_is_identical(path):
    assert DEMO_FILES, "the demo sites are missing"
    result = site_import(doc=load_site_file(path))
    first = export(result.site)
    assert not site_import(doc=copy.deepcopy(first)).changed
    assert json.dumps(export(result.site), indent=2) == json.dumps(first, indent=2)
    shipped = load_site_file(path)
    assert len(first["cts"]) == len(shipped["cts"])
    assert len(first["wires"]) == len(shipped["wires"])
    assert sorted(p["code"] for p in first["procedures"]) == sorted(
        p["code"] for p in shipped["procedures"]
    )


def test_export_keeps_what_was_imported():
    doc = small_site()
    site_import(doc=doc)
    out = export()
    assert out["cts"][0]["terminals"] == {"X1": 0, "X2": 100, "X3": 150, "X4": 400, "X5": 600}
    assert out["cts"][0]["in_use"] == ["X1", "X4"]
    assert out["devices"][0]["inputs"][3]["burden_ohm"] == [0.05, 0.01]
    assert {"from": "R-1:IN2", "to": "TB-1:N", "size": "12AWG", "length_ft": 6.5} in out["wires"]
    assert out["switches"][0]["normal"] == "closed"
    assert out["procedures"][0]["steps"] == doc["procedures"][0]["steps"]


def test_reimport_updates_in_place_and_records_tap_change():
    site_import(doc=small_site())
    ct_pk = models.CurrentTransformer.objects.get(code="CB-1-A").pk
    wire_pks = set(models.Wire.objects.values_list("pk", flat=True))
    revision = models.Site.objects.get(code="TST").revision
    doc = export()
    doc["cts"][0]["in_use"] = ["X2", "X4"]
    doc["wires"][0]["length_m"] = 95
    result = site_import(doc=doc)
    assert result.tap_changes == ["CB-1-A: X1-X4 -> X2-X4"]
    assert models.CurrentTransformer.objects.get(code="CB-1-A").pk == ct_pk
    assert set(models.Wire.objects.values_list("pk", flat=True)) == wire_pks
    change = models.TapChange.objects.get(ct_id=ct_pk)
    assert (change.from_tap, change.to_tap) == (["X1", "X4"], ["X2", "X4"])
    assert models.Site.objects.get(code="TST").revision == revision + 1
    out = export()
    assert out["cts"][0]["in_use"] == ["X2", "X4"]
    assert out["cts"][0]["tap_changes"][0]["from"] == ["X1", "X4"]
    # The exported history re-imports without a second event.
    assert not site_import(doc=out).changed
    assert models.TapChange.objects.filter(ct_id=ct_pk).count() == 1


def test_removed_objects_are_deleted():
    site_import(doc=small_site())
    doc = export()
    doc["procedures"] = []
    doc["switches"] = [s for s in doc["switches"] if s["code"] != "TS-1/T1"]
    doc["wires"] = [w for w in doc["wires"] if "TS-1:T1R" not in (w["from"], w["to"])]
    doc["links"] = [pair for pair in doc["links"] if "TS-1:T1L" not in pair]
    site_import(doc=doc)
    assert not models.Procedure.objects.exists()
    assert not models.Switch.objects.filter(code="TS-1/T1").exists()
    assert not models.Terminal.objects.filter(owner="TS-1", name="T1L").exists()


def test_dry_run_writes_nothing():
    result = site_import(doc=small_site(), dry_run=True)
    assert result.created["current transformers"] == 3
    assert not models.Site.objects.exists()
    assert history_rows() == 0


BAD_EDITS = [
    # (edit, expected error lines) — each a record that must never be half-written.
    (
        lambda d: d["cts"][0].update(in_use=["X1", "X9"]),
        ["/cts/0/in_use/1: the CT has no terminal 'X9' (it has X1, X2, X3, X4, X5)"],
    ),
    (
        lambda d: d["wires"][0].update(length_m=-5),
        ["/wires/0/length_m: must be greater than 0, got -5"],
    ),
    (
        lambda d: d["cts"][1].update(equipment="CB-9"),
        ["/cts/1/equipment: unknown equipment 'CB-9'"],
    ),
]


@pytest.mark.parametrize(("edit", "expected"), BAD_EDITS)
def test_failed_reimport_leaves_site_exactly_as_it_was(edit, expected):
    site_import(doc=small_site())
    before, rows = export(), history_rows()
    doc = copy.deepcopy(before)
    doc["cts"][0]["in_use"] = ["X1", "X5"]  # a good change alongside the bad one
    edit(doc)
    with pytest.raises(SiteImportError) as info:
        site_import(doc=doc)
    assert info.value.errors == expected
    assert export() == before
    assert history_rows() == rows
    assert not models.TapChange.objects.exists()


def test_import_command_lists_every_error_and_exits_non_zero(tmp_path):
    doc = small_site()
    doc["wires"][0]["length_m"] = -5
    doc["cts"][1]["equipment"] = "CB-9"
    path = tmp_path / "bad.json"
    path.write_text(json.dumps(doc))
    err = io.StringIO()
    with pytest.raises(CommandError, match="2 error"):
        call_command("import_site", str(path), stderr=err)
    assert err.getvalue().splitlines() == [
        "/cts/1/equipment: unknown equipment 'CB-9'",
        "/wires/0/length_m: must be greater than 0, got -5",
    ]
    assert not models.Site.objects.exists()


def test_import_command_reports_malformed_json(tmp_path):
    path = tmp_path / "broken.json"
    path.write_text('{"format": "loopkeep.site/1", "site": {')
    with pytest.raises(CommandError, match="line 1"):
        call_command("import_site", str(path))
    assert not models.Site.objects.exists()


def test_export_command_prints_the_site_file(tmp_path):
    site_import(doc=small_site())
    out = io.StringIO()
    call_command("export_site", "TST", stdout=out)
    assert json.loads(out.getvalue()) == export()
    with pytest.raises(CommandError, match="no site with code 'NOPE'"):
        call_command("export_site", "NOPE")


def test_input_without_pf_is_resistive_and_round_trips():
    doc = small_site()
    del doc["devices"][0]["inputs"][0]["pf"]
    site_import(doc=doc)
    out = export()
    assert out["devices"][0]["inputs"][0]["pf"] == 1
    assert not site_import(doc=copy.deepcopy(out)).changed


def test_moving_tap_roles_and_normal_positions_are_in_history():
    site_import(doc=small_site())
    doc = export()
    doc["cts"][0]["in_use"] = ["X4", "X1"]  # polarity reversed: both roles move
    doc["switches"][0]["normal"] = "open"
    site_import(doc=doc)
    for name, role in (("X1", "second"), ("X4", "first")):
        terminal = models.Terminal.objects.get(owner="CB-1-A", name=name)
        assert terminal.tap_role == role
        assert terminal.history.first().tap_role == role
    closed = models.SwitchPosition.objects.get(switch__code="TS-1/1", name="closed")
    assert closed.history.first().is_normal is False
    assert models.SwitchPosition.objects.get(switch__code="TS-1/1", name="open").is_normal


def test_nan_and_infinity_are_refused_with_their_pointers(tmp_path):
    text = json.dumps(small_site()).replace('"length_m": 80', '"length_m": NaN', 1)
    text = text.replace('"x_over_r": 10', '"x_over_r": Infinity')
    path = tmp_path / "nan.json"
    path.write_text(text)
    err = io.StringIO()
    with pytest.raises(CommandError, match="2 error"):
        call_command("import_site", str(path), stderr=err)
    assert err.getvalue().splitlines() == [
        "/buses/0/x_over_r: must be a finite number, got inf",
        "/wires/0/length_m: must be a finite number, got nan",
    ]
    assert not models.Site.objects.exists()


RECORD_MODELS = [
    models.Bus,
    models.Equipment,
    models.TerminalBlock,
    models.CurrentTransformer,
    models.Terminal,
    models.TapChange,
    models.Device,
    models.DeviceInput,
    models.DeviceOutput,
    models.Wire,
    models.Link,
    models.Ground,
    models.Switch,
    models.SwitchPosition,
    models.SwitchContact,
    models.Procedure,
    models.ProcedureStep,
]


@pytest.mark.parametrize("path", DEMO_FILES[:1], ids=lambda p: p.stem)
def test_every_row_an_import_writes_has_its_history_row(path, django_user_model):
    # The import writes new rows in bulk (COPY on PostgreSQL) and their history rows in one
    # statement per table: each row gets exactly one "+" row holding its values and the user.
    clerk = django_user_model.objects.create(username="clerk")
    site_import(doc=load_site_file(path), user=clerk)
    for model in RECORD_MODELS:
        names = [f.attname for f in model._meta.concrete_fields]
        rows = list(model.objects.order_by("pk").values_list(*names))
        assert rows, f"the demo site has no {model.__name__}"
        history = model.history.model.objects.order_by("id")
        assert list(history.values_list(*names)) == rows, model.__name__
        assert set(history.values_list("history_type", "history_user_id")) == {("+", clerk.pk)}
    # A re-import that changes one wire writes one "~" row for it and nothing else.
    doc = export(load_site_file(path)["site"]["code"])
    doc["wires"][0]["length_m"] = 12.5
    before = {m: m.history.model.objects.count() for m in RECORD_MODELS}
    site_import(doc=doc, user=clerk)
    after = {m: m.history.model.objects.count() for m in RECORD_MODELS}
    assert {m.__name__: after[m] - before[m] for m in RECORD_MODELS if after[m] != before[m]} == {
        "Wire": 1
    }
    assert models.Wire.history.model.objects.latest("history_id").length_m == 12.5


def test_reimport_may_renumber_a_winding_and_swap_phases_in_a_set():
    # Distinct positions per CT and one CT per phase in a set are unique indexes, checked row
    # by row even inside one UPDATE; the import takes the moving rows out of the way first.
    site_import(doc=small_site())
    doc = small_site()
    doc["cts"][0]["terminals"] = {"X1": 0, "X2": 150, "X3": 100, "X4": 400, "X5": 600}
    doc["cts"][0]["phase"], doc["cts"][1]["phase"] = "B", "A"
    site_import(doc=doc)
    stored = site_document(models.Site.objects.get(code="TST"))
    assert stored["cts"][0]["terminals"] == {"X1": 0, "X3": 100, "X2": 150, "X4": 400, "X5": 600}
    assert [c["phase"] for c in stored["cts"]] == ["B", "A", "C"]
