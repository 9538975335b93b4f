"""The physical record of CT secondary circuits.

Natural keys are per site: a CT, device, switch, bus, equipment, terminal block or procedure code
is unique inside its site. The invariants below are named database constraints, and the same
rules are in ``clean()`` so the admin, the API and the importer report them as field errors.
Every model keeps history (django-simple-history); bulk writes in the services record it
explicitly.

Writes go through ``inventory.services`` (one transaction each); nothing here has side effects
in ``save()``.
"""

from __future__ import annotations

from django.core.exceptions import ValidationError
from django.core.validators import MinValueValidator
from django.db import models
from django.db.models import F, Q
from simple_history.models import HistoricalRecords

from inventory import choices


def _positive(field: str) -> Q:
    return Q(**{f"{field}__isnull": True}) | Q(**{f"{field}__gt": 0})


class Site(models.Model):
    """A substation. ``revision`` goes up by one with every write that changes a circuit, so a
    result can say which inputs it was computed from."""

    code = models.CharField(max_length=40, unique=True)
    name = models.CharField(max_length=200)
    design_temp_c = models.FloatField(
        default=75.0, help_text="conductor temperature for lead resistance, °C"
    )
    notes = models.TextField(blank=True)
    revision = models.PositiveBigIntegerField(default=1, editable=False)
    updated_at = models.DateTimeField(auto_now=True)
    history = HistoricalRecords()

    class Meta:
        ordering = ["code"]

    def __str__(self) -> str:
        return self.code


class SiteOwned(models.Model):
    """A coded object of one site (each subclass adds its ``site`` foreign key)."""

    code = models.CharField(max_length=60)

    class Meta:
        abstract = True
        ordering = ["site", "code"]

    def __str__(self) -> str:
        return self.code


def _unique_code(name: str) -> models.UniqueConstraint:
    return models.UniqueConstraint(fields=["site", "code"], name=f"{name}_unique_code_per_site")


class Bus(SiteOwned):
    """A bus and its fault level, for the saturation checks."""

    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="buses")
    kv = models.FloatField(null=True, blank=True, help_text="nominal voltage, kV")
    three_phase_fault_ka = models.FloatField(null=True, blank=True)
    ground_fault_ka = models.FloatField(
        null=True, blank=True, help_text="single-line-to-ground fault current, kA"
    )
    x_over_r = models.FloatField(null=True, blank=True)
    history = HistoricalRecords()

    class Meta(SiteOwned.Meta):
        verbose_name_plural = "buses"
        constraints = [
            _unique_code("bus"),
            models.CheckConstraint(condition=_positive("kv"), name="bus_kv_positive"),
            models.CheckConstraint(
                condition=_positive("three_phase_fault_ka"), name="bus_3ph_fault_positive"
            ),
            models.CheckConstraint(
                condition=_positive("ground_fault_ka"), name="bus_ground_fault_positive"
            ),
            models.CheckConstraint(condition=_positive("x_over_r"), name="bus_x_over_r_positive"),
        ]


class Equipment(SiteOwned):
    """Primary equipment whose current the CTs measure. A CT is live when its equipment is
    in service (energized)."""

    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="equipment")
    kind = models.CharField(max_length=20, choices=choices.EquipmentKind.choices)
    bus = models.ForeignKey(Bus, on_delete=models.PROTECT, null=True, blank=True)
    in_service = models.BooleanField(default=True)
    max_load_a = models.FloatField(null=True, blank=True, help_text="maximum load, primary A")
    history = HistoricalRecords()

    class Meta(SiteOwned.Meta):
        verbose_name_plural = "equipment"
        constraints = [
            _unique_code("equipment"),
            models.CheckConstraint(
                condition=_positive("max_load_a"), name="equipment_max_load_positive"
            ),
        ]

    def clean(self) -> None:
        if self.bus_id and self.bus.site_id != self.site_id:
            raise ValidationError({"bus": "bus belongs to another site"})


class TerminalBlock(SiteOwned):
    """A terminal block (or panel strip); its points are terminals ``TB:NAME``."""

    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="terminal_blocks")
    description = models.CharField(max_length=200, blank=True)
    history = HistoricalRecords()

    class Meta(SiteOwned.Meta):
        constraints = [_unique_code("terminal_block")]


class CurrentTransformer(SiteOwned):
    """A CT winding. Its terminals (``Terminal`` rows with ``position_a``) describe a
    multi-ratio winding: the ratio of a pair is |pos(a) - pos(b)| : ``secondary_a``. The two
    terminals in use carry ``tap_role`` first/second (current leaves the first)."""

    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="cts")
    equipment = models.ForeignKey(Equipment, on_delete=models.PROTECT, related_name="cts")
    phase = models.CharField(max_length=1, choices=choices.Phase.choices)
    set_name = models.CharField(
        max_length=60, blank=True, help_text="the three-phase set this CT belongs to"
    )
    secondary_a = models.PositiveSmallIntegerField(choices=choices.SecondaryRating.choices)
    accuracy = models.CharField(max_length=30, blank=True, help_text="e.g. C400, 0.3B0.9, 5P20")
    rated_burden_va = models.FloatField(null=True, blank=True, help_text="IEC P classes, VA")
    knee_v = models.FloatField(null=True, blank=True, help_text="IEC PX knee-point e.m.f., V")
    winding_ohm = models.FloatField(
        null=True, blank=True, help_text="full-winding secondary resistance at 75 °C, Ω"
    )
    rating_factor = models.FloatField(default=1.0)
    excitation = models.JSONField(
        null=True, blank=True, help_text="[[exciting current A, secondary V], ...], full winding"
    )
    nameplate = models.TextField(blank=True)
    history = HistoricalRecords()

    class Meta(SiteOwned.Meta):
        verbose_name = "current transformer"
        constraints = [
            _unique_code("ct"),
            models.CheckConstraint(
                condition=Q(secondary_a__in=[1, 5]), name="ct_secondary_1_or_5_a"
            ),
            models.CheckConstraint(condition=_positive("winding_ohm"), name="ct_winding_positive"),
            models.CheckConstraint(
                condition=Q(rating_factor__gt=0), name="ct_rating_factor_positive"
            ),
            models.CheckConstraint(
                condition=_positive("rated_burden_va"), name="ct_rated_burden_positive"
            ),
            models.CheckConstraint(condition=_positive("knee_v"), name="ct_knee_v_positive"),
        ]

    def clean(self) -> None:
        errors: dict[str, str] = {}
        if self.equipment_id and self.equipment.site_id != self.site_id:
            errors["equipment"] = "equipment belongs to another site"
        if self.accuracy:
            from analysis.engine.ratings.accuracy import parse_accuracy

            try:
                parse_accuracy(self.accuracy)
            except ValueError as exc:
                errors["accuracy"] = str(exc)
        if self.excitation is not None:
            from inventory.validation import excitation_error

            message = excitation_error(self.excitation)
            if message:
                errors["excitation"] = message
        if errors:
            raise ValidationError(errors)


class Terminal(models.Model):
    """A named point ``OWNER:NAME`` of one site. CT terminals also carry their cumulative
    primary ampere position on the winding and, for the two in use, their tap role."""

    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="terminals")
    owner = models.CharField(max_length=60)
    name = models.CharField(max_length=30)
    ct = models.ForeignKey(
        CurrentTransformer,
        on_delete=models.CASCADE,
        null=True,
        blank=True,
        related_name="ct_terminals",
    )
    position_a = models.FloatField(
        null=True, blank=True, help_text="cumulative primary A at this point of the winding"
    )
    tap_role = models.CharField(
        max_length=6, choices=choices.TapRole.choices, blank=True, default=""
    )
    history = HistoricalRecords()

    class Meta:
        ordering = ["site", "owner", "name"]
        constraints = [
            models.UniqueConstraint(
                fields=["site", "owner", "name"], name="terminal_unique_per_site"
            ),
            models.CheckConstraint(
                condition=Q(ct__isnull=True, position_a__isnull=True, tap_role="")
                | Q(ct__isnull=False, position_a__isnull=False, position_a__gte=0),
                name="terminal_ct_position_together",
            ),
            # At most one first and one second terminal per CT: the tap in use is one pair of
            # distinct terminals of that CT.
            models.UniqueConstraint(
                fields=["ct", "tap_role"],
                condition=~Q(tap_role=""),
                name="terminal_one_tap_end_per_role",
            ),
        ]

    def __str__(self) -> str:
        return f"{self.owner}:{self.name}"

    @property
    def label(self) -> str:
        return f"{self.owner}:{self.name}"


class TapChange(models.Model):
    """A change of the terminals in use of a CT. The current tap is the last event's ``to``."""

    ct = models.ForeignKey(CurrentTransformer, on_delete=models.CASCADE, related_name="tap_changes")
    from_tap = models.JSONField(help_text='["X1", "X5"]')
    to_tap = models.JSONField(help_text='["X1", "X4"]')
    changed_at = models.DateTimeField()
    changed_by = models.CharField(max_length=100, blank=True)
    reason = models.CharField(max_length=200, blank=True, help_text="work order or reason")
    history = HistoricalRecords()

    class Meta:
        ordering = ["ct", "changed_at", "id"]

    def __str__(self) -> str:
        return f"{self.ct.code}: {'-'.join(self.from_tap)} → {'-'.join(self.to_tap)}"


class Device(SiteOwned):
    """A relay, meter, transducer or recorder fed by CT secondaries."""

    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="devices")
    kind = models.CharField(max_length=20, choices=choices.DeviceKind.choices)
    functions = models.JSONField(
        default=list, blank=True, help_text='IEEE C37.2 device functions, e.g. ["50", "51"]'
    )
    ratio_setting = models.CharField(max_length=20, blank=True, help_text="e.g. 400:5")
    history = HistoricalRecords()

    class Meta(SiteOwned.Meta):
        constraints = [_unique_code("device")]

    def clean(self) -> None:
        if self.ratio_setting:
            from inventory.validation import ratio_setting_error

            message = ratio_setting_error(self.ratio_setting)
            if message:
                raise ValidationError({"ratio_setting": message})


class DeviceInput(models.Model):
    """A current input of a device between two terminals, with its burden either as VA at
    rated current and power factor, or as R + jX ohms."""

    device = models.ForeignKey(Device, on_delete=models.CASCADE, related_name="inputs")
    name = models.CharField(max_length=30)
    from_terminal = models.ForeignKey(Terminal, on_delete=models.PROTECT, related_name="+")
    to_terminal = models.ForeignKey(Terminal, on_delete=models.PROTECT, related_name="+")
    rated_a = models.PositiveSmallIntegerField(choices=choices.SecondaryRating.choices)
    burden_va = models.FloatField(null=True, blank=True, help_text="VA at rated current")
    pf = models.FloatField(null=True, blank=True, help_text="power factor of burden_va")
    burden_r_ohm = models.FloatField(null=True, blank=True)
    burden_x_ohm = models.FloatField(null=True, blank=True)
    history = HistoricalRecords()

    class Meta:
        ordering = ["device", "id"]
        constraints = [
            models.UniqueConstraint(fields=["device", "name"], name="device_input_unique_name"),
            models.CheckConstraint(
                condition=(
                    # Each column is tested for NULL as well: a CHECK that comes out NULL passes.
                    Q(
                        burden_va__isnull=False,
                        pf__isnull=False,
                        burden_va__gt=0,
                        pf__gt=0,
                        pf__lte=1,
                        burden_r_ohm__isnull=True,
                        burden_x_ohm__isnull=True,
                    )
                    | Q(
                        burden_va__isnull=True,
                        pf__isnull=True,
                        burden_r_ohm__isnull=False,
                        burden_r_ohm__gte=0,
                        burden_x_ohm__isnull=False,
                    )
                ),
                name="device_input_one_burden_form",
            ),
            models.CheckConstraint(
                condition=~Q(from_terminal=F("to_terminal")), name="device_input_two_terminals"
            ),
        ]

    def __str__(self) -> str:
        return f"{self.device.code}/{self.name}"

    def clean(self) -> None:
        va_form = self.burden_va is not None or self.pf is not None
        ohm_form = self.burden_r_ohm is not None or self.burden_x_ohm is not None
        if va_form == ohm_form:
            raise ValidationError("give the burden either as VA with pf, or as R + jX ohms")


class DeviceOutput(models.Model):
    """A trip or close output of a device and the target terminal it operates."""

    device = models.ForeignKey(Device, on_delete=models.CASCADE, related_name="outputs")
    name = models.CharField(max_length=30)
    terminal = models.ForeignKey(Terminal, on_delete=models.PROTECT, related_name="+")
    target = models.ForeignKey(Terminal, on_delete=models.PROTECT, related_name="+")
    history = HistoricalRecords()

    class Meta:
        ordering = ["device", "id"]
        constraints = [
            models.UniqueConstraint(fields=["device", "name"], name="device_output_unique_name"),
        ]

    def __str__(self) -> str:
        return f"{self.device.code}/{self.name}"


class Wire(models.Model):
    """A wire between two terminals: size and length (resistance from the conductor table at
    the site's design temperature), or an explicit resistance."""

    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="wires")
    from_terminal = models.ForeignKey(Terminal, on_delete=models.PROTECT, related_name="+")
    to_terminal = models.ForeignKey(Terminal, on_delete=models.PROTECT, related_name="+")
    size = models.CharField(max_length=20, blank=True, help_text="e.g. 10AWG, 4mm2")
    material = models.CharField(
        max_length=2, choices=choices.Material.choices, default=choices.Material.COPPER
    )
    length_m = models.FloatField(null=True, blank=True)
    length_ft = models.FloatField(null=True, blank=True)
    r_ohm = models.FloatField(null=True, blank=True, help_text="overrides the conductor table")
    history = HistoricalRecords()

    class Meta:
        ordering = ["site", "id"]
        constraints = [
            models.CheckConstraint(condition=_positive("length_m"), name="wire_length_m_positive"),
            models.CheckConstraint(
                condition=_positive("length_ft"), name="wire_length_ft_positive"
            ),
            models.CheckConstraint(
                condition=Q(r_ohm__isnull=True) | Q(r_ohm__gte=0), name="wire_r_not_negative"
            ),
            models.CheckConstraint(
                condition=(
                    Q(r_ohm__isnull=False, length_m__isnull=True, length_ft__isnull=True)
                    | (
                        Q(r_ohm__isnull=True)
                        & ~Q(size="")
                        & (
                            Q(length_m__isnull=False, length_ft__isnull=True)
                            | Q(length_m__isnull=True, length_ft__isnull=False)
                        )
                    )
                ),
                name="wire_resistance_or_size_and_one_length",
            ),
            models.CheckConstraint(
                condition=~Q(from_terminal=F("to_terminal")), name="wire_two_terminals"
            ),
        ]

    def __str__(self) -> str:
        return f"wire {self.from_terminal} – {self.to_terminal}"

    def clean(self) -> None:
        if self.r_ohm is None:
            from analysis.engine.conductors import conductor_ohm_per_m

            try:
                conductor_ohm_per_m(self.size, self.material)
            except ValueError as exc:
                raise ValidationError({"size": str(exc)}) from exc


class Link(models.Model):
    """A zero-impedance connection: jumper, bar, shorting bar, slide link."""

    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="links")
    a = models.ForeignKey(Terminal, on_delete=models.PROTECT, related_name="+")
    b = models.ForeignKey(Terminal, on_delete=models.PROTECT, related_name="+")
    history = HistoricalRecords()

    class Meta:
        ordering = ["site", "id"]
        constraints = [
            models.CheckConstraint(condition=~Q(a=F("b")), name="link_two_terminals"),
        ]

    def __str__(self) -> str:
        return f"link {self.a} – {self.b}"


class Ground(models.Model):
    """A terminal bonded to station ground."""

    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="grounds")
    terminal = models.ForeignKey(Terminal, on_delete=models.PROTECT, related_name="+")
    history = HistoricalRecords()

    class Meta:
        ordering = ["site", "id"]
        constraints = [
            models.UniqueConstraint(fields=["site", "terminal"], name="ground_unique_terminal"),
        ]

    def __str__(self) -> str:
        return f"ground {self.terminal}"


class Switch(SiteOwned):
    """An isolation or shorting provision: a test-switch pole, a draw-out case, a shorting
    screw, a slide link. Its positions are ordered; exactly one is the normal position."""

    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="switches")
    kind = models.CharField(max_length=20, choices=choices.SwitchKind.choices)
    transition = models.CharField(max_length=20, choices=choices.Transition.choices)
    history = HistoricalRecords()

    class Meta(SiteOwned.Meta):
        verbose_name_plural = "switches"
        constraints = [_unique_code("switch")]


class SwitchPosition(models.Model):
    """One position of a switch, in order; ``is_normal`` marks the normal one."""

    switch = models.ForeignKey(Switch, on_delete=models.CASCADE, related_name="positions")
    name = models.CharField(max_length=30)
    order = models.PositiveSmallIntegerField()
    is_normal = models.BooleanField(default=False)
    history = HistoricalRecords()

    class Meta:
        ordering = ["switch", "order"]
        constraints = [
            models.UniqueConstraint(fields=["switch", "name"], name="switch_position_unique_name"),
            models.UniqueConstraint(
                fields=["switch"], condition=Q(is_normal=True), name="switch_one_normal_position"
            ),
        ]

    def __str__(self) -> str:
        return f"{self.switch.code}={self.name}"


class SwitchContact(models.Model):
    """A contact of a switch joining two terminals, closed in the given positions."""

    switch = models.ForeignKey(Switch, on_delete=models.CASCADE, related_name="contacts")
    a = models.ForeignKey(Terminal, on_delete=models.PROTECT, related_name="+")
    b = models.ForeignKey(Terminal, on_delete=models.PROTECT, related_name="+")
    closed_in = models.JSONField(help_text='positions where it is closed, e.g. ["closed"]')
    history = HistoricalRecords()

    class Meta:
        ordering = ["switch", "id"]
        constraints = [
            models.CheckConstraint(condition=~Q(a=F("b")), name="switch_contact_two_terminals"),
        ]

    def __str__(self) -> str:
        return f"{self.switch.code}: {self.a} – {self.b}"


class Procedure(SiteOwned):
    """A stored isolation procedure: ordered operations, for the devices being worked on."""

    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="procedures")
    title = models.CharField(max_length=200)
    author = models.CharField(max_length=100, blank=True)
    devices = models.JSONField(default=list, blank=True, help_text="codes of the devices worked on")
    history = HistoricalRecords()

    class Meta(SiteOwned.Meta):
        constraints = [_unique_code("procedure")]


class ProcedureStep(models.Model):
    """One operation of a procedure, as the site file writes it (``{"set": ..., "to": ...}``)."""

    procedure = models.ForeignKey(Procedure, on_delete=models.CASCADE, related_name="steps")
    order = models.PositiveIntegerField(validators=[MinValueValidator(1)])
    op = models.JSONField()
    history = HistoricalRecords()

    class Meta:
        ordering = ["procedure", "order"]
        constraints = [
            models.UniqueConstraint(fields=["procedure", "order"], name="procedure_step_order"),
        ]

    def __str__(self) -> str:
        return f"{self.procedure.code} step {self.order}"
