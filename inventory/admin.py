"""Admin for editing the record by hand: a CT with its winding and tap in use; a device with its
inputs and outputs; a switch with its positions and contacts; wires, links, grounds; procedures.

Every save and delete goes through the entity services (``inventory.services``), which check
the rules of the record over the resulting site and bump its revision. A broken rule comes back
as a form error on the field (or inline row) it names, the page is shown again as posted, and
nothing is written. Terminals are typed as ``OWNER:NAME`` (``TB-101:4``), as the site file
writes them.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from django import forms
from django.contrib import admin, messages
from django.core.exceptions import NON_FIELD_ERRORS, PermissionDenied, ValidationError
from django.db import models as djm
from django.http import HttpResponseRedirect
from django.urls import reverse
from simple_history.admin import SimpleHistoryAdmin

from inventory import models, services

# --------------------------------------------------------------------------------------------
# Form pieces


class NamesField(forms.CharField):
    """A list of names typed as ``closed, open``; stored as a JSON list."""

    def prepare_value(self, value: Any) -> Any:
        if isinstance(value, list | tuple):
            return ", ".join(str(v) for v in value)
        return value

    def to_python(self, value: Any) -> list[str]:  # type: ignore[override]
        text = super().to_python(value)
        return [part.strip() for part in text.split(",") if part.strip()]


def _label_field(label: str) -> forms.CharField:
    return forms.CharField(
        label=label, max_length=100, help_text="OWNER:NAME, e.g. TB-101:4", strip=True
    )


class TerminalLabelsForm(forms.ModelForm):
    """A model form whose terminal foreign keys are typed as ``OWNER:NAME`` labels (extra
    fields named ``<fk>_label``); the service finds or creates the terminals."""

    terminal_fks: tuple[str, ...] = ()

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        for fk in self.terminal_fks:
            terminal = getattr(self.instance, fk, None) if self.instance.pk else None
            if terminal is not None:
                self.fields[f"{fk}_label"].initial = terminal.label

    def labels(self) -> tuple[str, ...]:
        return tuple(self.cleaned_data.get(f"{fk}_label", "") for fk in self.terminal_fks)


# --------------------------------------------------------------------------------------------
# The rejection round trip


class RecordRejected(Exception):
    """A service refused the write: errors for the main form (field or None) and for inline
    rows (formset prefix, form index or None for the formset, field or None)."""

    def __init__(
        self,
        main: dict[str | None, list[str]],
        rows: dict[tuple[str, int | None], dict[str | None, list[str]]],
    ) -> None:
        super().__init__("rejected")
        self.main = main
        self.rows = rows


class Rows:
    """The service's rows of one inline: which formset form each row came from, and how the
    service's keys (the site file's words) name the form's fields."""

    def __init__(self, formset: Any, fields: dict[str, str], default: str | None) -> None:
        self.formset = formset
        self.fields = fields
        self.default = default  # the form field of any other key (a step's "to" → "op")
        self.indices: list[int] = []

    def live(self) -> list[tuple[int, dict]]:
        """(form index, cleaned data) of the rows kept: not deleted, not left empty."""
        kept = []
        for index, form in enumerate(self.formset.forms):
            data = getattr(form, "cleaned_data", None) or {}
            if not data or data.get("DELETE"):
                continue
            kept.append((index, data))
        self.indices = [index for index, _ in kept]
        return kept


def _reject(
    exc: ValidationError,
    form: forms.ModelForm,
    rows: dict[str, Rows],
    renamed: dict[str, str],
) -> RecordRejected:
    main: dict[str | None, list[str]] = {}
    row_errors: dict[tuple[str, int | None], dict[str | None, list[str]]] = {}
    for key, found in exc.message_dict.items():
        parts = key.split(".")
        collection = rows.get(parts[0])
        if collection is not None:
            prefix = collection.formset.prefix
            if len(parts) >= 2 and parts[1].isdigit() and int(parts[1]) < len(collection.indices):
                index: int | None = collection.indices[int(parts[1])]
                sub = parts[2] if len(parts) > 2 else None
                name = collection.fields.get(sub, collection.default or sub) if sub else None
                name = name or collection.default
                target = collection.formset.forms[index]
                if name is not None and name not in target.fields:
                    found = [f"{sub}: {m}" for m in found]
                    name = None
            else:
                index, name = None, None
            row_errors.setdefault((prefix, index), {}).setdefault(name, []).extend(found)
            continue
        name = renamed.get(key, key)
        if name in form.fields:
            main.setdefault(name, []).extend(found)
        elif key == NON_FIELD_ERRORS:
            main.setdefault(None, []).extend(found)
        else:
            main.setdefault(None, []).extend(f"{key.replace('_', ' ')}: {m}" for m in found)
    return RecordRejected(main, row_errors)


class RecordInline(admin.TabularInline):
    """An inline whose rows the parent's service writes; shows the service's row errors."""

    extra = 0
    record_key = ""  # the service's name for these rows ("inputs", "contacts", ...)
    record_fields: dict[str, str] = {}  # the service's keys → this inline's form fields
    record_default_field: str | None = None

    def get_formset(self, request: Any, obj: Any = None, **kwargs: Any) -> Any:
        formset = super().get_formset(request, obj, **kwargs)
        rejected: RecordRejected | None = getattr(request, "_record_rejected", None)
        if rejected is None:
            return formset

        class Rejected(formset):  # type: ignore[misc, valid-type]
            def clean(self) -> None:
                super().clean()
                for (prefix, index), by_field in rejected.rows.items():
                    if prefix != self.prefix:
                        continue
                    if index is None:
                        raise ValidationError([m for ms in by_field.values() for m in ms])
                    for name, found in by_field.items():
                        self.forms[index].add_error(name, found)

        return Rejected


class RecordAdmin(SimpleHistoryAdmin):
    """Base admin: writes through the entity services, broken rules shown as form errors."""

    list_per_page = 100
    save_service: Callable[..., Any] | None = None
    delete_service: Callable[..., Any] | None = None
    service_arg = ""
    renamed: dict[str, str] = {}  # service keys → main form fields

    class Media:
        css = {"all": ("loopkeep/admin.css",)}

    # -- the two passes ----------------------------------------------------------------------

    def changeform_view(self, request, object_id=None, form_url="", extra_context=None):
        try:
            return super().changeform_view(request, object_id, form_url, extra_context)
        except RecordRejected as rejected:
            # The first pass was rolled back with its transaction. The second shows the same
            # POST with the service's errors added to the forms, so nothing is saved.
            request._record_rejected = rejected
            return super().changeform_view(request, object_id, form_url, extra_context)

    def get_form(self, request, obj=None, change=False, **kwargs):
        form = super().get_form(request, obj, change, **kwargs)
        rejected: RecordRejected | None = getattr(request, "_record_rejected", None)
        if rejected is None:
            return form

        class Rejected(form):  # type: ignore[misc, valid-type]
            def clean(self) -> Any:
                cleaned = super().clean()
                for name, found in rejected.main.items():
                    self.add_error(name if name in self.fields else None, found)
                return cleaned

        return Rejected

    # -- saving ------------------------------------------------------------------------------

    def save_model(self, request, obj, form, change) -> None:
        """Written in ``save_related`` by the service, with the inline rows."""

    def save_formset(self, request, form, formset, change) -> None:
        """Written by the service with the parent."""

    def save_related(self, request, form, formsets, change) -> None:
        rows = self.record_rows(formsets)
        try:
            self.record_save(request, form, rows)
        except ValidationError as exc:
            raise _reject(exc, form, rows, self.renamed) from exc

    def record_rows(self, formsets: list[Any]) -> dict[str, Rows]:
        found = {}
        for formset in formsets:
            inline = getattr(formset, "record_inline", None)
            if getattr(inline, "record_key", ""):
                found[inline.record_key] = Rows(
                    formset, inline.record_fields, inline.record_default_field
                )
        return found

    def get_formsets_with_inlines(self, request, obj=None):
        for formset, inline in super().get_formsets_with_inlines(request, obj):
            formset.record_inline = inline
            yield formset, inline

    def record_save(self, request: Any, form: forms.ModelForm, rows: dict[str, Rows]) -> None:
        assert self.save_service is not None
        type(self).save_service(**{self.service_arg: form.instance})

    def construct_change_message(self, request, form, formsets, add=False):
        return super().construct_change_message(request, form, [], add)

    # -- deleting ----------------------------------------------------------------------------

    def delete_model(self, request, obj) -> None:
        if self.delete_service is None:
            obj.delete()
        else:
            type(self).delete_service(**{self.service_arg: obj})

    def delete_view(self, request, object_id, extra_context=None):
        try:
            return super().delete_view(request, object_id, extra_context)
        except ValidationError as exc:
            self.message_user(request, " ".join(exc.messages), level=messages.ERROR)
            opts = self.opts
            return HttpResponseRedirect(
                reverse(f"admin:{opts.app_label}_{opts.model_name}_change", args=[object_id])
            )

    # -- history -----------------------------------------------------------------------------

    def has_change_history_permission(self, request, obj=None) -> bool:
        # History is read here. A revert would write one old row without its terminals, rows
        # or the rules of the record; an old value is entered again on the change page.
        return False

    def history_form_view(self, request, object_id, version_id, extra_context=None):
        if request.method == "POST":
            raise PermissionDenied("history is read only; enter the old values on the change page")
        return super().history_form_view(request, object_id, version_id, extra_context)

    def get_actions(self, request):
        # One at a time through the delete page, which checks the rules and says what stays.
        actions = super().get_actions(request)
        actions.pop("delete_selected", None)
        return actions

    def get_readonly_fields(self, request, obj=None):
        fields = tuple(super().get_readonly_fields(request, obj))
        if obj is not None and "site" in {f.name for f in self.model._meta.fields}:
            return (*fields, "site")  # a record stays in its site
        return fields


# --------------------------------------------------------------------------------------------
# Site, buses, equipment, terminal blocks


@admin.register(models.Site)
class SiteAdmin(RecordAdmin):
    list_display = ("code", "name", "design_temp_c", "revision", "updated")
    search_fields = ("code", "name")
    readonly_fields = ("revision", "updated")
    save_service = services.site_save
    service_arg = "site"

    def get_readonly_fields(self, request, obj=None):
        return self.readonly_fields

    @admin.display(description="updated", ordering="updated_at")
    def updated(self, obj: models.Site) -> str:
        return obj.updated_at.strftime("%Y-%m-%d %H:%M") if obj.updated_at else "—"


@admin.register(models.Bus)
class BusAdmin(RecordAdmin):
    list_display = ("code", "site", "kv", "three_phase_fault_ka", "ground_fault_ka", "x_over_r")
    list_filter = ("site",)
    search_fields = ("code", "site__code")
    save_service = services.bus_save
    delete_service = services.bus_delete
    service_arg = "bus"


@admin.register(models.Equipment)
class EquipmentAdmin(RecordAdmin):
    list_display = ("code", "site", "kind", "bus", "in_service", "max_load_a")
    list_filter = ("site", "kind", "in_service")
    search_fields = ("code", "site__code")
    list_select_related = ("site", "bus")
    autocomplete_fields = ("bus",)
    save_service = services.equipment_save
    delete_service = services.equipment_delete
    service_arg = "equipment"


@admin.register(models.TerminalBlock)
class TerminalBlockAdmin(RecordAdmin):
    list_display = ("code", "site", "description")
    list_filter = ("site",)
    search_fields = ("code", "description")
    save_service = services.terminal_block_save
    delete_service = services.terminal_block_delete
    service_arg = "block"


# --------------------------------------------------------------------------------------------
# CTs


class CTTerminalInline(RecordInline):
    model = models.Terminal
    fk_name = "ct"
    fields = ("name", "position_a", "tap_role")
    readonly_fields = ("tap_role",)  # set through the tap fields, which record the event
    verbose_name = "terminal (position on the winding)"
    verbose_name_plural = "winding terminals"
    record_key = "terminals"


class TapChangeInline(admin.TabularInline):
    """Tap changes are events the services record; they are read here, not edited."""

    model = models.TapChange
    fields = ("changed", "from_tap", "to_tap", "changed_by", "reason")
    readonly_fields = fields
    extra = 0
    ordering = ("changed_at",)
    verbose_name_plural = "tap changes (recorded, oldest first)"

    def has_add_permission(self, request, obj=None) -> bool:
        return False

    def has_change_permission(self, request, obj=None) -> bool:
        return False

    def has_delete_permission(self, request, obj=None) -> bool:
        return False

    @admin.display(description="changed at")
    def changed(self, obj: models.TapChange) -> str:
        return obj.changed_at.strftime("%Y-%m-%d %H:%M")


class CurrentTransformerForm(forms.ModelForm):
    """The CT form with the tap in use as two terminal names; a change is recorded as a tap
    change event (by the user, for the reason given)."""

    tap_first = forms.CharField(
        label="first terminal in use",
        required=False,
        max_length=30,
        help_text="current leaves this terminal, e.g. X1",
    )
    tap_second = forms.CharField(label="second terminal in use", required=False, max_length=30)
    tap_reason = forms.CharField(
        label="reason for a tap change",
        required=False,
        max_length=200,
        help_text="work order or reason",
    )

    class Meta:
        model = models.CurrentTransformer
        fields = (
            "site",
            "code",
            "equipment",
            "phase",
            "set_name",
            "secondary_a",
            "accuracy",
            "rated_burden_va",
            "knee_v",
            "winding_ohm",
            "rating_factor",
            "excitation",
            "nameplate",
        )
        widgets = {"excitation": forms.Textarea(attrs={"rows": 2, "cols": 60})}

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        if self.instance.pk:
            roles = dict(
                self.instance.ct_terminals.exclude(tap_role="").values_list("tap_role", "name")
            )
            self.fields["tap_first"].initial = roles.get("first", "")
            self.fields["tap_second"].initial = roles.get("second", "")


@admin.register(models.CurrentTransformer)
class CurrentTransformerAdmin(RecordAdmin):
    form = CurrentTransformerForm
    list_display = ("code", "site", "equipment", "phase", "set_name", "secondary_a", "accuracy")
    list_filter = ("site", "phase", "secondary_a", "accuracy")
    search_fields = ("code", "set_name", "equipment__code", "site__code", "nameplate")
    list_select_related = ("site", "equipment")
    autocomplete_fields = ("equipment",)
    inlines = (CTTerminalInline, TapChangeInline)
    delete_service = services.ct_delete
    service_arg = "ct"
    renamed = {"in_use": "tap_first"}
    fieldsets = (
        (None, {"fields": ("site", "code", "equipment", "phase", "set_name", "secondary_a")}),
        (
            "Rating",
            {
                "fields": (
                    "accuracy",
                    "rated_burden_va",
                    "knee_v",
                    "winding_ohm",
                    "rating_factor",
                    "excitation",
                )
            },
        ),
        ("Tap in use", {"fields": ("tap_first", "tap_second", "tap_reason")}),
        ("Nameplate", {"fields": ("nameplate",)}),
    )

    def record_save(self, request, form, rows) -> None:
        winding = rows["terminals"]
        terminals: dict[str, float] = {}
        for row, (_, data) in enumerate(winding.live()):
            name = data.get("name", "")
            if name in terminals:
                raise ValidationError({f"terminals.{row}.name": [f"{name} is listed twice"]})
            terminals[name] = data.get("position_a")
        first, second = form.cleaned_data.get("tap_first"), form.cleaned_data.get("tap_second")
        in_use = (first, second) if first or second else None
        if in_use is not None and not (first and second):
            raise ValidationError({"in_use": "give both terminals in use"})
        services.ct_save(
            ct=form.instance,
            terminals=terminals,
            in_use=in_use,
            by=request.user.get_username(),
            reason=form.cleaned_data.get("tap_reason") or "edited in the admin",
        )


@admin.register(models.Terminal)
class TerminalAdmin(admin.ModelAdmin):
    """Terminals are read here: they come into being as the wiring and the CT windings name
    them, and are changed through those."""

    list_display = ("__str__", "site", "ct", "position_a", "tap_role")
    list_filter = ("site",)
    search_fields = ("owner", "name")
    list_select_related = ("site", "ct")

    def has_add_permission(self, request) -> bool:
        return False

    def has_change_permission(self, request, obj=None) -> bool:
        return False

    def has_delete_permission(self, request, obj=None) -> bool:
        return False


# --------------------------------------------------------------------------------------------
# Devices


class DeviceInputForm(TerminalLabelsForm):
    terminal_fks = ("from_terminal", "to_terminal")
    from_terminal_label = _label_field("from terminal")
    to_terminal_label = _label_field("to terminal")

    class Meta:
        model = models.DeviceInput
        fields = (
            "name",
            "rated_a",
            "burden_va",
            "pf",
            "burden_r_ohm",
            "burden_x_ohm",
        )


class DeviceInputInline(RecordInline):
    model = models.DeviceInput
    form = DeviceInputForm
    fields = (
        "name",
        "from_terminal_label",
        "to_terminal_label",
        "rated_a",
        "burden_va",
        "pf",
        "burden_r_ohm",
        "burden_x_ohm",
    )
    record_key = "inputs"
    record_fields = {
        "from": "from_terminal_label",
        "to": "to_terminal_label",
        "burden_ohm": "burden_r_ohm",
    }


class DeviceOutputForm(TerminalLabelsForm):
    terminal_fks = ("terminal", "target")
    terminal_label = _label_field("terminal")
    target_label = _label_field("target")

    class Meta:
        model = models.DeviceOutput
        fields = ("name",)


class DeviceOutputInline(RecordInline):
    model = models.DeviceOutput
    form = DeviceOutputForm
    fields = ("name", "terminal_label", "target_label")
    record_key = "outputs"
    record_fields = {"terminal": "terminal_label", "target": "target_label"}


class DeviceForm(forms.ModelForm):
    functions = NamesField(
        label="functions (IEEE C37.2)", required=False, help_text="e.g. 50, 51, 50N, 51N"
    )

    class Meta:
        model = models.Device
        fields = ("site", "code", "kind", "functions", "ratio_setting")


def _input_entry(data: dict) -> dict:
    entry: dict[str, Any] = {
        "name": data.get("name", ""),
        "from": data.get("from_terminal_label", ""),
        "to": data.get("to_terminal_label", ""),
        "rated_a": data.get("rated_a"),
    }
    if data.get("burden_va") is not None or data.get("pf") is not None:
        entry["burden_va"] = data.get("burden_va")
        entry["pf"] = data.get("pf")
    else:
        entry["burden_ohm"] = [data.get("burden_r_ohm"), data.get("burden_x_ohm")]
    return entry


@admin.register(models.Device)
class DeviceAdmin(RecordAdmin):
    form = DeviceForm
    list_display = ("code", "site", "kind", "functions", "ratio_setting")
    list_filter = ("site", "kind")
    search_fields = ("code", "site__code")
    list_select_related = ("site",)
    inlines = (DeviceInputInline, DeviceOutputInline)
    delete_service = services.device_delete
    service_arg = "device"

    def record_save(self, request, form, rows) -> None:
        services.device_save(
            device=form.instance,
            inputs=[_input_entry(data) for _, data in rows["inputs"].live()],
            outputs=[
                {
                    "name": data.get("name", ""),
                    "terminal": data.get("terminal_label", ""),
                    "target": data.get("target_label", ""),
                }
                for _, data in rows["outputs"].live()
            ],
        )


# --------------------------------------------------------------------------------------------
# Wiring


class WireForm(TerminalLabelsForm):
    terminal_fks = ("from_terminal", "to_terminal")
    from_terminal_label = _label_field("from terminal")
    to_terminal_label = _label_field("to terminal")

    class Meta:
        model = models.Wire
        fields = ("site", "size", "material", "length_m", "length_ft", "r_ohm")


@admin.register(models.Wire)
class WireAdmin(RecordAdmin):
    form = WireForm
    fields = (
        "site",
        "from_terminal_label",
        "to_terminal_label",
        "size",
        "material",
        "length_m",
        "length_ft",
        "r_ohm",
    )
    list_display = ("__str__", "site", "size", "material", "length_m", "length_ft", "r_ohm")
    list_filter = ("site", "size", "material")
    search_fields = (
        "from_terminal__owner",
        "to_terminal__owner",
        "from_terminal__name",
        "to_terminal__name",
    )
    list_select_related = ("site", "from_terminal", "to_terminal")
    delete_service = services.wire_delete
    service_arg = "wire"
    renamed = {"from_terminal": "from_terminal_label", "to_terminal": "to_terminal_label"}

    def record_save(self, request, form, rows) -> None:
        services.wire_save(wire=form.instance, ends=form.labels())


class LinkForm(TerminalLabelsForm):
    terminal_fks = ("a", "b")
    a_label = _label_field("terminal A")
    b_label = _label_field("terminal B")

    class Meta:
        model = models.Link
        fields = ("site",)


@admin.register(models.Link)
class LinkAdmin(RecordAdmin):
    form = LinkForm
    fields = ("site", "a_label", "b_label")
    list_display = ("__str__", "site")
    list_filter = ("site",)
    search_fields = ("a__owner", "b__owner")
    list_select_related = ("site", "a", "b")
    delete_service = services.link_delete
    service_arg = "link"
    renamed = {"a": "a_label", "b": "b_label"}

    def record_save(self, request, form, rows) -> None:
        services.link_save(link=form.instance, ends=form.labels())


class GroundForm(TerminalLabelsForm):
    terminal_fks = ("terminal",)
    terminal_label = _label_field("terminal")

    class Meta:
        model = models.Ground
        fields = ("site",)


@admin.register(models.Ground)
class GroundAdmin(RecordAdmin):
    form = GroundForm
    fields = ("site", "terminal_label")
    list_display = ("__str__", "site")
    list_filter = ("site",)
    list_select_related = ("site", "terminal")
    delete_service = services.ground_delete
    service_arg = "ground"
    renamed = {"terminal": "terminal_label"}

    def record_save(self, request, form, rows) -> None:
        services.ground_save(ground=form.instance, terminal=form.labels()[0])


# --------------------------------------------------------------------------------------------
# Switches


class SwitchPositionInline(RecordInline):
    model = models.SwitchPosition
    fields = ("order", "name", "is_normal")
    record_key = "positions"


class SwitchContactForm(TerminalLabelsForm):
    terminal_fks = ("a", "b")
    a_label = _label_field("terminal A")
    b_label = _label_field("terminal B")
    closed_in = NamesField(label="closed in", help_text="positions, e.g. closed")

    class Meta:
        model = models.SwitchContact
        fields = ("closed_in",)


class SwitchContactInline(RecordInline):
    model = models.SwitchContact
    form = SwitchContactForm
    fields = ("a_label", "b_label", "closed_in")
    record_key = "contacts"
    record_fields = {"between": "b_label", "closed_in": "closed_in"}


@admin.register(models.Switch)
class SwitchAdmin(RecordAdmin):
    list_display = ("code", "site", "kind", "transition")
    list_filter = ("site", "kind", "transition")
    search_fields = ("code",)
    list_select_related = ("site",)
    inlines = (SwitchPositionInline, SwitchContactInline)
    delete_service = services.switch_delete
    service_arg = "switch"

    def record_save(self, request, form, rows) -> None:
        positions = sorted(rows["positions"].live(), key=lambda item: item[1].get("order") or 0)
        rows["positions"].indices = [index for index, _ in positions]
        normal = [data["name"] for _, data in positions if data.get("is_normal")]
        if len(normal) != 1:
            raise ValidationError(
                {"positions": f"mark one normal position ({len(normal)} are marked)"}
            )
        services.switch_save(
            switch=form.instance,
            positions=[data.get("name", "") for _, data in positions],
            normal=normal[0],
            contacts=[
                {
                    "between": [data.get("a_label", ""), data.get("b_label", "")],
                    "closed_in": data.get("closed_in") or [],
                }
                for _, data in rows["contacts"].live()
            ],
        )


# --------------------------------------------------------------------------------------------
# Procedures


class ProcedureStepInline(RecordInline):
    model = models.ProcedureStep
    fields = ("order", "op")
    record_key = "steps"
    record_default_field = "op"
    formfield_overrides = {djm.JSONField: {"widget": forms.TextInput(attrs={"size": 60})}}


class ProcedureForm(forms.ModelForm):
    devices = NamesField(label="devices worked on", required=False, help_text="e.g. R-101")

    class Meta:
        model = models.Procedure
        fields = ("site", "code", "title", "author", "devices")


@admin.register(models.Procedure)
class ProcedureAdmin(RecordAdmin):
    form = ProcedureForm
    list_display = ("code", "site", "title", "author")
    list_filter = ("site",)
    search_fields = ("code", "title")
    inlines = (ProcedureStepInline,)
    delete_service = services.procedure_delete
    service_arg = "procedure"

    def record_save(self, request, form, rows) -> None:
        steps = sorted(rows["steps"].live(), key=lambda item: item[1].get("order") or 0)
        rows["steps"].indices = [index for index, _ in steps]
        services.procedure_save(
            procedure=form.instance, steps=[data.get("op") for _, data in steps]
        )
