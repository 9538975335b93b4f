"""``record.model.maker``: the positional constructor the database reader builds records with
makes the same objects as the dataclasses' own ``__init__`` (common practice, no source: a
faster path must not change what it builds)."""

import dataclasses
from datetime import UTC, datetime

import pytest

import record as rec
from record.model import maker

VALUES = {
    rec.Site: ("S1", "Site one", 60.0, "n"),
    rec.Bus: ("B1", 13.8, 25.0, 20.0, 15.0),
    rec.Equipment: ("E1", "breaker", "B1", False, 1200.0),
    rec.TerminalBlock: ("TB-1", "panel"),
    rec.TapChange: (("X1", "X3"), ("X1", "X5"), datetime(2026, 1, 2, tzinfo=UTC), "ab", "r"),
    rec.CT: (
        "CT1",
        "E1",
        "A",
        5.0,
        (("X1", 0.0), ("X2", 600.0)),
        ("X1", "X2"),
        "set",
        "C400",
        25.0,
        400.0,
        0.3,
        2.0,
        ((0.1, 100.0),),
        "np",
        (),
    ),
    rec.DeviceInput: ("IA", "CT1:X1", "R1:1", 5.0, None, None, (0.02, 0.0)),
    rec.DeviceOutput: ("TRIP", "R1:T1", "E1:TC"),
    rec.Device: ("R1", "relay", ("50", "51"), "600:5", (), ()),
    rec.Wire: ("CT1:X1", "TB-1:1", "10AWG", "cu", 12.5, None, None),
    rec.Link: ("TB-1:1", "TB-1:2"),
    rec.Contact: (("TB-1:1", "TB-1:2"), ("closed",)),
    rec.Switch: ("TS1", "test_switch", ("closed", "open"), "closed", "make_before_break", ()),
    rec.Procedure: ("P1", "Test", (), "ab", ("R1",)),
    rec.SiteRecord: (rec.Site("S1", "one"), (), (), (), (), (), (), (), ("TB-1:3",), (), ()),
}


@pytest.mark.parametrize("cls", list(VALUES), ids=lambda c: c.__name__)
def test_maker_builds_what_the_dataclass_builds(cls):
    values = VALUES[cls]
    assert len(values) == len(dataclasses.fields(cls))
    made, built = maker(cls)(*values), cls(*values)
    assert type(made) is cls
    assert made == built and hash(made) == hash(built) and repr(made) == repr(built)
    field = dataclasses.fields(cls)[0].name
    with pytest.raises(dataclasses.FrozenInstanceError):
        setattr(made, field, None)


def test_maker_wants_every_field_and_a_frozen_slotted_dataclass():
    with pytest.raises(TypeError):
        maker(rec.Link)("TB-1:1")

    @dataclasses.dataclass(frozen=True)
    class NoSlots:
        a: int

    with pytest.raises(TypeError):
        maker(NoSlots)
