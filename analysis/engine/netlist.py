"""The netlist of one site: the site record (``record.SiteRecord``) turned into indexed elements.

Every terminal ``OWNER:NAME`` gets an integer index. Elements keep their terminals as indices
so that the topology and the nodal solve (``topology.py``, ``nodal.py``) work on numpy arrays:

- zero-impedance elements: links (liftable), switch contacts (closed in some positions),
  procedure jumpers (added in a state);
- impedance branches: wires (resistance from ``r_ohm`` or from the conductor table at the site's
  design temperature) and device current inputs (``burden_va`` at ``rated_a`` with ``pf``, i.e.
  |Z| = VA / I² at the angle acos(pf), or ``burden_ohm: [R, X]``);
- CTs: ideal current sources between their first and second terminal in use (the current
  leaves the first), with every terminal position of the winding present as a node;
- grounds: terminals bonded to station ground.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from functools import cached_property
from typing import Any

import numpy as np

import record as rec
from trade.conductors import conductor_ohm_per_m

FT_TO_M = 0.3048
# A branch whose impedance is below this is a zero-impedance connection (merged, not solved).
ZERO_OHM = 1e-9
# An input without a usable burden still has to carry a computable current, so it gets a small
# resistive burden (the ratings engineer reports the missing value as missing_data).
MIN_INPUT_OHM = 1e-4
DEFAULT_DESIGN_TEMP_C = 75.0

PHASE_ANGLE_DEG: dict[str, float] = {"A": 0.0, "B": -120.0, "C": 120.0}


@dataclass(slots=True, eq=False)
class Link:
    """A zero-impedance connection (jumper bar, shorting bar) that a procedure may lift."""

    index: int
    a: int
    b: int
    ends: tuple[str, str]


@dataclass(slots=True, eq=False)
class Wire:
    """One conductor run between two terminals."""

    index: int
    a: int
    b: int
    r_ohm: float
    ends: tuple[str, str]

    @property
    def label(self) -> str:
        return f"lead {self.ends[0]}–{self.ends[1]}"


@dataclass(slots=True, eq=False)
class Contact:
    """One contact of a switch: joins two terminals in the positions of ``closed_in``."""

    index: int  # global contact index
    a: int
    b: int
    closed_in: frozenset[str]


@dataclass(slots=True, eq=False)
class Switch:
    """An isolation or shorting provision with ordered positions."""

    code: str
    kind: str
    positions: tuple[str, ...]
    normal: str
    transition: str
    contacts: tuple[Contact, ...]
    _closed: dict[str, frozenset[int]] = field(default_factory=dict, repr=False)

    @property
    def travels(self) -> bool:
        """True when a move passes every position between the old and the new one.

        The site file lists a switch's positions in the order it moves through them. A switch
        with more than two positions (a rotary ammeter or selector switch, recorded as
        ``other``; a draw-out case with a test position) cannot jump from one end of its
        travel to the other, so each position on the way is a state of its own. With two
        positions there is nothing in between. Taking every kind this way is the safe
        reading: it checks more states, never fewer (common practice, no source)."""
        return len(self.positions) > 2

    def path(self, old: str, new: str) -> tuple[str, ...]:
        """The positions a move from ``old`` to ``new`` reaches in turn, ``new`` last."""
        if not self.travels or old == new:
            return (new,)
        i, j = self.positions.index(old), self.positions.index(new)
        step = 1 if j > i else -1
        return tuple(self.positions[k] for k in range(i + step, j + step, step))

    def closed(self, position: str) -> frozenset[int]:
        """Global indices of the contacts closed in ``position``."""
        hit = self._closed.get(position)
        if hit is None:
            hit = self._closed[position] = frozenset(
                c.index for c in self.contacts if position in c.closed_in
            )
        return hit


@dataclass(slots=True, eq=False)
class DeviceInput:
    """A current input of a device; ``index`` is its position in ``Netlist.inputs``."""

    index: int
    device: str
    name: str
    a: int
    b: int
    z_ohm: complex
    rated_a: float | None

    @property
    def label(self) -> str:
        return f"{self.device} {self.name}"


@dataclass(slots=True, eq=False)
class DeviceOutput:
    """A trip/close output and the target terminal it operates."""

    index: int
    device: str
    name: str
    terminal: int
    target: int


@dataclass(slots=True, eq=False)
class Device:
    """A relay, meter, transducer or recorder."""

    code: str
    kind: str
    functions: tuple[str, ...]
    ratio_setting: str | None
    inputs: tuple[DeviceInput, ...]
    outputs: tuple[DeviceOutput, ...]

    @property
    def differential(self) -> bool:
        return any(str(f).upper().startswith("87") for f in self.functions)

    @property
    def is_relay(self) -> bool:
        return self.kind == "relay"


@dataclass(slots=True, eq=False)
class CT:
    """A CT winding. ``load_secondary_a`` is the secondary current at the equipment's maximum
    load through the tap in use (1 A where the load or the ratio is unknown; 0 A for a
    neutral CT, which carries only the unbalance in normal service)."""

    index: int
    code: str
    equipment: str | None
    phase: str | None
    set_name: str | None
    secondary_a: float
    positions: dict[str, float]
    terminals: dict[str, int]
    in_use: tuple[str, str]
    first: int
    second: int
    tap_primary_a: float
    load_secondary_a: float
    winding_ohm: float | None = None  # full winding, ohms (``windings.py`` shares it by turns)

    @property
    def angle_deg(self) -> float:
        return PHASE_ANGLE_DEG.get((self.phase or "A").upper(), 0.0)

    @property
    def phasor(self) -> complex:
        """Unit phasor of the CT's phase (A 0°, B -120°, C +120°; others 0°)."""
        rad = math.radians(self.angle_deg)
        return complex(math.cos(rad), math.sin(rad))

    @property
    def ratio_text(self) -> str:
        return f"{self.tap_primary_a:g}:{self.secondary_a:g}"


@dataclass(slots=True, eq=False)
class Equipment:
    """Primary equipment; its CTs are live while it is energized."""

    code: str
    kind: str
    in_service: bool
    max_load_a: float | None


@dataclass(slots=True, eq=False)
class Procedure:
    """A stored procedure: its operations and the devices the work is for."""

    code: str
    title: str
    author: str | None
    devices: tuple[str, ...]
    steps: tuple[dict[str, Any], ...]


@dataclass(eq=False)
class Netlist:
    """One site (or one region of it) as indexed elements. Build it with ``build_netlist``."""

    site_code: str
    design_temp_c: float
    terminals: list[str]
    index: dict[str, int]
    links: tuple[Link, ...]
    wires: tuple[Wire, ...]
    switches: dict[str, Switch]
    devices: dict[str, Device]
    inputs: tuple[DeviceInput, ...]
    outputs: tuple[DeviceOutput, ...]
    cts: dict[str, CT]
    equipment: dict[str, Equipment]
    grounds: tuple[int, ...]
    procedures: dict[str, Procedure]
    terminal_blocks: frozenset[str] = frozenset()
    doc: dict[str, Any] | None = field(default=None, repr=False)
    record: rec.SiteRecord | None = field(default=None, repr=False)
    cache: dict[Any, Any] = field(default_factory=dict, repr=False)

    @property
    def n_terminals(self) -> int:
        return len(self.terminals)

    @cached_property
    def ct_list(self) -> tuple[CT, ...]:
        return tuple(self.cts.values())

    @cached_property
    def input_keys(self) -> list[tuple[str, str]]:
        """(device, input name) of every input, in ``inputs`` order."""
        return [(i.device, i.name) for i in self.inputs]

    @cached_property
    def contacts(self) -> tuple[Contact, ...]:
        return tuple(c for s in self.switches.values() for c in s.contacts)

    @cached_property
    def arrays(self) -> NetArrays:
        return NetArrays.of(self)

    def owner(self, terminal: int) -> str:
        return self.terminals[terminal].split(":", 1)[0]


@dataclass(frozen=True, eq=False)
class NetArrays:
    """numpy views of a netlist, shared by every solve."""

    link_a: np.ndarray
    link_b: np.ndarray
    contact_a: np.ndarray
    contact_b: np.ndarray
    # branches: the wires first, then the device inputs
    br_a: np.ndarray
    br_b: np.ndarray
    br_z: np.ndarray
    br_zero: np.ndarray
    n_wires: int
    ct_first: np.ndarray
    ct_second: np.ndarray
    ct_load: np.ndarray  # complex secondary load phasor of each CT
    ct_phasor: np.ndarray
    wind_a: np.ndarray  # winding edges between consecutive terminal positions
    wind_b: np.ndarray
    grounds: np.ndarray
    ct_set: np.ndarray  # index of each CT's three-phase set (-1: none, or a neutral CT)
    n_sets: int
    input_a: np.ndarray
    out_terminal: np.ndarray
    out_target: np.ndarray

    @classmethod
    def of(cls, nl: Netlist) -> NetArrays:
        def arr(values: list[int]) -> np.ndarray:
            return np.asarray(values, dtype=np.int64)

        n_ct = len(nl.ct_list)
        angle = np.fromiter(
            (PHASE_ANGLE_DEG.get((c.phase or "A").upper(), 0.0) for c in nl.ct_list),
            dtype=np.float64,
            count=n_ct,
        )
        ct_phasor = np.exp(1j * np.radians(angle))
        set_ids: dict[str, int] = {}
        ct_set = np.fromiter(
            (
                set_ids.setdefault(c.set_name, len(set_ids))
                if c.set_name is not None and (c.phase or "") != "N"
                else -1
                for c in nl.ct_list
            ),
            dtype=np.int64,
            count=n_ct,
        )
        zs = [w.r_ohm + 0j for w in nl.wires] + [i.z_ohm for i in nl.inputs]
        br_z = np.asarray(zs, dtype=np.complex128)
        wa: list[int] = []
        wb: list[int] = []
        for ct in nl.ct_list:
            t = ct.terminals
            order = _winding_order(tuple(ct.positions.items()), tuple(t))
            if len(order) < 2:
                wa.append(ct.first)
                wb.append(ct.second)
                continue
            ends = [t[n] for n in order]
            wa += ends[:-1]
            wb += ends[1:]
        return cls(
            link_a=arr([k.a for k in nl.links]),
            link_b=arr([k.b for k in nl.links]),
            contact_a=arr([c.a for c in nl.contacts]),
            contact_b=arr([c.b for c in nl.contacts]),
            br_a=arr([w.a for w in nl.wires] + [i.a for i in nl.inputs]),
            br_b=arr([w.b for w in nl.wires] + [i.b for i in nl.inputs]),
            br_z=br_z,
            br_zero=np.abs(br_z) < ZERO_OHM,
            n_wires=len(nl.wires),
            ct_first=arr([c.first for c in nl.ct_list]),
            ct_second=arr([c.second for c in nl.ct_list]),
            ct_load=ct_phasor
            * np.fromiter((c.load_secondary_a for c in nl.ct_list), dtype=np.float64, count=n_ct),
            ct_phasor=ct_phasor,
            wind_a=arr(wa),
            wind_b=arr(wb),
            grounds=arr(list(nl.grounds)),
            ct_set=ct_set,
            n_sets=len(set_ids),
            input_a=arr([i.a for i in nl.inputs]),
            out_terminal=arr([o.terminal for o in nl.outputs]),
            out_target=arr([o.target for o in nl.outputs]),
        )


@functools.lru_cache(maxsize=4096)
def _winding_order(
    positions: tuple[tuple[str, float], ...], terminals: tuple[str, ...]
) -> tuple[str, ...]:
    """A CT's terminals along its winding (by position, then name), once per nameplate: the
    CTs of a set, and like CTs across sites, share it."""
    at = dict(positions)
    return tuple(sorted(terminals, key=lambda n: (at[n], n)))


def _input_z_ohm(spec: rec.DeviceInput) -> complex:
    """Device input impedance from ``burden_ohm`` (R, X) or ``burden_va`` at ``rated_a``, ``pf``.

    |Z| = S / I² (S in VA at the rated current I), R = |Z|·pf, X = |Z|·sin(acos pf), the usual
    conversion of a burden stated in VA (IEEE C57.13 burdens are stated this way).
    """
    if spec.burden_ohm is not None:
        r, x = spec.burden_ohm
        z = complex(float(r), float(x))
    elif spec.burden_va is not None:
        rated_a = float(spec.rated_a or 5.0)
        pf = float(spec.pf if spec.pf is not None else 1.0)
        pf = min(max(pf, 0.0), 1.0)
        mag = float(spec.burden_va) / (rated_a * rated_a)
        z = complex(mag * pf, mag * math.sqrt(max(0.0, 1.0 - pf * pf)))
    else:
        z = complex(MIN_INPUT_OHM, 0.0)
    if abs(z) < MIN_INPUT_OHM:
        z = complex(MIN_INPUT_OHM, 0.0)
    return z


def _wire_r_ohm(spec: rec.Wire, temp_c: float, k: int) -> float:
    """The resistance of wire ``k`` of the site: ``r_ohm``, or its size's conductor at
    ``temp_c`` times its length (``trade.conductors.wire_resistance_ohm``; the per-metre
    value is cached there)."""
    if spec.r_ohm is not None:
        return float(spec.r_ohm)
    if spec.length_m is not None:
        length_m = float(spec.length_m)
    elif spec.length_ft is not None:
        length_m = float(spec.length_ft) * FT_TO_M
    else:
        raise ValueError(f"/wires/{k}: wire needs r_ohm, or size with length_m or length_ft")
    if not spec.size:
        raise ValueError(f"/wires/{k}: wire has a length but no size")
    if length_m < 0:
        # as trade.conductors.wire_resistance_ohm says it
        raise ValueError(f"wire length must not be negative, got {length_m} m")
    # wire_resistance_ohm's product, without its keyword call per wire
    return float(conductor_ohm_per_m(spec.size, spec.material or "cu", temp_c) * length_m)


def build_netlist(source: rec.SiteRecord | Mapping[str, Any]) -> Netlist:
    """Turn a site record (``record.SiteRecord``) into a ``Netlist``.

    A ``loopkeep.site/1`` dict is accepted too and converted with
    ``record.record_from_document`` (the engine's tests build their circuits as dicts).
    Terminals are created as they are referenced. Wire resistances come from ``r_ohm`` or from
    ``conductors.wire_resistance_ohm`` at the site's ``design_temp_c`` (``length_ft`` × 0.3048).
    Raises ``ValueError`` naming the JSON pointer of an element that cannot be built.
    """
    if isinstance(source, rec.SiteRecord):
        record, doc = source, None
    else:
        record = rec.record_from_document(source)
        doc = source if isinstance(source, dict) else dict(source)
    temp_c = float(record.site.design_temp_c)
    terminals: list[str] = []
    index: dict[str, int] = {}
    known = index.get

    def term(name: Any, *where: object) -> int:
        """The index of terminal ``name`` (created on first reference); the parts of
        ``where`` make the JSON pointer named when it is not of the form ``OWNER:NAME``
        (joined only then: a site references some thousands of terminals). The loops below
        look a known terminal up themselves and call this for the others."""
        if not isinstance(name, str) or ":" not in name:
            pointer = "".join(map(str, where))
            raise ValueError(f"{pointer}: terminal {name!r} is not of the form OWNER:NAME")
        i = known(name)
        if i is None:
            i = index[name] = len(terminals)
            terminals.append(name)
        return i

    equipment: dict[str, Equipment] = {}
    for e in record.equipment:
        load = e.max_load_a
        equipment[e.code] = Equipment(
            e.code, e.kind, bool(e.in_service), float(load) if load is not None else None
        )

    cts: dict[str, CT] = {}
    for k, c in enumerate(record.cts):
        code = c.code
        positions = dict(c.terminals)
        in_use_raw = c.in_use or tuple(positions)[:2]
        if len(in_use_raw) != 2:
            raise ValueError(f"/cts/{k}/in_use: needs exactly two terminals")
        in_use = (in_use_raw[0], in_use_raw[1])
        for n in in_use:
            if n not in positions:
                positions[n] = 0.0 if not positions else max(positions.values())
        tidx: dict[str, int] = {}
        for n in positions:
            name = f"{code}:{n}"  # always OWNER:NAME
            i = known(name)
            if i is None:
                i = index[name] = len(terminals)
                terminals.append(name)
            tidx[n] = i
        secondary_a = float(c.secondary_a or 5.0)
        tap_a = abs(positions[in_use[0]] - positions[in_use[1]])
        eq = equipment.get(c.equipment) if c.equipment else None
        if str(c.phase or "").upper() == "N":
            # A neutral CT carries the unbalance, about 0 A in normal service, not the load
            # (common practice, no source); the fault current shows in the probe and the
            # ratings' ground-fault case.
            load_a = 0.0
        elif eq is not None and eq.max_load_a is not None and tap_a > 0:
            load_a = eq.max_load_a * secondary_a / tap_a
        else:
            load_a = 1.0
        cts[code] = CT(
            len(cts),
            code,
            c.equipment,
            c.phase.upper() if c.phase else None,
            c.set_name,
            secondary_a,
            positions,
            tidx,
            in_use,
            tidx[in_use[0]],
            tidx[in_use[1]],
            tap_a,
            load_a,
            float(c.winding_ohm) if c.winding_ohm is not None else None,
        )

    devices: dict[str, Device] = {}
    inputs: list[DeviceInput] = []
    outputs: list[DeviceOutput] = []
    for k, d in enumerate(record.devices):
        code = d.code
        dins: list[DeviceInput] = []
        for m, spec in enumerate(d.inputs):
            rated = spec.rated_a
            t0, t1 = spec.from_terminal, spec.to_terminal
            a = known(t0) if t0.__class__ is str else None
            if a is None:
                a = term(t0, "/devices/", k, "/inputs/", m, "/from")
            b = known(t1) if t1.__class__ is str else None
            if b is None:
                b = term(t1, "/devices/", k, "/inputs/", m, "/to")
            di = DeviceInput(
                len(inputs),
                code,
                spec.name,
                a,
                b,
                _input_z_ohm(spec),
                float(rated) if rated is not None else None,
            )
            inputs.append(di)
            dins.append(di)
        douts: list[DeviceOutput] = []
        for m, out in enumerate(d.outputs):
            t0, t1 = out.terminal, out.target
            a = known(t0) if t0.__class__ is str else None
            if a is None:
                a = term(t0, "/devices/", k, "/outputs/", m, "/terminal")
            b = known(t1) if t1.__class__ is str else None
            if b is None:
                b = term(t1, "/devices/", k, "/outputs/", m, "/target")
            do = DeviceOutput(len(outputs), code, out.name, a, b)
            outputs.append(do)
            douts.append(do)
        setting = d.ratio_setting
        devices[code] = Device(
            code,
            d.kind,
            d.functions,
            list(setting) if isinstance(setting, tuple) else setting,
            tuple(dins),
            tuple(douts),
        )

    wires: list[Wire] = []
    for k, wire in enumerate(record.wires):
        ends = (wire.from_terminal, wire.to_terminal)
        a = known(ends[0]) if ends[0].__class__ is str else None
        if a is None:
            a = term(ends[0], "/wires/", k, "/from")
        b = known(ends[1]) if ends[1].__class__ is str else None
        if b is None:
            b = term(ends[1], "/wires/", k, "/to")
        wires.append(Wire(k, a, b, _wire_r_ohm(wire, temp_c, k), ends))

    links: list[Link] = []
    for k, link in enumerate(record.links):
        t0, t1 = link.a, link.b
        a = known(t0) if t0.__class__ is str else None
        if a is None:
            a = term(t0, "/links/", k, "/0")
        b = known(t1) if t1.__class__ is str else None
        if b is None:
            b = term(t1, "/links/", k, "/1")
        links.append(Link(k, a, b, (terminals[a], terminals[b])))

    ground_list: list[int] = []
    for k, g in enumerate(record.grounds):
        a = known(g) if g.__class__ is str else None
        ground_list.append(term(g, "/grounds/", k) if a is None else a)
    grounds = tuple(dict.fromkeys(ground_list))

    switches: dict[str, Switch] = {}
    n_contacts = 0
    # (positions closed in, the switch's positions) -> the frozenset, checked once per pair
    closed_sets: dict[tuple[tuple[str, ...], tuple[str, ...]], frozenset[str]] = {}
    for k, s in enumerate(record.switches):
        code = s.code
        positions_s = s.positions or ("closed", "open")
        normal = s.normal or positions_s[0]
        if normal not in positions_s:
            raise ValueError(f"/switches/{k}/normal: {normal!r} is not one of {list(positions_s)}")
        contacts = []
        for m, contact in enumerate(s.contacts):
            between = contact.between
            if len(between) != 2:
                raise ValueError(f"/switches/{k}/contacts/{m}/between: needs two terminals")
            pair = (contact.closed_in, positions_s)
            closed_in = closed_sets.get(pair)
            if closed_in is None:
                closed_in = frozenset(contact.closed_in)
                unknown = sorted(closed_in - set(positions_s))
                if unknown:
                    raise ValueError(
                        f"/switches/{k}/contacts/{m}/closed_in: unknown positions {unknown}"
                    )
                closed_sets[pair] = closed_in
            t0, t1 = between
            a = known(t0) if t0.__class__ is str else None
            if a is None:
                a = term(t0, "/switches/", k, "/contacts/", m, "/between/0")
            b = known(t1) if t1.__class__ is str else None
            if b is None:
                b = term(t1, "/switches/", k, "/contacts/", m, "/between/1")
            contacts.append(Contact(n_contacts, a, b, closed_in))
            n_contacts += 1
        switches[code] = Switch(
            code=code,
            kind=s.kind,
            positions=positions_s,
            normal=normal,
            transition=s.transition,
            contacts=tuple(contacts),
        )

    procedures: dict[str, Procedure] = {}
    for p in record.procedures:
        procedures[p.code] = Procedure(
            code=p.code,
            title=p.title,
            author=p.author or None,
            devices=p.devices,
            steps=tuple(op.to_json() for op in p.steps),
        )

    blocks = frozenset(b.code for b in record.terminal_blocks)
    return Netlist(
        site_code=record.site.code,
        design_temp_c=temp_c,
        terminals=terminals,
        index=index,
        links=tuple(links),
        wires=tuple(wires),
        switches=switches,
        devices=devices,
        inputs=tuple(inputs),
        outputs=tuple(outputs),
        cts=cts,
        equipment=equipment,
        grounds=grounds,
        procedures=procedures,
        terminal_blocks=blocks,
        doc=doc,
        record=record,
    )


def _region_owners(
    nl: Netlist,
) -> tuple[np.ndarray, np.ndarray, list[int], list[Device], list[Switch]]:
    """(device number of each input, of each output, switch number of each contact, the
    devices, the switches), devices and switches numbered in their dicts' order (cached)."""
    hit = nl.cache.get("region_owners")
    if hit is None:
        dev_list = list(nl.devices.values())
        sw_list = list(nl.switches.values())
        dev_no = {d.code: k for k, d in enumerate(dev_list)}
        in_dev = np.fromiter((dev_no[i.device] for i in nl.inputs), np.int64, len(nl.inputs))
        out_dev = np.fromiter((dev_no[o.device] for o in nl.outputs), np.int64, len(nl.outputs))
        sw_of = [k for k, sw in enumerate(sw_list) for _ in sw.contacts]
        hit = nl.cache["region_owners"] = (in_dev, out_dev, sw_of, dev_list, sw_list)
    return hit


def region(nl: Netlist, mask: np.ndarray) -> Netlist:
    """The netlist of the terminals in ``mask``: a view over ``nl``'s elements, not a second
    build from the record. An element is kept as ``build_netlist`` of the record cut to the
    region would keep it (a CT by its first terminal in use; a device input, wire, link and
    contact by its first terminal; an output by its own terminal; a device or switch with any
    element kept), and terminals and elements are numbered in the order that build would give
    them, so every solve over the region is the same computation, to the last bit. Values
    (wire resistances, input impedances, CT loads) are the site's own; the region keeps the
    site's record, equipment and procedures."""
    keep = mask.tolist()
    ar = nl.arrays
    terminals: list[str] = []
    index: dict[str, int] = {}
    new: dict[int, int] = {}
    names = nl.terminals

    def term(t: int) -> int:
        i = new.get(t)
        if i is None:
            i = new[t] = len(terminals)
            name = names[t]
            index[name] = i
            terminals.append(name)
        return i

    def kept(first: np.ndarray) -> list[int]:
        # the elements whose first terminal is in the region, in their order: the only ones
        # the walk below numbers terminals for
        out: list[int] = np.flatnonzero(mask[first]).tolist()
        return out

    in_dev, out_dev, sw_of, dev_list, sw_list = _region_owners(nl)
    cts: dict[str, CT] = {}
    ct_list = nl.ct_list
    for k in kept(ar.ct_first):
        ct = ct_list[k]
        tidx = {n: term(t) for n, t in ct.terminals.items()}
        cts[ct.code] = replace(
            ct,
            index=len(cts),
            terminals=tidx,
            first=tidx[ct.in_use[0]],
            second=tidx[ct.in_use[1]],
        )

    devices: dict[str, Device] = {}
    inputs: list[DeviceInput] = []
    outputs: list[DeviceOutput] = []
    hit_dev = np.zeros(len(dev_list), dtype=bool)
    hit_dev[in_dev[mask[ar.input_a]]] = True
    hit_dev[out_dev[mask[ar.out_terminal]]] = True
    for dn in np.flatnonzero(hit_dev).tolist():
        d = dev_list[dn]
        dins = []
        for i in d.inputs:
            if keep[i.a]:
                a, b = term(i.a), term(i.b)
                di = DeviceInput(len(inputs), i.device, i.name, a, b, i.z_ohm, i.rated_a)
                inputs.append(di)
                dins.append(di)
        douts = []
        for o in d.outputs:
            if keep[o.terminal]:
                do = DeviceOutput(len(outputs), o.device, o.name, term(o.terminal), term(o.target))
                outputs.append(do)
                douts.append(do)
        devices[d.code] = replace(d, inputs=tuple(dins), outputs=tuple(douts))

    wires: list[Wire] = []
    all_wires = nl.wires
    for k in kept(ar.br_a[: ar.n_wires]):
        w = all_wires[k]
        wires.append(Wire(len(wires), term(w.a), term(w.b), w.r_ohm, w.ends))
    links: list[Link] = []
    all_links = nl.links
    for k in kept(ar.link_a):
        lk = all_links[k]
        links.append(Link(len(links), term(lk.a), term(lk.b), lk.ends))
    grounds = tuple(term(g) for g in nl.grounds if keep[g])

    switches: dict[str, Switch] = {}
    all_contacts = nl.contacts
    by_switch: dict[int, list[Contact]] = {}
    for n_contacts, k in enumerate(kept(ar.contact_a)):
        con = all_contacts[k]
        by_switch.setdefault(sw_of[k], []).append(
            Contact(n_contacts, term(con.a), term(con.b), con.closed_in)
        )
    for sn, contacts in by_switch.items():
        s = sw_list[sn]
        switches[s.code] = Switch(
            code=s.code,
            kind=s.kind,
            positions=s.positions,
            normal=s.normal,
            transition=s.transition,
            contacts=tuple(contacts),
        )

    return Netlist(
        site_code=nl.site_code,
        design_temp_c=nl.design_temp_c,
        terminals=terminals,
        index=index,
        links=tuple(links),
        wires=tuple(wires),
        switches=switches,
        devices=devices,
        inputs=tuple(inputs),
        outputs=tuple(outputs),
        cts=cts,
        equipment=nl.equipment,
        grounds=grounds,
        procedures=nl.procedures,
        terminal_blocks=nl.terminal_blocks,
        doc=None,
        record=nl.record,
    )
