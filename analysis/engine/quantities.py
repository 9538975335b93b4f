"""What each device input is for, and the quantities a relay computes from its phase inputs.

Roles come from one reference solve: every switch, lead and link as in the normal state and
every piece of equipment energized, so that each CT set drives its balanced load (A 0°,
B −120°, C +120°):

- a *phase* input carries at least 10 % of its circuit's largest CT current;
- a *quiet* input carries under 1 % of it although the CTs can drive current through it (the
  probe column of ``state.evaluate_states``): a residual, neutral or differential operate
  input, which carries about 0 A in normal service and the fault current in a fault.

A relay computes a quantity from its phase inputs (common practice of numerical relays, no
source):

- the residual ``3I0 = Σ I`` of the three phase inputs of one circuit, when the relay has a
  zero-sequence element (``ZERO_SEQUENCE``) and no quiet input of its own, i.e. nothing that
  measures the residual: a relay WITH a residual input measures it, and that input is judged
  as any other;
- the negative-sequence current ``I2 = (I1 + a² I2 + a I3) / 3`` (Fortescue; from memory)
  of its three phase inputs, when it has a negative-sequence element (``NEGATIVE_SEQUENCE``),
  whatever its other inputs. The inputs are taken in their recorded order and the rotation is
  the one (ABC or ACB) that makes I2 zero in the reference state: a relay in service is set
  for the rotation it sees.

Elements (IEEE C37.2 device numbers with their suffix letters; the suffix meanings N =
neutral/residual, G = ground, Q = negative sequence are the trade's usage, from memory):

- zero sequence: 50, 51, 67, 87 with suffix N or G (50N, 51N, 50G, 51G, 67N, 67G, 87N
  restricted earth fault, and longer suffixes that start with N or G such as 51NT);
- negative sequence: 46 (phase-balance / negative-sequence current relay, any suffix), and
  50, 51, 67 with suffix Q (50Q, 51Q, 67Q).

Not in the lists: voltage elements (59N, 47, 64 on a voltage input), ground distance (21G
uses 3I0 only to compensate its reach, and load is far outside any reach), and 32N/50BF.
A function string may hold several elements ("50/51N", "50, 51N").
"""

from __future__ import annotations

import functools
import re
from dataclasses import dataclass
from typing import Any

import numpy as np

# Thresholds of the findings table (design.md), as fractions of the circuit's largest CT
# current; repeated here so that this module imports nothing of the state checks.
PHASE_FROM = 0.10
QUIET_BELOW = 0.01
PROBE_ZERO_A = 1e-6

_ELEMENT = re.compile(r"^(\d+)([A-Z]*)")
_ZERO_BASES = frozenset({"50", "51", "67", "87"})
_NEG_BASES = frozenset({"50", "51", "67"})
_A = complex(-0.5, 3**0.5 / 2)  # 1∠120°


def elements(functions: tuple[str, ...] | list[str]) -> list[str]:
    """The single elements named by a device's function strings, upper case."""
    out = []
    for f in functions:
        for part in re.split(r"[/,;+\s]+", str(f).upper()):
            if part:
                out.append(part)
    return out


def zero_sequence(functions: tuple[str, ...] | list[str]) -> list[str]:
    """The zero-sequence (residual/ground) elements among ``functions``."""
    out = []
    for el in elements(functions):
        m = _ELEMENT.match(el)
        if m and m.group(1) in _ZERO_BASES and m.group(2)[:1] in ("N", "G"):
            out.append(el)
    return out


def negative_sequence(functions: tuple[str, ...] | list[str]) -> list[str]:
    """The negative-sequence elements among ``functions``."""
    out = []
    for el in elements(functions):
        m = _ELEMENT.match(el)
        if m and (m.group(1) == "46" or (m.group(1) in _NEG_BASES and m.group(2)[:1] == "Q")):
            out.append(el)
    return out


@dataclass(frozen=True, slots=True)
class Computed:
    """A quantity a relay computes: ``|Σ coef[k] · I(inputs[k])|``."""

    device: str
    name: str  # "3I0" or "I2"
    inputs: tuple[int, ...]  # global input indices, in recorded order
    coef: tuple[complex, ...]
    functions: tuple[str, ...]  # the elements that operate on it
    formula: str  # for messages, e.g. "IA + IB + IC"

    def value(self, currents: Any) -> complex:
        """The quantity from a sequence of input current phasors (indexed by input)."""
        return sum((c * currents[k] for c, k in zip(self.coef, self.inputs, strict=True)), 0j)


@dataclass(frozen=True, slots=True)
class Roles:
    """The role of every input of a netlist and the quantities its relays compute."""

    phase: np.ndarray  # bool per input
    quiet: np.ndarray  # bool per input
    computed: dict[str, tuple[Computed, ...]]  # device code -> its computed quantities
    lost: tuple[tuple[str, ...], ...]  # per input: the functions lost when it is bypassed

    def functions_lost(self, k: int) -> tuple[str, ...]:
        """The functions of input ``k``'s device that lose their current when it is
        bypassed (``_functions_lost``)."""
        return self.lost[k]


def _functions_lost(dev: Any, k: int, quiet: np.ndarray) -> tuple[str, ...]:
    """A quiet input serves the zero-sequence (and differential) elements; a phase input
    serves every element except the zero-sequence ones that a quiet input of the device
    measures. All functions where that leaves none."""
    measured = any(quiet[i.index] for i in dev.inputs)
    return _lost(tuple(dev.functions), bool(quiet[k]), bool(measured))


@functools.lru_cache(maxsize=4096)
def _lost(funcs: tuple[str, ...], quiet: bool, measured: bool) -> tuple[str, ...]:
    """``_functions_lost`` of an input: the same for every device of the same functions."""
    zero = set(zero_sequence(funcs))
    if quiet:
        own = tuple(f for f in funcs if set(elements([f])) & zero)
        return own or funcs
    if measured and zero:
        rest = tuple(f for f in funcs if not set(elements([f])) <= zero)
        return rest or funcs
    return funcs


@functools.lru_cache(maxsize=4096)
def _sequences(funcs: tuple[str, ...]) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """(zero-sequence, negative-sequence) elements of a device's functions (cached)."""
    return tuple(zero_sequence(funcs)), tuple(negative_sequence(funcs))


def input_roles(
    nl: Any,
    currents: np.ndarray,
    probe: np.ndarray,
    ref_a: np.ndarray,
    circuit: np.ndarray,
) -> Roles:
    """Roles and computed quantities from the reference solve (see the module docstring):
    ``currents`` and ``probe`` the input currents of its load and probe columns, ``ref_a``
    the largest CT current of each input's circuit, ``circuit`` each input's circuit label."""
    mag = np.abs(currents)
    sees = np.abs(probe) >= PROBE_ZERO_A
    phase = (ref_a > 0) & (mag >= PHASE_FROM * ref_a)
    quiet = sees & (mag <= QUIET_BELOW * ref_a + PROBE_ZERO_A)
    computed: dict[str, tuple[Computed, ...]] = {}
    quiet_l: list[bool] = quiet.tolist()
    phase_l: list[bool] = phase.tolist()
    circuit_l: list[int] = np.asarray(circuit).tolist()
    measured_of: dict[str, bool] = {}
    for dev in nl.devices.values():
        measured_of[dev.code] = any(quiet_l[i.index] for i in dev.inputs)
        if not dev.is_relay or not dev.inputs:
            continue
        zero, neg = _sequences(tuple(dev.functions))
        if not zero and not neg:
            continue
        measured = measured_of[dev.code]
        groups: dict[int, list[Any]] = {}
        for i in dev.inputs:
            if phase_l[i.index]:
                groups.setdefault(circuit_l[i.index], []).append(i)
        mine: list[Computed] = []
        for ins in groups.values():
            if len(ins) != 3:
                continue  # a residual or I2 of other than three phases is no such quantity
            idx = tuple(i.index for i in ins)
            names = [i.name for i in ins]
            if zero and not measured:
                mine.append(
                    Computed(dev.code, "3I0", idx, (1, 1, 1), tuple(zero), " + ".join(names))
                )
            if neg:
                c = [currents[k] for k in idx]
                abc = abs(c[0] + _A * _A * c[1] + _A * c[2])
                acb = abs(c[0] + _A * c[1] + _A * _A * c[2])
                r = _A if abc <= acb else _A * _A
                coef = (1 / 3, r * r / 3, r / 3)
                rot = "a" if r == _A else "a²"
                other = "a²" if r == _A else "a"
                formula = f"({names[0]} + {other}·{names[1]} + {rot}·{names[2]}) / 3"
                mine.append(Computed(dev.code, "I2", idx, coef, tuple(neg), formula))
        if mine:
            computed[dev.code] = tuple(mine)
    lost = tuple(
        _lost(tuple(nl.devices[i.device].functions), quiet_l[i.index], measured_of[i.device])
        for i in nl.inputs
    )
    return Roles(phase=phase, quiet=quiet, computed=computed, lost=lost)
