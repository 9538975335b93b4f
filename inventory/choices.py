"""Choice lists of the physical record. Values are the site file's spellings."""

from django.db import models


class EquipmentKind(models.TextChoices):
    BREAKER = "breaker"
    TRANSFORMER = "transformer"
    LINE = "line"
    BUS = "bus"
    GENERATOR = "generator"
    CAPACITOR = "capacitor"
    REACTOR = "reactor"
    OTHER = "other"


class Phase(models.TextChoices):
    A = "A"
    B = "B"
    C = "C"
    N = "N"


class SecondaryRating(models.IntegerChoices):
    ONE_A = 1, "1 A"
    FIVE_A = 5, "5 A"


class DeviceKind(models.TextChoices):
    RELAY = "relay"
    METER = "meter"
    TRANSDUCER = "transducer"
    RECORDER = "recorder"
    OTHER = "other"


class Material(models.TextChoices):
    COPPER = "cu", "copper"
    ALUMINIUM = "al", "aluminium"


class SwitchKind(models.TextChoices):
    TEST_SWITCH_POLE = "test_switch_pole"
    DRAW_OUT_CASE = "draw_out_case"
    SHORTING_SCREW = "shorting_screw"
    SLIDE_LINK = "slide_link"
    OTHER = "other"


class Transition(models.TextChoices):
    MAKE_BEFORE_BREAK = "make_before_break"
    BREAK_BEFORE_MAKE = "break_before_make"
    SIMULTANEOUS = "simultaneous"


class TapRole(models.TextChoices):
    """Which end of the tap in use a CT terminal is (current leaves the first)."""

    NONE = "", "not in use"
    FIRST = "first"
    SECOND = "second"


class ChangeStatus(models.TextChoices):
    PENDING = "pending"
    DONE = "done"
    FAILED = "failed", "failed (gave up after the maximum number of sends)"
