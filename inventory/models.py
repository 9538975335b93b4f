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

import uuid

from django.core.exceptions import ValidationError
from django.core.validators import MinValueValidator
from django.db import models
from django.db.models import F, Q
from simple_history.models import HistoricalRecords

from inventory import choices
from inventory.validation import excitation_error
from trade.accuracy import parse_accuracy
from trade.conductors import conductor_ohm_per_m
from trade.ratio import ratio_setting_error


def _positive(field: str) -> Q:
    return Q(**{f"{field}__isnull": True}) | Q(**{f"{field}__gt": 0})


def _positive_check(field: str, name: str) -> models.CheckConstraint:
    return models.CheckConstraint(
        condition=_positive(field),
        name=name,
        violation_error_message=f"{field} must be greater than 0",
    )


# The site file's name rules (schema.json: code, switch_code, terminal_name): no spaces and no
# colon, since "OWNER:NAME" names a terminal; a switch code has at most one "/" (GROUP/POLE).
# Written with explicit characters because PostgreSQL and SQLite (Python re) share only those.
NAME_RE = r"^[^ \t\n\r\f\v:]+$"
SWITCH_CODE_RE = r"^[^ \t\n\r\f\v:/]+(/[^ \t\n\r\f\v:/]+)?$"


class CleanCoversConstraints:
    """For models whose ``clean()`` reports some constraints' rules as field errors: the same
    rule then comes only once, on its field, instead of once more as a form-wide message."""

    clean_covers: frozenset[str] = frozenset()

    def validate_constraints(self, exclude=None) -> None:
        try:
            super().validate_constraints(exclude=exclude)  # type: ignore[misc]
        except ValidationError as exc:
            kept = {
                field: [e for e in errors if e.code not in self.clean_covers]
                for field, errors in exc.error_dict.items()
            }
            kept = {field: errors for field, errors in kept.items() if errors}
            if kept:
                raise ValidationError(kept) from exc


class Site(models.Model):
    """A substation. ``revision`` goes up by one with every write that changes a circuit, so a
    result can say which inputs it was computed from."""

    code = models.CharField(max_length=40, unique=True)
    name = models.CharField(max_length=200)
    design_temp_c = models.FloatField(
        "design conductor temperature (°C)",
        default=75.0,
        help_text="conductor temperature for lead resistance, -50 to 250 °C",
    )
    notes = models.TextField(blank=True)
    revision = models.PositiveBigIntegerField(default=1, editable=False)
    # Drawn afresh with every revision: a revision number alone can come back with other
    # content (a write rolled back after something read it, or SQLite giving a deleted site's
    # id to a new one), the pair never does. Caches of computed answers are keyed by it.
    record_key = models.UUIDField(default=uuid.uuid4, editable=False)
    updated_at = models.DateTimeField("updated", auto_now=True)
    history = HistoricalRecords()

    class Meta:
        ordering = ["code"]
        constraints = [
            models.CheckConstraint(
                condition=Q(code__regex=NAME_RE),
                name="site_code_format",
                violation_error_message="a code has no spaces and no ':'",
            ),
            models.CheckConstraint(
                condition=Q(design_temp_c__gte=-50, design_temp_c__lte=250),
                name="site_design_temp_range",
                violation_error_message="design conductor temperature must be -50 to 250 °C",
            ),
        ]

    def __str__(self) -> str:
        return self.code

    @property
    def record_version(self) -> str:
        """What a cached answer computed from this site's record is keyed by: the site, its
        revision and the key drawn with that revision."""
        return f"{self.pk}:{self.revision}:{self.record_key.hex}"


class SiteOwned(models.Model):
    """A coded object of one site (each subclass adds its ``site`` foreign key)."""

    code = models.CharField(max_length=60)

    class Meta:
        abstract = True
        ordering = ["site", "code"]

    def __str__(self) -> str:
        return self.code


def _code_rules(name: str, pattern: str = NAME_RE) -> list[models.BaseConstraint]:
    """A code is unique inside its site and has the site file's form."""
    return [
        models.UniqueConstraint(fields=["site", "code"], name=f"{name}_unique_code_per_site"),
        models.CheckConstraint(
            condition=Q(code__regex=pattern),
            name=f"{name}_code_format",
            violation_error_message="a code has no spaces and no ':'"
            + (" and at most one '/' (GROUP/POLE)" if pattern == SWITCH_CODE_RE else ""),
        ),
    ]


class Bus(SiteOwned):
    """A bus and its fault level, for the saturation checks."""

    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="buses")
    kv = models.FloatField("nominal voltage (kV)", null=True, blank=True)
    three_phase_fault_ka = models.FloatField(
        "three-phase fault current (kA)", null=True, blank=True
    )
    ground_fault_ka = models.FloatField(
        "ground fault current (kA)",
        null=True,
        blank=True,
        help_text="single-line-to-ground fault current",
    )
    x_over_r = models.FloatField("X/R ratio", null=True, blank=True)
    history = HistoricalRecords()

    class Meta(SiteOwned.Meta):
        verbose_name_plural = "buses"
        constraints = [
            *_code_rules("bus"),
            _positive_check("kv", "bus_kv_positive"),
            _positive_check("three_phase_fault_ka", "bus_3ph_fault_positive"),
            _positive_check("ground_fault_ka", "bus_ground_fault_positive"),
            _positive_check("x_over_r", "bus_x_over_r_positive"),
        ]


class Equipment(SiteOwned):
    """Primary equipment whose current the CTs measure. A CT is live when its equipment is
    in service (energized)."""

    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="equipment")
    kind = models.CharField(max_length=20, choices=choices.EquipmentKind.choices)
    bus = models.ForeignKey(Bus, on_delete=models.PROTECT, null=True, blank=True)
    in_service = models.BooleanField("in service (energized)", default=True)
    max_load_a = models.FloatField("maximum load (primary A)", null=True, blank=True)
    history = HistoricalRecords()

    class Meta(SiteOwned.Meta):
        verbose_name_plural = "equipment"
        constraints = [
            *_code_rules("equipment"),
            _positive_check("max_load_a", "equipment_max_load_positive"),
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
        constraints = _code_rules("terminal_block")


class CurrentTransformer(CleanCoversConstraints, SiteOwned):
    """A CT winding. Its terminals (``Terminal`` rows with ``position_a``) describe a
    multi-ratio winding: the ratio of a pair is |pos(a) - pos(b)| : ``secondary_a``. The two
    terminals in use carry ``tap_role`` first/second (current leaves the first)."""

    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="cts")
    equipment = models.ForeignKey(Equipment, on_delete=models.PROTECT, related_name="cts")
    phase = models.CharField(max_length=1, choices=choices.Phase.choices)
    set_name = models.CharField(
        "set",
        max_length=60,
        blank=True,
        help_text="the three-phase set this CT belongs to (one CT per phase A, B, C)",
    )
    secondary_a = models.PositiveSmallIntegerField(
        "secondary rating (A)", choices=choices.SecondaryRating.choices
    )
    accuracy = models.CharField(
        "accuracy class", max_length=30, blank=True, help_text="e.g. C400, 0.3B0.9, 5P20, PX"
    )
    rated_burden_va = models.FloatField(
        "rated burden (VA)", null=True, blank=True, help_text="IEC P classes"
    )
    knee_v = models.FloatField(
        "knee-point e.m.f. (V)", null=True, blank=True, help_text="IEC PX classes"
    )
    winding_ohm = models.FloatField(
        "winding resistance (Ω at 75 °C)",
        null=True,
        blank=True,
        help_text="secondary resistance of the full winding",
    )
    rating_factor = models.FloatField("rating factor", default=1.0, help_text="1.0 or more")
    excitation = models.JSONField(
        "excitation curve",
        null=True,
        blank=True,
        help_text="[[exciting current A, secondary V], ...] measured on the full winding",
    )
    nameplate = models.TextField(blank=True)
    history = HistoricalRecords()

    class Meta(SiteOwned.Meta):
        verbose_name = "current transformer"
        constraints = [
            *_code_rules("ct"),
            models.CheckConstraint(
                condition=Q(secondary_a__in=[1, 5]),
                name="ct_secondary_1_or_5_a",
                violation_error_message="secondary rating is 1 or 5 A",
            ),
            _positive_check("winding_ohm", "ct_winding_positive"),
            models.CheckConstraint(
                condition=Q(rating_factor__gte=1),
                name="ct_rating_factor_at_least_one",
                violation_error_message="rating factor must be 1.0 or more",
            ),
            _positive_check("rated_burden_va", "ct_rated_burden_positive"),
            _positive_check("knee_v", "ct_knee_v_positive"),
            # A three-phase set has one CT per phase; neutral CTs are not counted (the site
            # file's rule, inventory/sitefile/validate.py).
            models.UniqueConstraint(
                fields=["site", "set_name", "phase"],
                condition=~Q(set_name="") & ~Q(phase="N"),
                name="ct_one_phase_per_set",
                violation_error_code="ct_one_phase_per_set",
            ),
        ]

    clean_covers = frozenset({"ct_one_phase_per_set"})

    def clean(self) -> None:
        errors: dict[str, str] = {}
        if self.equipment_id and self.equipment.site_id != self.site_id:
            errors["equipment"] = "equipment belongs to another site"
        if self.set_name and self.phase and self.phase != choices.Phase.N and self.site_id:
            other = (
                CurrentTransformer.objects.filter(
                    site_id=self.site_id, set_name=self.set_name, phase=self.phase
                )
                .exclude(pk=self.pk)
                .values_list("code", flat=True)
                .first()
            )
            if other:
                errors["phase"] = (
                    f"set {self.set_name!r} already has a phase {self.phase} CT ({other}); "
                    "a three-phase set has one CT per phase"
                )
        if self.accuracy:
            try:
                parse_accuracy(self.accuracy)
            except ValueError as exc:
                errors["accuracy"] = str(exc)
        if self.excitation is not None:
            message = excitation_error(self.excitation)
            if message:
                errors["excitation"] = message
        if errors:
            raise ValidationError(errors)


class Terminal(CleanCoversConstraints, models.Model):
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
        "position (primary A)",
        null=True,
        blank=True,
        help_text="cumulative primary amperes at this point of the winding",
    )
    tap_role = models.CharField(
        "tap role", max_length=6, choices=choices.TapRole.choices, blank=True, default=""
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
            # Two terminals at one point of the winding would be one terminal with two names
            # (a zero-turn tap). Terminals of no CT have a NULL ct, and NULLs are distinct.
            models.UniqueConstraint(
                fields=["ct", "position_a"],
                name="terminal_distinct_position_per_ct",
                violation_error_code="terminal_distinct_position_per_ct",
            ),
            models.CheckConstraint(
                condition=Q(owner__regex=NAME_RE, name__regex=NAME_RE),
                name="terminal_name_format",
                violation_error_message="terminal owner and name have no spaces and no ':'",
            ),
        ]

    clean_covers = frozenset({"terminal_distinct_position_per_ct"})

    def __str__(self) -> str:
        return f"{self.owner}:{self.name}"

    @property
    def label(self) -> str:
        return f"{self.owner}:{self.name}"

    def clean(self) -> None:
        if self.ct_id is not None and self.position_a is not None:
            other = (
                Terminal.objects.filter(ct_id=self.ct_id, position_a=self.position_a)
                .exclude(pk=self.pk)
                .values_list("name", flat=True)
                .first()
            )
            if other:
                raise ValidationError(
                    {
                        "position_a": f"{other} is already at {self.position_a:g} A; two "
                        "terminals cannot sit at the same point of the winding"
                    }
                )


class TapChange(models.Model):
    """A change of the terminals in use of a CT. The current tap is the last event's ``to``."""

    ct = models.ForeignKey(CurrentTransformer, on_delete=models.CASCADE, related_name="tap_changes")
    from_tap = models.JSONField("from tap", help_text='["X1", "X5"]')
    to_tap = models.JSONField("to tap", help_text='["X1", "X4"]')
    changed_at = models.DateTimeField("changed at")
    changed_by = models.CharField("changed by", max_length=100, blank=True)
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
        "functions (IEEE C37.2)", default=list, blank=True, help_text='e.g. ["50", "51", "50N"]'
    )
    ratio_setting = models.CharField(
        "ratio setting",
        max_length=20,
        blank=True,
        help_text="CT ratio set in the device, e.g. 400:5",
    )
    history = HistoricalRecords()

    class Meta(SiteOwned.Meta):
        constraints = _code_rules("device")

    def clean(self) -> None:
        if self.ratio_setting:
            message = ratio_setting_error(self.ratio_setting)
            if message:
                raise ValidationError({"ratio_setting": message})


class DeviceInput(CleanCoversConstraints, models.Model):
    """A current input of a device between two terminals, with its burden either as VA at
    rated current and power factor, or as R + jX ohms."""

    device = models.ForeignKey(Device, on_delete=models.CASCADE, related_name="inputs")
    name = models.CharField(max_length=30)
    from_terminal = models.ForeignKey(
        Terminal, on_delete=models.PROTECT, related_name="+", verbose_name="from terminal"
    )
    to_terminal = models.ForeignKey(
        Terminal, on_delete=models.PROTECT, related_name="+", verbose_name="to terminal"
    )
    rated_a = models.PositiveSmallIntegerField(
        "rated current (A)", choices=choices.SecondaryRating.choices
    )
    burden_va = models.FloatField("burden (VA at rated current)", null=True, blank=True)
    pf = models.FloatField("power factor", null=True, blank=True, help_text="of the VA burden")
    burden_r_ohm = models.FloatField("burden R (Ω)", null=True, blank=True)
    burden_x_ohm = models.FloatField("burden X (Ω)", null=True, blank=True)
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
                violation_error_message="give the burden either as VA with pf, or as R + jX ohms",
            ),
            models.CheckConstraint(
                condition=Q(burden_x_ohm__isnull=True) | Q(burden_x_ohm__gte=0),
                name="device_input_burden_x_not_negative",
                violation_error_message="burden X must not be negative",
            ),
            models.CheckConstraint(
                condition=Q(rated_a__in=[1, 5]),
                name="device_input_rated_1_or_5_a",
                violation_error_message="rated current is 1 or 5 A",
            ),
            models.CheckConstraint(
                condition=~Q(from_terminal=F("to_terminal")),
                name="device_input_two_terminals",
                violation_error_code="device_input_two_terminals",
            ),
        ]

    clean_covers = frozenset({"device_input_two_terminals"})

    def __str__(self) -> str:
        return f"{self.device.code}/{self.name}"

    def clean(self) -> None:
        va_form = self.burden_va is not None or self.pf is not None
        ohm_form = self.burden_r_ohm is not None or self.burden_x_ohm is not None
        if va_form == ohm_form:
            raise ValidationError("give the burden either as VA with pf, or as R + jX ohms")
        if self.from_terminal_id and self.from_terminal_id == self.to_terminal_id:
            raise ValidationError({"to_terminal": "an input from a terminal to itself"})


class DeviceOutput(CleanCoversConstraints, models.Model):
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
            models.CheckConstraint(
                condition=~Q(terminal=F("target")),
                name="device_output_two_terminals",
                violation_error_code="device_output_two_terminals",
            ),
        ]

    clean_covers = frozenset({"device_output_two_terminals"})

    def __str__(self) -> str:
        return f"{self.device.code}/{self.name}"

    def clean(self) -> None:
        if self.terminal_id and self.terminal_id == self.target_id:
            raise ValidationError({"target": "an output cannot target its own terminal"})


class Wire(CleanCoversConstraints, models.Model):
    """A wire between two terminals: size and length (resistance from the conductor table at
    the site's design temperature), or an explicit resistance."""

    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="wires")
    from_terminal = models.ForeignKey(
        Terminal, on_delete=models.PROTECT, related_name="+", verbose_name="from terminal"
    )
    to_terminal = models.ForeignKey(
        Terminal, on_delete=models.PROTECT, related_name="+", verbose_name="to terminal"
    )
    size = models.CharField(
        "conductor size", max_length=20, blank=True, help_text="e.g. 10AWG, 4mm2"
    )
    material = models.CharField(
        max_length=2, choices=choices.Material.choices, default=choices.Material.COPPER
    )
    length_m = models.FloatField("length (m)", null=True, blank=True)
    length_ft = models.FloatField("length (ft)", null=True, blank=True)
    r_ohm = models.FloatField(
        "resistance (Ω)", null=True, blank=True, help_text="overrides the conductor table"
    )
    history = HistoricalRecords()

    class Meta:
        ordering = ["site", "id"]
        constraints = [
            _positive_check("length_m", "wire_length_m_positive"),
            _positive_check("length_ft", "wire_length_ft_positive"),
            # Zero ohms is a link, not a wire (the site file's rule).
            _positive_check("r_ohm", "wire_r_positive"),
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
                violation_error_message=(
                    "give the resistance alone, or the size with one length (m or ft)"
                ),
            ),
            models.CheckConstraint(
                condition=~Q(from_terminal=F("to_terminal")),
                name="wire_two_terminals",
                violation_error_code="wire_two_terminals",
            ),
        ]

    clean_covers = frozenset({"wire_two_terminals"})

    def __str__(self) -> str:
        return f"wire {self.from_terminal} – {self.to_terminal}"

    def clean(self) -> None:
        if self.from_terminal_id and self.from_terminal_id == self.to_terminal_id:
            raise ValidationError({"to_terminal": "a wire from a terminal to itself"})
        if self.r_ohm is None and self.size:
            try:
                conductor_ohm_per_m(self.size, self.material)
            except ValueError as exc:
                raise ValidationError({"size": str(exc)}) from exc


class Link(CleanCoversConstraints, models.Model):
    """A zero-impedance connection: jumper, bar, shorting bar, slide link."""

    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="links")
    a = models.ForeignKey(
        Terminal, on_delete=models.PROTECT, related_name="+", verbose_name="terminal A"
    )
    b = models.ForeignKey(
        Terminal, on_delete=models.PROTECT, related_name="+", verbose_name="terminal B"
    )
    history = HistoricalRecords()

    class Meta:
        ordering = ["site", "id"]
        constraints = [
            models.CheckConstraint(
                condition=~Q(a=F("b")),
                name="link_two_terminals",
                violation_error_code="link_two_terminals",
            ),
        ]

    clean_covers = frozenset({"link_two_terminals"})

    def __str__(self) -> str:
        return f"link {self.a} – {self.b}"

    def clean(self) -> None:
        if self.a_id and self.a_id == self.b_id:
            raise ValidationError({"b": "a link from a terminal to itself"})


class Ground(models.Model):
    """A terminal bonded to station ground."""

    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="grounds")
    terminal = models.ForeignKey(Terminal, on_delete=models.PROTECT, related_name="+")
    history = HistoricalRecords()

    class Meta:
        ordering = ["site", "id"]
        constraints = [
            models.UniqueConstraint(
                fields=["site", "terminal"],
                name="ground_unique_terminal",
                violation_error_message="this terminal is already grounded",
            ),
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
        constraints = _code_rules("switch", SWITCH_CODE_RE)


class SwitchPosition(models.Model):
    """One position of a switch, in order; ``is_normal`` marks the normal one."""

    switch = models.ForeignKey(Switch, on_delete=models.CASCADE, related_name="positions")
    name = models.CharField(max_length=30)
    order = models.PositiveSmallIntegerField()
    is_normal = models.BooleanField("normal position", default=False)
    history = HistoricalRecords()

    class Meta:
        ordering = ["switch", "order"]
        constraints = [
            models.UniqueConstraint(fields=["switch", "name"], name="switch_position_unique_name"),
            # At most one: "exactly one" spans rows, which no row constraint can hold; the
            # switch service and the site-file validator check that one exists.
            models.UniqueConstraint(
                fields=["switch"],
                condition=Q(is_normal=True),
                name="switch_one_normal_position",
                violation_error_message="a switch has one normal position",
            ),
        ]

    def __str__(self) -> str:
        return f"{self.switch.code}={self.name}"


class SwitchContact(CleanCoversConstraints, models.Model):
    """A contact of a switch joining two terminals, closed in the given positions."""

    switch = models.ForeignKey(Switch, on_delete=models.CASCADE, related_name="contacts")
    a = models.ForeignKey(
        Terminal, on_delete=models.PROTECT, related_name="+", verbose_name="terminal A"
    )
    b = models.ForeignKey(
        Terminal, on_delete=models.PROTECT, related_name="+", verbose_name="terminal B"
    )
    closed_in = models.JSONField(
        "closed in", help_text='positions where it is closed, e.g. ["closed"]'
    )
    history = HistoricalRecords()

    class Meta:
        ordering = ["switch", "id"]
        constraints = [
            models.CheckConstraint(
                condition=~Q(a=F("b")),
                name="switch_contact_two_terminals",
                violation_error_code="switch_contact_two_terminals",
            ),
        ]

    clean_covers = frozenset({"switch_contact_two_terminals"})

    def __str__(self) -> str:
        return f"{self.switch.code}: {self.a} – {self.b}"

    def clean(self) -> None:
        if self.a_id and self.a_id == self.b_id:
            raise ValidationError({"b": "a contact from a terminal to itself"})


class Procedure(SiteOwned):
    """A stored isolation procedure: ordered operations, for the devices being worked on."""

    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="procedures")
    title = models.CharField(max_length=200)
    author = models.CharField(max_length=100, blank=True)
    devices = models.JSONField(
        "devices worked on", default=list, blank=True, help_text='device codes, e.g. ["R-101"]'
    )
    history = HistoricalRecords()

    class Meta(SiteOwned.Meta):
        constraints = _code_rules("procedure")


class ProcedureStep(models.Model):
    """One operation of a procedure, as the site file writes it (``{"set": ..., "to": ...}``)."""

    procedure = models.ForeignKey(Procedure, on_delete=models.CASCADE, related_name="steps")
    order = models.PositiveIntegerField(validators=[MinValueValidator(1)])
    op = models.JSONField("operation", help_text='e.g. {"set": "TS-101/1", "to": "open"}')
    history = HistoricalRecords()

    class Meta:
        ordering = ["procedure", "order"]
        constraints = [
            models.UniqueConstraint(fields=["procedure", "order"], name="procedure_step_order"),
        ]

    def __str__(self) -> str:
        return f"{self.procedure.code} step {self.order}"


class SiteChange(models.Model):
    """The record's outbox: a site's circuits changed and it is now at ``revision``. Written in
    the same transaction as the edit (``inventory.services.site_record_change``). The inventory
    knows nothing of who reads it: the consumers registered in ``inventory.changes`` (the
    analysis) act on it, mark it done once results at ``revision`` or newer are stored, and
    send it again while it stays pending (``sends``, ``sent_at``)."""

    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="+")
    revision = models.PositiveBigIntegerField(help_text="site revision the edit produced")
    status = models.CharField(
        max_length=10, choices=choices.ChangeStatus.choices, default=choices.ChangeStatus.PENDING
    )
    sends = models.PositiveIntegerField(default=0, help_text="times handed to the broker")
    created_at = models.DateTimeField(auto_now_add=True)
    sent_at = models.DateTimeField(null=True, blank=True)
    done_at = models.DateTimeField(null=True, blank=True)

    class Meta:
        ordering = ["created_at", "id"]
        indexes = [
            models.Index(fields=["status", "created_at"], name="inventory_change_due"),
            models.Index(fields=["site", "status"], name="inventory_change_site"),
        ]

    def __str__(self) -> str:
        return f"site {self.site_id} changed to revision {self.revision} ({self.status})"


class ImportJob(models.Model):
    """A spreadsheet (or site file) import run in the background: the file sent, how far the
    import got, what it did and every error. A job is not part of the physical record, so it
    keeps no history; cancelling it before it commits writes nothing."""

    class Status(models.TextChoices):
        QUEUED = "queued"
        RUNNING = "running"
        DONE = "done"
        FAILED = "failed"
        CANCELLED = "cancelled"

    kind = models.CharField(max_length=20, help_text="cts, tap_changes or site")
    filename = models.CharField(max_length=200)
    sheet = models.CharField(max_length=100, blank=True)
    data = models.BinaryField(help_text="the file sent (emptied when the job ends)")
    mapping = models.JSONField(null=True, blank=True, help_text="header -> column name")
    dry_run = models.BooleanField("dry run", default=False)
    status = models.CharField(max_length=10, choices=Status.choices, default=Status.QUEUED)
    percent = models.PositiveSmallIntegerField("percent done", default=0)
    result = models.JSONField(default=dict, blank=True)
    errors = models.JSONField(default=list, blank=True)
    message = models.TextField(blank=True)
    cancel_requested = models.BooleanField("cancel requested", default=False)
    created_by = models.ForeignKey(
        "auth.User", null=True, blank=True, on_delete=models.SET_NULL, related_name="+"
    )
    created_at = models.DateTimeField("created at", auto_now_add=True)
    started_at = models.DateTimeField("started at", null=True, blank=True)
    heartbeat_at = models.DateTimeField(
        "heartbeat at",
        null=True,
        blank=True,
        help_text=(
            "stamped every few seconds while a worker runs the job (not on SQLite); while it is "
            "queued, when it was last sent again"
        ),
    )
    finished_at = models.DateTimeField("finished at", null=True, blank=True)

    class Meta:
        ordering = ["-created_at", "-id"]
        constraints = [
            models.CheckConstraint(
                condition=Q(percent__lte=100), name="inventory_importjob_percent_at_most_100"
            )
        ]

    def __str__(self) -> str:
        return f"import {self.pk} of {self.filename} ({self.status})"
