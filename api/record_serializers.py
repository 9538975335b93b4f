"""Serializers of the record resources that ``api.serializers`` does not hold already: buses,
equipment, terminal blocks, wires, links, grounds and switches (output, read from what the
selectors loaded), and the write bodies of every record resource in the site file's words.

Write bodies check shapes and ranges only; the entity services check the rules of the record
(a wire to a terminal whose owner does not exist, a second phase-A CT in a set, ...)."""

from __future__ import annotations

from typing import Any

from rest_framework import serializers

from inventory import choices

CODE: dict[str, Any] = {"max_length": 60}
LABEL: dict[str, Any] = {"max_length": 100, "help_text": "terminal OWNER:NAME, e.g. TB-101:4"}


class _Renamed(serializers.Serializer):
    """A serializer with a field named like a Python keyword (``from``): declared with a
    trailing underscore and renamed here."""

    def get_fields(self) -> dict[str, Any]:
        fields = super().get_fields()
        for name in [n for n in fields if n.endswith("_")]:
            fields[name[:-1]] = fields.pop(name)
        return fields


# ---------------------------------------------------------------------------------------------
# output


class BusSerializer(serializers.Serializer):
    """A bus and its fault level."""

    code = serializers.CharField()
    kv = serializers.FloatField(allow_null=True)
    three_phase_fault_ka = serializers.FloatField(allow_null=True)
    ground_fault_ka = serializers.FloatField(allow_null=True)
    x_over_r = serializers.FloatField(allow_null=True)


class EquipmentSerializer(serializers.Serializer):
    """Primary equipment; its CTs are live while it is in service."""

    code = serializers.CharField()
    kind = serializers.CharField()
    bus = serializers.CharField(source="bus.code", allow_null=True, default=None)
    in_service = serializers.BooleanField()
    max_load_a = serializers.FloatField(allow_null=True)


class TerminalBlockSerializer(serializers.Serializer):
    """A terminal block; its points are the terminals ``CODE:NAME``."""

    code = serializers.CharField()
    description = serializers.CharField(allow_blank=True)


class WireSerializer(_Renamed):
    """A wire between two terminals (``id`` names it in the URL)."""

    id = serializers.IntegerField()
    from_ = serializers.CharField(source="from_terminal.label")
    to = serializers.CharField(source="to_terminal.label")
    size = serializers.CharField(allow_blank=True)
    material = serializers.CharField()
    length_m = serializers.FloatField(allow_null=True)
    length_ft = serializers.FloatField(allow_null=True)
    r_ohm = serializers.FloatField(allow_null=True)


class LinkSerializer(serializers.Serializer):
    """A zero-impedance link (jumper, bar, slide link) between two terminals."""

    id = serializers.IntegerField()
    between = serializers.SerializerMethodField()

    def get_between(self, link: Any) -> list[str]:
        return [link.a.label, link.b.label]


class GroundSerializer(serializers.Serializer):
    """A terminal bonded to station ground."""

    id = serializers.IntegerField()
    terminal = serializers.CharField(source="terminal.label")


class ContactSerializer(serializers.Serializer):
    between = serializers.ListField(
        child=serializers.CharField(**LABEL), min_length=2, max_length=2
    )
    closed_in = serializers.ListField(child=serializers.CharField(max_length=30), max_length=20)


class SwitchSerializer(serializers.Serializer):
    """A switch with its ordered positions, its normal one and its contacts."""

    code = serializers.CharField()
    kind = serializers.CharField()
    transition = serializers.CharField()
    positions = serializers.SerializerMethodField()
    normal = serializers.SerializerMethodField()
    contacts = serializers.SerializerMethodField()

    def get_positions(self, switch: Any) -> list[str]:
        return [p.name for p in switch.positions.all()]

    def get_normal(self, switch: Any) -> str | None:
        return next((p.name for p in switch.positions.all() if p.is_normal), None)

    def get_contacts(self, switch: Any) -> list[dict[str, Any]]:
        return [
            {"between": [c.a.label, c.b.label], "closed_in": list(c.closed_in)}
            for c in switch.contacts.all()
        ]


# ---------------------------------------------------------------------------------------------
# write bodies (POST creates: code and the required fields; PATCH changes what it names)

_FLOAT: dict[str, Any] = {"required": False, "allow_null": True, "min_value": 0}


class SiteWriteSerializer(serializers.Serializer):
    code = serializers.CharField(max_length=40)
    name = serializers.CharField(max_length=200)
    design_temp_c = serializers.FloatField(required=False, min_value=-50, max_value=250)
    notes = serializers.CharField(required=False, allow_blank=True, max_length=10000)


class BusWriteSerializer(serializers.Serializer):
    code = serializers.CharField(**CODE)
    kv = serializers.FloatField(**_FLOAT)
    three_phase_fault_ka = serializers.FloatField(**_FLOAT)
    ground_fault_ka = serializers.FloatField(**_FLOAT)
    x_over_r = serializers.FloatField(**_FLOAT)


class EquipmentWriteSerializer(serializers.Serializer):
    code = serializers.CharField(**CODE)
    kind = serializers.ChoiceField(choices=choices.EquipmentKind.choices)
    bus = serializers.CharField(required=False, allow_null=True, help_text="bus code", **CODE)
    in_service = serializers.BooleanField(required=False)
    max_load_a = serializers.FloatField(**_FLOAT)


class TerminalBlockWriteSerializer(serializers.Serializer):
    code = serializers.CharField(**CODE)
    description = serializers.CharField(required=False, allow_blank=True, max_length=200)


class CTWriteSerializer(serializers.Serializer):
    """A CT in the site file's words. A new CT needs its winding (``terminals``) and tap
    (``in_use``); a change of ``in_use`` is recorded as a tap change for ``reason``."""

    code = serializers.CharField(**CODE)
    equipment = serializers.CharField(help_text="equipment code", **CODE)
    phase = serializers.ChoiceField(choices=choices.Phase.choices)
    set = serializers.CharField(max_length=60, required=False, allow_blank=True)
    secondary_a = serializers.ChoiceField(choices=[1, 5])
    accuracy = serializers.CharField(max_length=30, required=False, allow_blank=True)
    rated_burden_va = serializers.FloatField(**_FLOAT)
    knee_v = serializers.FloatField(**_FLOAT)
    winding_ohm = serializers.FloatField(**_FLOAT)
    rating_factor = serializers.FloatField(required=False, min_value=0)
    excitation = serializers.ListField(
        child=serializers.ListField(
            child=serializers.FloatField(min_value=0), min_length=2, max_length=2
        ),
        required=False,
        allow_null=True,
        max_length=200,
        help_text="[exciting current A, secondary V] pairs on the full winding",
    )
    nameplate = serializers.CharField(required=False, allow_blank=True, max_length=2000)
    terminals = serializers.DictField(
        child=serializers.FloatField(min_value=0), help_text="name: cumulative primary A"
    )
    in_use = serializers.ListField(
        child=serializers.CharField(max_length=30), min_length=2, max_length=2
    )
    reason = serializers.CharField(
        max_length=150, required=False, allow_blank=True, help_text="why the tap changed"
    )


class DeviceInputSerializer(_Renamed):
    name = serializers.CharField(max_length=30)
    from_ = serializers.CharField(**LABEL)
    to = serializers.CharField(**LABEL)
    rated_a = serializers.ChoiceField(choices=[1, 5])
    burden_va = serializers.FloatField(required=False, min_value=0)
    pf = serializers.FloatField(required=False, min_value=0, max_value=1)
    burden_ohm = serializers.ListField(
        child=serializers.FloatField(), min_length=2, max_length=2, required=False
    )


class DeviceOutputSerializer(serializers.Serializer):
    name = serializers.CharField(max_length=30)
    terminal = serializers.CharField(**LABEL)
    target = serializers.CharField(**LABEL)


class DeviceWriteSerializer(serializers.Serializer):
    """A device with its inputs and outputs (matched by name; given lists replace them)."""

    code = serializers.CharField(**CODE)
    kind = serializers.ChoiceField(choices=choices.DeviceKind.choices)
    functions = serializers.ListField(
        child=serializers.CharField(max_length=20), required=False, max_length=50
    )
    ratio_setting = serializers.CharField(max_length=20, required=False, allow_blank=True)
    inputs = DeviceInputSerializer(many=True, required=False, max_length=100)  # type: ignore[call-arg]
    outputs = DeviceOutputSerializer(many=True, required=False, max_length=100)  # type: ignore[call-arg]


class WireWriteSerializer(_Renamed):
    """A wire: ``size`` with ``length_m`` or ``length_ft``, or ``r_ohm`` alone."""

    from_ = serializers.CharField(**LABEL)
    to = serializers.CharField(**LABEL)
    size = serializers.CharField(max_length=20, required=False, allow_blank=True)
    material = serializers.ChoiceField(choices=choices.Material.choices, required=False)
    length_m = serializers.FloatField(**_FLOAT)
    length_ft = serializers.FloatField(**_FLOAT)
    r_ohm = serializers.FloatField(**_FLOAT)


class LinkWriteSerializer(serializers.Serializer):
    between = serializers.ListField(
        child=serializers.CharField(**LABEL), min_length=2, max_length=2
    )


class GroundWriteSerializer(serializers.Serializer):
    terminal = serializers.CharField(**LABEL)


class SwitchWriteSerializer(serializers.Serializer):
    """A switch: positions in order with the normal one, and its contacts (replaced as a
    whole when given)."""

    code = serializers.CharField(**CODE)
    kind = serializers.ChoiceField(choices=choices.SwitchKind.choices)
    transition = serializers.ChoiceField(choices=choices.Transition.choices)
    positions = serializers.ListField(
        child=serializers.CharField(max_length=30), min_length=1, max_length=20
    )
    normal = serializers.CharField(max_length=30)
    contacts = ContactSerializer(many=True, max_length=100)  # type: ignore[call-arg]


class ProcedureWriteSerializer(serializers.Serializer):
    """A procedure; ``steps`` (operations as the site file writes them) replace the stored
    steps as a whole."""

    code = serializers.CharField(**CODE)
    title = serializers.CharField(max_length=200)
    author = serializers.CharField(max_length=100, required=False, allow_blank=True)
    devices = serializers.ListField(
        child=serializers.CharField(**CODE), required=False, max_length=100
    )
    steps = serializers.ListField(child=serializers.DictField(), max_length=500)
