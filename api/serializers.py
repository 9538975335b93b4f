"""Output and input serializers of the API. Output serializers read attributes the selectors
already loaded (no query of their own); input serializers only check shapes, the services
check the rules of the record."""

from __future__ import annotations

from typing import Any

from rest_framework import serializers

from analysis.selectors import ResultsStatus, results_status
from inventory.selectors import num
from trade.ratio import format_ratio


def utc_stamp(value: Any) -> str | None:
    """A stored time as the API writes it (ISO 8601, ``Z`` for UTC); None stays None."""
    return None if value is None else value.isoformat().replace("+00:00", "Z")


class SiteSerializer(serializers.Serializer):
    """A site with its record counts and where its stored results stand."""

    code = serializers.CharField()
    name = serializers.CharField()
    design_temp_c = serializers.FloatField()
    revision = serializers.IntegerField()
    computed_revision = serializers.IntegerField(allow_null=True)
    computed_at = serializers.DateTimeField(allow_null=True)
    stale = serializers.SerializerMethodField()
    cts = serializers.IntegerField(source="n_cts")
    devices = serializers.IntegerField(source="n_devices")
    procedures = serializers.IntegerField(source="n_procedures")
    findings = serializers.IntegerField(source="n_findings", allow_null=True)
    dangers = serializers.IntegerField(source="n_dangers", allow_null=True)
    unsafe_procedures = serializers.IntegerField(source="n_unsafe_procedures", allow_null=True)
    results_status = serializers.SerializerMethodField(
        help_text="none (never computed), stale (a recompute is due), failed (the current "
        "revision could not be computed: see the results_not_computed finding) or ok"
    )
    results_error = serializers.SerializerMethodField(
        help_text="why the results could not be computed (null unless results_status is failed)"
    )

    def get_stale(self, site: Any) -> bool:
        return site.computed_revision is None or site.computed_revision < site.revision

    def get_results_status(self, site: Any) -> ResultsStatus:
        return results_status(site.computed_revision, site.revision, site.computed_status)

    def get_results_error(self, site: Any) -> str | None:
        failed = self.get_results_status(site) == "failed"
        return (site.computed_error or None) if failed else None


class CTSerializer(serializers.Serializer):
    """A CT as the site file writes it, plus the ratio of the tap in use."""

    code = serializers.CharField()
    equipment = serializers.CharField(source="equipment.code")
    phase = serializers.CharField()
    set = serializers.CharField(source="set_name", allow_blank=True)
    secondary_a = serializers.IntegerField()
    terminals = serializers.SerializerMethodField()
    in_use = serializers.SerializerMethodField()
    ratio = serializers.SerializerMethodField()
    accuracy = serializers.CharField(allow_blank=True)
    rated_burden_va = serializers.FloatField(allow_null=True)
    knee_v = serializers.FloatField(allow_null=True)
    winding_ohm = serializers.FloatField(allow_null=True)
    rating_factor = serializers.FloatField()
    excitation = serializers.JSONField(allow_null=True)
    nameplate = serializers.CharField(allow_blank=True)

    def get_terminals(self, ct: Any) -> dict[str, float | int | None]:
        return {t.name: num(t.position_a) for t in ct.ct_terminals.all()}

    def get_in_use(self, ct: Any) -> list[str]:
        roles = {t.tap_role: t.name for t in ct.ct_terminals.all() if t.tap_role}
        return [roles[r] for r in ("first", "second") if r in roles]

    def get_ratio(self, ct: Any) -> str | None:
        primary = getattr(ct, "tap_primary_a", None)
        return None if primary is None else format_ratio(primary, ct.secondary_a)


class DeviceSerializer(serializers.Serializer):
    """A device with its current inputs and trip/close outputs."""

    code = serializers.CharField()
    kind = serializers.CharField()
    functions = serializers.JSONField()
    ratio_setting = serializers.CharField(allow_blank=True)
    inputs = serializers.SerializerMethodField()
    outputs = serializers.SerializerMethodField()

    def get_inputs(self, device: Any) -> list[dict[str, Any]]:
        out = []
        for i in device.inputs.all():
            entry: dict[str, Any] = {
                "name": i.name,
                "from": i.from_terminal.label,
                "to": i.to_terminal.label,
                "rated_a": i.rated_a,
            }
            if i.burden_va is not None:
                entry.update(burden_va=num(i.burden_va), pf=num(i.pf))
            else:
                entry["burden_ohm"] = [num(i.burden_r_ohm), num(i.burden_x_ohm)]
            out.append(entry)
        return out

    def get_outputs(self, device: Any) -> list[dict[str, str]]:
        return [
            {"name": o.name, "terminal": o.terminal.label, "target": o.target.label}
            for o in device.outputs.all()
        ]


class ProcedureSerializer(serializers.Serializer):
    """A stored procedure, its steps, and its stored verdict (``safe`` null until computed)."""

    code = serializers.CharField()
    title = serializers.CharField()
    author = serializers.CharField(allow_blank=True)
    devices = serializers.JSONField()
    steps = serializers.SerializerMethodField()
    safe = serializers.SerializerMethodField()
    verdict_computed_at = serializers.SerializerMethodField()
    verdict_stale = serializers.SerializerMethodField()

    def _row(self, proc: Any) -> Any:
        return self.context.get("verdicts", {}).get(proc.code)

    def get_steps(self, proc: Any) -> list[dict[str, Any]]:
        return [s.op for s in proc.steps.all()]

    def get_safe(self, proc: Any) -> bool | None:
        row = self._row(proc)
        return None if row is None else row.safe

    def get_verdict_computed_at(self, proc: Any) -> str | None:
        row = self._row(proc)
        return None if row is None else utc_stamp(row.computed_at)

    def get_verdict_stale(self, proc: Any) -> bool:
        row = self._row(proc)
        return True if row is None else bool(row.stale)


class ProcedureDetailSerializer(ProcedureSerializer):
    """A procedure with its stored verdict JSON (null until computed)."""

    verdict = serializers.JSONField(allow_null=True)


class FindingSerializer(serializers.Serializer):
    """design.md's findings JSON."""

    site = serializers.CharField(source="site_code")
    code = serializers.CharField()
    severity = serializers.CharField()
    ct = serializers.CharField(allow_null=True)
    device = serializers.CharField(allow_null=True)
    input = serializers.CharField(allow_null=True)
    circuit = serializers.CharField(allow_null=True)
    procedure = serializers.CharField(allow_null=True)
    step = serializers.IntegerField(allow_null=True)
    stage = serializers.CharField(allow_null=True)
    message = serializers.CharField()
    computed_at = serializers.DateTimeField()
    stale = serializers.BooleanField()


class TapChangeSerializer(serializers.Serializer):
    """One recorded tap change: which CT, when, who, from and to (terminals and ratios), and
    the reason or work order."""

    site = serializers.CharField(source="ct.site.code")
    ct = serializers.CharField(source="ct.code")
    changed_at = serializers.DateTimeField()
    changed_by = serializers.CharField()
    reason = serializers.CharField()
    from_tap = serializers.ListField(child=serializers.CharField())
    to_tap = serializers.ListField(child=serializers.CharField())
    from_ratio = serializers.SerializerMethodField()
    to_ratio = serializers.SerializerMethodField()

    def _ratio(self, change: Any, tap: list[str]) -> str | None:
        pos = {t.name: t.position_a for t in change.ct.ct_terminals.all()}
        if len(tap) != 2 or tap[0] not in pos or tap[1] not in pos:
            return None  # a terminal that no longer exists on the CT
        return format_ratio(abs(pos[tap[0]] - pos[tap[1]]), change.ct.secondary_a)

    def get_from_ratio(self, change: Any) -> str | None:
        return self._ratio(change, change.from_tap)

    def get_to_ratio(self, change: Any) -> str | None:
        return self._ratio(change, change.to_tap)


class DraftCheckSerializer(serializers.Serializer):
    """The body of a draft check: operations as the site file writes them."""

    steps = serializers.ListField(child=serializers.DictField(), max_length=500)
    devices = serializers.ListField(
        child=serializers.CharField(max_length=60), required=False, default=list
    )


class TapChangeBodySerializer(serializers.Serializer):
    """The body of a tap change: the new terminals in use and why."""

    in_use = serializers.ListField(
        child=serializers.CharField(max_length=30), min_length=2, max_length=2
    )
    reason = serializers.CharField(max_length=150, required=False, default="", allow_blank=True)
    work_order = serializers.CharField(max_length=40, required=False, default="", allow_blank=True)
    changed_at = serializers.DateTimeField(required=False, default=None, allow_null=True)
    move_leads = serializers.BooleanField(
        default=True,
        help_text="re-land the leads of the old terminals in use on the new ones (false: "
        "record the tap only; the check then reports the new tap open until the wiring follows)",
    )


class WhatIfWireSerializer(serializers.Serializer):
    from_ = serializers.CharField(max_length=100)
    to = serializers.CharField(max_length=100)
    length_m = serializers.FloatField(required=False, min_value=0)
    length_ft = serializers.FloatField(required=False, min_value=0)
    r_ohm = serializers.FloatField(required=False, min_value=0)
    size = serializers.CharField(required=False, max_length=20)
    material = serializers.ChoiceField(choices=["cu", "al"], required=False)

    def get_fields(self) -> dict[str, Any]:
        fields = super().get_fields()
        fields["from"] = fields.pop("from_")  # ``from`` is a Python keyword
        return fields


class WhatIfInputSerializer(serializers.Serializer):
    device = serializers.CharField(max_length=60)
    input = serializers.CharField(max_length=30)
    burden_va = serializers.FloatField(required=False, min_value=0)
    pf = serializers.FloatField(required=False, min_value=0, max_value=1)
    burden_ohm = serializers.ListField(
        child=serializers.FloatField(), min_length=2, max_length=2, required=False
    )


class WhatIfSerializer(serializers.Serializer):
    """Hypothetical changes around one CT: another tap, other lead lengths, other burdens."""

    in_use = serializers.ListField(
        child=serializers.CharField(max_length=30), min_length=2, max_length=2, required=False
    )
    wires = WhatIfWireSerializer(many=True, required=False)
    inputs = WhatIfInputSerializer(many=True, required=False)
