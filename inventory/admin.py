"""Admin for editing the record by hand: a CT with its terminals, tap history and wiring; a
device with its inputs and outputs; a switch with its positions and contacts.

Every save or delete here goes through ``services.site_record_change`` inside the admin's own
transaction, so the results computed from the old record become stale and are recomputed.
"""

from __future__ import annotations

from django import forms
from django.contrib import admin
from simple_history.admin import SimpleHistoryAdmin

from inventory import models, services


def _site_id(obj) -> int | None:
    if isinstance(obj, models.Site):
        return obj.pk
    for path in ("site_id", "ct.site_id", "device.site_id", "switch.site_id", "procedure.site_id"):
        target = obj
        try:
            for part in path.split("."):
                target = getattr(target, part)
        except AttributeError:
            continue
        if target:
            return target
    return None


class RecordAdmin(SimpleHistoryAdmin):
    """Base admin: history, and a site revision bump on every change."""

    list_per_page = 100

    def save_related(self, request, form, formsets, change) -> None:
        super().save_related(request, form, formsets, change)
        site_id = _site_id(form.instance)
        if site_id:
            services.site_record_change(site_id=site_id)

    def delete_model(self, request, obj) -> None:
        site_id = _site_id(obj)
        super().delete_model(request, obj)
        if site_id:
            services.site_record_change(site_id=site_id)

    def delete_queryset(self, request, queryset) -> None:
        site_ids = {_site_id(obj) for obj in queryset}
        super().delete_queryset(request, queryset)
        for site_id in site_ids - {None}:
            services.site_record_change(site_id=site_id)


@admin.register(models.Site)
class SiteAdmin(RecordAdmin):
    list_display = ("code", "name", "design_temp_c", "revision", "updated_at")
    search_fields = ("code", "name")
    readonly_fields = ("revision", "updated_at")


@admin.register(models.Bus)
class BusAdmin(RecordAdmin):
    list_display = ("code", "site", "kv", "three_phase_fault_ka", "ground_fault_ka", "x_over_r")
    list_filter = ("site",)
    search_fields = ("code", "site__code")


@admin.register(models.Equipment)
class EquipmentAdmin(RecordAdmin):
    list_display = ("code", "site", "kind", "bus", "in_service", "max_load_a")
    list_filter = ("site", "kind", "in_service")
    search_fields = ("code", "site__code")
    list_select_related = ("site", "bus")
    autocomplete_fields = ("bus",)


@admin.register(models.TerminalBlock)
class TerminalBlockAdmin(RecordAdmin):
    list_display = ("code", "site", "description")
    list_filter = ("site",)
    search_fields = ("code", "description")


class CTTerminalInline(admin.TabularInline):
    model = models.Terminal
    fk_name = "ct"
    fields = ("name", "position_a", "tap_role")
    readonly_fields = ("tap_role",)  # changed through the tap fields, which record the event
    extra = 0
    verbose_name = "terminal (position on the winding)"
    verbose_name_plural = "terminals and tap in use"


class TapChangeInline(admin.TabularInline):
    model = models.TapChange
    fields = ("changed_at", "from_tap", "to_tap", "changed_by", "reason")
    extra = 0
    ordering = ("changed_at",)


class CurrentTransformerForm(forms.ModelForm):
    """The CT form with the tap in use as two terminal names; a change is saved through
    ``services.ct_change_tap`` so it is recorded as a tap change event."""

    tap_first = forms.CharField(
        required=False, max_length=30, help_text="first terminal in use (current leaves it)"
    )
    tap_second = forms.CharField(required=False, max_length=30)
    tap_reason = forms.CharField(
        required=False, max_length=200, help_text="work order or reason for a tap change"
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

    def __init__(self, *args, **kwargs):
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

    def save_related(self, request, form, formsets, change) -> None:
        super().save_related(request, form, formsets, change)
        first, second = form.cleaned_data.get("tap_first"), form.cleaned_data.get("tap_second")
        if (
            first
            and second
            and (
                first != form.fields["tap_first"].initial
                or second != form.fields["tap_second"].initial
            )
        ):
            services.ct_change_tap(
                ct=form.instance,
                to=(first, second),
                by=request.user.get_username(),
                reason=form.cleaned_data.get("tap_reason") or "edited in the admin",
            )

    def save_formset(self, request, form, formset, change) -> None:
        if formset.model is not models.Terminal:
            return super().save_formset(request, form, formset, change)
        # A CT's terminals are named OWNER:NAME with the CT as owner.
        for terminal in formset.save(commit=False):
            terminal.site_id = form.instance.site_id
            terminal.owner = form.instance.code
            terminal.save()
        for terminal in formset.deleted_objects:
            terminal.delete()
        return None


@admin.register(models.Terminal)
class TerminalAdmin(RecordAdmin):
    list_display = ("__str__", "site", "ct", "position_a", "tap_role")
    list_filter = ("site",)
    search_fields = ("owner", "name")
    list_select_related = ("site", "ct")
    raw_id_fields = ("ct",)


class DeviceInputInline(admin.TabularInline):
    model = models.DeviceInput
    fields = (
        "name",
        "from_terminal",
        "to_terminal",
        "rated_a",
        "burden_va",
        "pf",
        "burden_r_ohm",
        "burden_x_ohm",
    )
    autocomplete_fields = ("from_terminal", "to_terminal")
    extra = 0


class DeviceOutputInline(admin.TabularInline):
    model = models.DeviceOutput
    fields = ("name", "terminal", "target")
    autocomplete_fields = ("terminal", "target")
    extra = 0


@admin.register(models.Device)
class DeviceAdmin(RecordAdmin):
    list_display = ("code", "site", "kind", "functions", "ratio_setting")
    list_filter = ("site", "kind")
    search_fields = ("code", "site__code")
    list_select_related = ("site",)
    inlines = (DeviceInputInline, DeviceOutputInline)


@admin.register(models.Wire)
class WireAdmin(RecordAdmin):
    list_display = ("__str__", "site", "size", "material", "length_m", "length_ft", "r_ohm")
    list_filter = ("site", "size", "material")
    search_fields = (
        "from_terminal__owner",
        "to_terminal__owner",
        "from_terminal__name",
        "to_terminal__name",
    )
    list_select_related = ("site", "from_terminal", "to_terminal")
    autocomplete_fields = ("from_terminal", "to_terminal")


@admin.register(models.Link)
class LinkAdmin(RecordAdmin):
    list_display = ("__str__", "site")
    list_filter = ("site",)
    search_fields = ("a__owner", "b__owner")
    list_select_related = ("site", "a", "b")
    autocomplete_fields = ("a", "b")


@admin.register(models.Ground)
class GroundAdmin(RecordAdmin):
    list_display = ("__str__", "site")
    list_filter = ("site",)
    list_select_related = ("site", "terminal")
    autocomplete_fields = ("terminal",)


class SwitchPositionInline(admin.TabularInline):
    model = models.SwitchPosition
    fields = ("order", "name", "is_normal")
    extra = 0


class SwitchContactInline(admin.TabularInline):
    model = models.SwitchContact
    fields = ("a", "b", "closed_in")
    autocomplete_fields = ("a", "b")
    extra = 0


@admin.register(models.Switch)
class SwitchAdmin(RecordAdmin):
    list_display = ("code", "site", "kind", "transition")
    list_filter = ("site", "kind", "transition")
    search_fields = ("code",)
    list_select_related = ("site",)
    inlines = (SwitchPositionInline, SwitchContactInline)


class ProcedureStepInline(admin.TabularInline):
    model = models.ProcedureStep
    fields = ("order", "op")
    extra = 0


@admin.register(models.Procedure)
class ProcedureAdmin(RecordAdmin):
    list_display = ("code", "site", "title", "author")
    list_filter = ("site",)
    search_fields = ("code", "title")
    inlines = (ProcedureStepInline,)
