"""The ratings of a site's CTs as columns: one row per CT, computed over all rows at once.

:func:`ct_columns` reads each CT's record once (its tap, class, winding, equipment and bus,
the CTs of a set sharing what they share), then computes with numpy over every CT: tap ratio,
turns, winding resistance at the tap, the class at the tap, secondary fault currents, the
C37.110 index and voltage form and the time to saturate for both fault cases
(:func:`analysis.engine.ratings.saturation.assess_cases`). The findings
(:mod:`analysis.engine.ratings.checks`) and the CT report JSON
(:mod:`analysis.engine.ratings.report`) are both read from these columns, so one CT and a
whole site are rated by the same code.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

import record as rec
from analysis.engine.ratings.saturation import (
    CaseColumns,
    Flags,
    Floats,
    assess_cases,
)
from analysis.engine.ratings.site import SiteIndex
from analysis.engine.ratings.taps import Tap
from trade.accuracy import IEC_PROTECTION, AccuracyClass, effective_alf, parse_accuracy

CASES = ("ground_fault", "phase_fault")
CASE_FAULT_KEY = {"ground_fault": "ground_fault_ka", "phase_fault": "three_phase_fault_ka"}

Burdens = Mapping[str, complex | None]


def as_float(value: Any) -> float | None:
    """A number from the document, or None when absent or not a number (validation reports
    the latter at import; the ratings then treat it as missing)."""
    if value is None or value == "" or isinstance(value, bool):
        return None
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return number if math.isfinite(number) else None


def parsed_accuracy(
    text: str, rated_burden_va: float | None, knee_v: float | None
) -> AccuracyClass | str:
    """The class, or the error message where the text is not a class."""
    try:
        return parse_accuracy(text, rated_burden_va=rated_burden_va, knee_v=knee_v)
    except ValueError as err:
        return str(err)


@dataclass(slots=True)
class _Winding:
    """What the CTs of one winding, tap, class and winding resistance share."""

    tap: Tap | None
    tap_error: str | None
    accuracy: AccuracyClass | None
    accuracy_error: str | None  # the parse error of a class text that is not a class
    winding_ohm: float | None  # at the tap
    standard_burden_ohm: float | None  # at the tap
    vx_available_v: float | None  # at the tap, with the winding
    limit: float | None
    voltage_at_tap_v: float | None


def _winding(index: SiteIndex, ct: rec.CT) -> _Winding:
    try:
        tap = index.tap(ct)
    except ValueError as err:
        return _Winding(None, str(err), None, None, None, None, None, None, None)
    accuracy: AccuracyClass | None = None
    error = None
    if ct.accuracy:
        parsed = parsed_accuracy(ct.accuracy, as_float(ct.rated_burden_va), as_float(ct.knee_v))
        if isinstance(parsed, AccuracyClass):
            accuracy = parsed
        else:
            error = parsed
    full = as_float(ct.winding_ohm)
    winding = None if full is None else full * tap.turns_fraction
    std = vx = limit = volts = None
    if accuracy is not None:
        sec, tf = tap.secondary_a, tap.turns_fraction
        std = accuracy.standard_burden_ohm_at_tap(sec, tf)
        vx = accuracy.saturation_emf_at_tap_v(sec, tf, winding)
        limit = accuracy.criterion_limit()
        volts = accuracy.voltage_at_tap_v(sec, tf)
    return _Winding(tap, None, accuracy, error, winding, std, vx, limit, volts)


@dataclass(slots=True)
class _Place:
    """What the CTs of one equipment share: its load and its bus's fault level."""

    equipment: str | None
    has_bus: bool
    max_load_a: float | None
    fault_a: tuple[float | None, ...]  # per case, primary A
    x_over_r: float | None


def _place(index: SiteIndex, ct: rec.CT) -> _Place:
    eq = index.equipment_of(ct)
    bus = index.bus_of(ct)
    max_load_a = None if eq is None else as_float(eq.max_load_a)
    faults = []
    for case in CASES:
        fault_ka = None if bus is None else as_float(getattr(bus, CASE_FAULT_KEY[case]))
        faults.append(None if fault_ka is None else fault_ka * 1000.0)
    x_over_r = None if bus is None else as_float(bus.x_over_r)
    return _Place(
        None if eq is None else eq.code, bus is not None, max_load_a, tuple(faults), x_over_r
    )


def _nan(values: Iterable[float | None]) -> Floats:
    return np.array([math.nan if v is None else v for v in values], dtype=np.float64)


@dataclass(frozen=True, slots=True)
class CTColumns:
    """The ratings of CTs of one site, one row per CT (in the order asked for).

    Rows whose tap is unknown (``taps[i] is None``) carry NaN and count in no case; a case a
    CT does not have (the phase-fault case of a neutral CT) is flagged off in ``in_case``.
    """

    index: SiteIndex
    codes: list[str]
    cts: list[rec.CT]
    taps: list[Tap | None]
    tap_errors: list[str | None]
    accuracy: list[AccuracyClass | None]
    accuracy_errors: list[str | None]
    neutral: list[bool]
    relaying: Flags
    winding_ohm: Floats  # at the tap
    standard_burden_ohm: Floats  # at the tap
    voltage_at_tap_v: Floats
    turns: Floats
    primary_a: Floats
    max_load_a: Floats
    rating_factor: Floats
    equipment: list[str | None]
    has_bus: list[bool]
    cases: dict[str, CaseColumns]
    in_case: dict[str, Flags]
    alf_effective: dict[str, list[float | None]]

    def __len__(self) -> int:
        return len(self.codes)


def ct_columns(
    index: SiteIndex, codes: Iterable[str], burdens: Mapping[str, Burdens | None]
) -> CTColumns:
    """The rating columns of the CTs ``codes`` (each known to ``index``; ``KeyError``
    otherwise). ``burdens`` maps a CT code to its external burdens by case (complex Ω at the
    CT terminals, None where open or unknown); a CT absent from it has none."""
    codes = list(codes)
    cts = [index.ct(code) for code in codes]
    # What the CTs of a set share is looked up once: one entry per distinct winding (tap,
    # class, resistance) and per equipment; each row points at its entries.
    windings: dict[tuple[Any, ...], int] = {}
    places: dict[str | None, int] = {}
    rows_w: list[_Winding] = []
    rows_p: list[_Place] = []
    w_of: list[int] = []
    p_of: list[int] = []
    for ct in cts:
        key = (
            ct.terminals,
            ct.in_use,
            ct.secondary_a,
            ct.accuracy,
            ct.rated_burden_va,
            ct.knee_v,
            ct.winding_ohm,
        )
        w = windings.get(key)
        if w is None or rows_w[w].tap_error is not None:  # a tap error names its CT
            w = windings[key] = len(rows_w)
            rows_w.append(_winding(index, ct))
        w_of.append(w)
        p = places.get(ct.equipment)
        if p is None:
            p = places[ct.equipment] = len(rows_p)
            rows_p.append(_place(index, ct))
        p_of.append(p)
    wi, pi = np.array(w_of, dtype=np.intp), np.array(p_of, dtype=np.intp)

    def per_winding(values: Iterable[float | None]) -> Floats:
        return _nan(values).take(wi)

    def per_place(values: Iterable[float | None]) -> Floats:
        return _nan(values).take(pi)

    windings_of = [rows_w[w] for w in w_of]
    taps = [w.tap for w in windings_of]
    accuracy = [w.accuracy for w in windings_of]
    has_tap = np.array([w.tap is not None for w in rows_w], dtype=np.bool_)[wi]
    secondary_a = per_winding(None if w.tap is None else w.tap.secondary_a for w in rows_w)
    primary_a = per_winding(None if w.tap is None else w.tap.primary_a for w in rows_w)
    turns = primary_a / secondary_a
    ratio_value = turns  # primary A / secondary A, as Tap.ratio_value
    relaying = np.array(
        [w.accuracy is not None and w.accuracy.is_relaying for w in rows_w], dtype=np.bool_
    )[wi]
    winding = per_winding(w.winding_ohm for w in rows_w)
    std = per_winding(w.standard_burden_ohm for w in rows_w)
    relaying_std = np.where(relaying, std, math.nan)
    vx = np.where(relaying, per_winding(w.vx_available_v for w in rows_w), math.nan)
    limit = np.where(relaying, per_winding(w.limit for w in rows_w), math.nan)
    x_over_r = per_place(p.x_over_r for p in rows_p)
    neutral = [str(ct.phase or "").upper() == "N" for ct in cts]
    no_bus = [i for i, p in enumerate(p_of) if not rows_p[p].has_bus]
    given = [burdens.get(code) or _NO_BURDENS for code in codes]
    cases: dict[str, CaseColumns] = {}
    in_case: dict[str, Flags] = {}
    alf: dict[str, list[float | None]] = {}
    for k, case in enumerate(CASES):
        on = has_tap.copy()
        if case == "phase_fault":
            on &= ~np.array(neutral, dtype=np.bool_)
        case_burdens = [b.get(case) for b in given]
        z = np.array([0j if b is None else b for b in case_burdens], dtype=np.complex128)
        columns = assess_cases(
            case=case,
            fault_a=per_place(p.fault_a[k] for p in rows_p),
            x_over_r=x_over_r,
            ratio_value=ratio_value,
            secondary_a=secondary_a,
            burden_r_ohm=z.real.copy(),
            burden_x_ohm=z.imag.copy(),
            has_burden=np.array([b is not None for b in case_burdens], dtype=np.bool_),
            winding_ohm=winding,
            standard_burden_ohm=relaying_std,
            vx_available_v=vx,
            limit=limit,
            frequency_hz=index.frequency_hz,
        )
        missing = columns.missing
        for i in no_bus:
            if missing[i]:
                kept = tuple(m for m in missing[i] if m not in ("fault current", "X/R"))
                missing[i] = (f"bus of equipment {rows_p[p_of[i]].equipment!r}", *kept)
        cases[case] = columns
        in_case[case] = on
        alf[case] = _alf_effective(accuracy, windings_of, columns, on)
    return CTColumns(
        index=index,
        codes=codes,
        cts=cts,
        taps=taps,
        tap_errors=[w.tap_error for w in windings_of],
        accuracy=accuracy,
        accuracy_errors=[w.accuracy_error for w in windings_of],
        neutral=neutral,
        relaying=relaying,
        winding_ohm=winding,
        standard_burden_ohm=std,
        voltage_at_tap_v=per_winding(w.voltage_at_tap_v for w in rows_w),
        turns=turns,
        primary_a=primary_a,
        max_load_a=per_place(p.max_load_a for p in rows_p),
        rating_factor=np.array([as_float(ct.rating_factor) or 1.0 for ct in cts]),
        equipment=[rows_p[p].equipment for p in p_of],
        has_bus=[rows_p[p].has_bus for p in p_of],
        cases=cases,
        in_case=in_case,
        alf_effective=alf,
    )


_NO_BURDENS: Burdens = {}


def _alf_effective(
    accuracy: list[AccuracyClass | None],
    rows: list[_Winding],
    columns: CaseColumns,
    on: Flags,
) -> list[float | None]:
    """ALF' of the IEC P classes for the case's burden (S10), None elsewhere."""
    out: list[float | None] = [None] * len(rows)
    has_burden = columns.has_burden
    for i, acc in enumerate(accuracy):
        if acc is None or acc.standard != IEC_PROTECTION or acc.alf is None:
            continue
        std = rows[i].standard_burden_ohm
        if std is None or not has_burden[i] or not on[i]:
            continue
        out[i] = effective_alf(
            alf=acc.alf,
            winding_ohm=rows[i].winding_ohm or 0.0,
            rated_burden_ohm=std,
            burden_ohm=float(columns.burden_abs_ohm[i]),
        )
    return out
