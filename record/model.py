"""The typed record of one site: frozen dataclasses, one per part of the site file.

The record stands between a validated site file or the database and everything that reads a
site (the circuit engine, the ratings, the export). It holds what the site file holds, with
the site file's defaults filled in the way the importer stores them (``pf`` 1.0 with a VA
burden, ``rating_factor`` 1.0, ``in_service`` true, copper wire, 75 °C), so that a record read
from a file and the record read back from the database after importing that file are equal.

Units are in the names (``kv``, ``fault_ka``, ``length_m``, ``burden_va``, ``winding_ohm``).
Terminals are ``OWNER:NAME`` strings. Collections are tuples; the order is the file's order
(the database reader gives the export's canonical order: codes sorted, wires, links and
contacts in the order they were recorded).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from datetime import datetime
from typing import Any, TypeVar

from record.operations import Operation

DEFAULT_DESIGN_TEMP_C = 75.0
SITE_FORMAT = "loopkeep.site/1"

T = TypeVar("T")

# A device's ratio setting: one ratio ("400:5"), several that may match, or (for a device fed
# by several CT sets) one per CT code or set name. The site file writes the first form.
RatioSetting = str | tuple[str, ...] | Mapping[str, str]


@dataclass(frozen=True, slots=True)
class Site:
    """A substation: code, name, design conductor temperature (°C) for lead resistance."""

    code: str
    name: str
    design_temp_c: float = DEFAULT_DESIGN_TEMP_C
    notes: str = ""


@dataclass(frozen=True, slots=True)
class Bus:
    """A bus and its fault level (kA) and X/R, for the saturation checks."""

    code: str
    kv: float | None = None
    three_phase_fault_ka: float | None = None
    ground_fault_ka: float | None = None
    x_over_r: float | None = None


@dataclass(frozen=True, slots=True)
class Equipment:
    """Primary equipment; its CTs are live while it is in service (energized)."""

    code: str
    kind: str
    bus: str | None = None
    in_service: bool = True
    max_load_a: float | None = None


@dataclass(frozen=True, slots=True)
class TerminalBlock:
    """A terminal block declared so that its terminals (``TB-1:4``) have an owner."""

    code: str
    description: str = ""


@dataclass(frozen=True, slots=True)
class TapChange:
    """One change of a CT's terminals in use, at ``at`` (timezone-aware, UTC)."""

    from_tap: tuple[str, ...]
    to_tap: tuple[str, ...]
    at: datetime
    by: str = ""
    reason: str = ""


@dataclass(frozen=True, slots=True)
class CT:
    """A CT winding. ``terminals`` gives each terminal's cumulative primary ampere position on
    the winding (``(("X1", 0.0), ("X2", 100.0), ...)``); ``in_use`` the terminal pair in use
    (the current leaves the first). ``winding_ohm`` is the full winding's resistance at 75 °C;
    ``excitation`` the measured ``(exciting A, secondary V)`` points of the full winding."""

    code: str
    equipment: str | None
    phase: str | None
    secondary_a: float
    terminals: tuple[tuple[str, float], ...]
    in_use: tuple[str, ...]
    set_name: str | None = None
    accuracy: str | None = None
    rated_burden_va: float | None = None
    knee_v: float | None = None
    winding_ohm: float | None = None
    rating_factor: float = 1.0
    excitation: tuple[tuple[float, float], ...] | None = None
    nameplate: str = ""
    tap_changes: tuple[TapChange, ...] = ()

    @property
    def positions(self) -> dict[str, float]:
        """``terminals`` as a mapping, terminal name → position (primary A)."""
        return dict(self.terminals)


@dataclass(frozen=True, slots=True)
class DeviceInput:
    """A current input between two terminals, rated 1 or 5 A, with its burden either as
    ``burden_va`` at ``rated_a`` with ``pf``, or as ``burden_ohm`` (R, X)."""

    name: str
    from_terminal: str
    to_terminal: str
    rated_a: float | None
    burden_va: float | None = None
    pf: float | None = None
    burden_ohm: tuple[float, float] | None = None


@dataclass(frozen=True, slots=True)
class DeviceOutput:
    """A trip/close output: the device's terminal and the target terminal it operates."""

    name: str
    terminal: str
    target: str


@dataclass(frozen=True, slots=True)
class Device:
    """A relay, meter, transducer or recorder; ``functions`` are IEEE C37.2 numbers."""

    code: str
    kind: str
    functions: tuple[str, ...] = ()
    ratio_setting: RatioSetting | None = None
    inputs: tuple[DeviceInput, ...] = ()
    outputs: tuple[DeviceOutput, ...] = ()


@dataclass(frozen=True, slots=True)
class Wire:
    """A conductor between two terminals: ``size`` (``10AWG``, ``4mm2``) and material with one
    length, or an explicit resistance ``r_ohm``."""

    from_terminal: str
    to_terminal: str
    size: str = ""
    material: str = "cu"
    length_m: float | None = None
    length_ft: float | None = None
    r_ohm: float | None = None


@dataclass(frozen=True, slots=True)
class Link:
    """A zero-impedance connection (jumper bar, shorting bar, slide link)."""

    a: str
    b: str


@dataclass(frozen=True, slots=True)
class Contact:
    """A switch contact joining two terminals, closed in the positions of ``closed_in``."""

    between: tuple[str, ...]
    closed_in: tuple[str, ...]


@dataclass(frozen=True, slots=True)
class Switch:
    """An isolation or shorting provision: ordered positions, the normal one, the transition
    type (``make_before_break``, ``break_before_make``, ``simultaneous``) and its contacts."""

    code: str
    kind: str
    positions: tuple[str, ...]
    normal: str | None
    transition: str
    contacts: tuple[Contact, ...] = ()


@dataclass(frozen=True, slots=True)
class Procedure:
    """A stored procedure: its operations in order and the devices the work is for."""

    code: str
    title: str
    steps: tuple[Operation, ...]
    author: str = ""
    devices: tuple[str, ...] = ()


@dataclass(frozen=True, slots=True)
class SiteRecord:
    """The whole record of one site."""

    site: Site
    buses: tuple[Bus, ...] = ()
    equipment: tuple[Equipment, ...] = ()
    terminal_blocks: tuple[TerminalBlock, ...] = ()
    cts: tuple[CT, ...] = ()
    devices: tuple[Device, ...] = ()
    wires: tuple[Wire, ...] = ()
    links: tuple[Link, ...] = ()
    grounds: tuple[str, ...] = ()
    switches: tuple[Switch, ...] = ()
    procedures: tuple[Procedure, ...] = ()

    @property
    def code(self) -> str:
        return self.site.code


def maker(cls: type[T]) -> Callable[..., T]:
    """A constructor of ``cls`` (a frozen, slotted record dataclass of this module) taking
    every field positionally, in order, that sets each slot through its descriptor instead of
    the frozen ``__init__``'s ``object.__setattr__(self, name, value)`` per field: the same
    object (``maker(Wire)(*values) == Wire(*values)``, same type, same hash), built in about
    half the time. For readers that build many records from rows holding every field, such as
    the database reader; no defaults, no checks (the dataclasses have none either)."""
    if not (
        dataclasses.is_dataclass(cls)
        and cls.__dataclass_params__.frozen  # type: ignore[attr-defined]
        and "__slots__" in cls.__dict__
        and not hasattr(cls, "__post_init__")
    ):
        raise TypeError(f"{cls.__name__} is not a frozen slotted dataclass without post-init")
    fields = dataclasses.fields(cls)
    names = [f.name for f in fields]
    if tuple(names) != tuple(cls.__dict__["__slots__"]) or not all(f.init for f in fields):
        raise TypeError(f"{cls.__name__}: every field must be an init field with its own slot")
    namespace: dict[str, Any] = {"_new": object.__new__, "_cls": cls}
    lines = [f"def make_{cls.__name__}({', '.join(names)}, /):", "    self = _new(_cls)"]
    for k, name in enumerate(names):
        namespace[f"_set{k}"] = cls.__dict__[name].__set__
        lines.append(f"    _set{k}(self, {name})")
    lines.append("    return self")
    exec("\n".join(lines), namespace)  # source made of the field names only
    return namespace[f"make_{cls.__name__}"]
