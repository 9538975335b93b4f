"""The CT report: design.md's "CT report JSON", from a site record and the engine's burdens.

The site is a ``record.SiteRecord``; a ``loopkeep.site/1`` dict is converted
(``record.record_from_document``)."""

from __future__ import annotations

import functools
import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

import record as rec
from analysis.engine.findings import Finding
from analysis.engine.ratings.checks import CASES, CTRating, device_static_findings, evaluate_ct
from analysis.engine.ratings.excitation import (
    ExcitationCurve,
    KneePoint,
    current_at,
    excitation_curve,
    knee_point_iec,
    knee_point_ieee,
    scale_to_tap,
)
from analysis.engine.ratings.saturation import SaturationCase
from analysis.engine.ratings.site import SiteIndex

SIGNIFICANT_DIGITS = 4


def _r(x: float | None, digits: int = SIGNIFICANT_DIGITS) -> float | int | None:
    """Round to significant digits for people; integral values become integers."""
    if x is None or not math.isfinite(x):
        return None
    value = float(f"{x:.{digits}g}")
    return int(value) if value.is_integer() else value


def _curve_at_tap(ct: rec.CT, rating: CTRating) -> ExcitationCurve | None:
    points = ct.excitation
    if not points or rating.tap is None:
        return None
    return _scaled_curve(points, rating.tap.turns_fraction)


@functools.lru_cache(maxsize=4096)
def _scaled_curve(
    points: tuple[tuple[float, float], ...], turns_fraction: float
) -> ExcitationCurve | None:
    """The curve at the tap, once per distinct curve and tap (the CTs of a set share them);
    None where the points are no curve."""
    try:
        return scale_to_tap(excitation_curve(points), turns_fraction)
    except ValueError:
        return None


def _case_json(result: SaturationCase | None) -> dict[str, Any]:
    if result is None:
        return {
            "burden_ohm": None,
            "fault_a": None,
            "secondary_fault_a": None,
            "x_over_r": None,
            "vx_required_v": None,
            "vx_available_v": None,
            "c37_110_index": None,
            "time_to_saturate_ms": None,
        }
    z = result.burden_ohm
    if z is not None:
        # Solver round-off (1e-16 Ω of reactance in a resistive loop) is not a value to show.
        eps = 1e-9 * max(abs(z), 1e-3)
        z = complex(0.0 if abs(z.real) < eps else z.real, 0.0 if abs(z.imag) < eps else z.imag)
    return {
        "burden_ohm": None if z is None else {"r": _r(z.real), "x": _r(z.imag), "z": _r(abs(z))},
        "fault_a": _r(result.fault_a, 6),
        "secondary_fault_a": _r(result.secondary_fault_a),
        "x_over_r": _r(result.x_over_r),
        "vx_required_v": _r(result.vx_required_v),
        "vx_available_v": _r(result.vx_available_v),
        "c37_110_index": _r(result.c37_110_index),
        "time_to_saturate_ms": _r(result.time_to_saturate_ms, 3),
    }


def build_ct_report(
    record: rec.SiteRecord | Mapping[str, Any],
    ct_code: str,
    *,
    burdens: Mapping[str, complex | None],
    devices_fed: Iterable[str],
    site_index: SiteIndex | None = None,
) -> dict[str, Any]:
    """design.md's CT report JSON for one CT at its tap in use.

    ``burdens``: "ground_fault" / "phase_fault" -> external burden at the CT terminals (leads and
    devices, complex Ω; None when open or unknown), from the engine's nodal solve.
    ``devices_fed``: devices this CT's current reaches; their ratio-setting and input-rating
    findings against this CT are listed with the CT's own. Raises ``KeyError`` for an unknown CT.
    Methods: taps (S4), class at the tap (S5, S6), C37.110 (S7, S8, S25), knee points (S9, S10).
    ``site_index`` (``SiteIndex(record)``) saves rebuilding the look-ups when reporting many CTs of
    one site; :func:`site_ratings` does that for a whole site.
    """
    index = site_index if site_index is not None else SiteIndex(record)
    rating = evaluate_ct(index, ct_code, burdens)
    findings = list(rating.findings)
    for device in sorted(set(devices_fed)):
        findings.extend(device_static_findings(index, device, [ct_code]))
    return _report_json(index, rating, findings)


def _report_json(index: SiteIndex, rating: CTRating, findings: list[Finding]) -> dict[str, Any]:
    ct_code = rating.code
    ct = index.ct(ct_code)
    tap = rating.tap
    acc = rating.accuracy
    curve = _curve_at_tap(ct, rating)
    ieee = iec = None
    if curve is not None:
        ieee, iec = knee_point_ieee(curve), knee_point_iec(curve)

    accuracy_json: dict[str, Any] = {
        "class": None if acc is None else acc.text,
        "voltage_at_tap_v": None,
        "standard_burden_ohm_at_tap": None,
    }
    if acc is not None and tap is not None:
        accuracy_json["voltage_at_tap_v"] = _r(
            acc.voltage_at_tap_v(tap.secondary_a, tap.turns_fraction)
        )
        accuracy_json["standard_burden_ohm_at_tap"] = _r(
            acc.standard_burden_ohm_at_tap(tap.secondary_a, tap.turns_fraction)
        )
    return {
        "site": index.code,
        "ct": ct_code,
        "tap": None if tap is None else list(tap.terminals),
        "ratio": None if tap is None else tap.ratio,
        "turns": None if tap is None else _r(tap.turns, 6),
        "winding_ohm_at_tap": _r(rating.winding_ohm_at_tap),
        "accuracy": accuracy_json,
        "knee_point_v": {
            "ieee": None if ieee is None else _r(ieee.voltage_v),
            "iec": None if iec is None else _r(iec.voltage_v),
        },
        "cases": {case: _case_json(rating.cases.get(case)) for case in CASES},
        "findings": [f.to_json() for f in findings],
    }


@dataclass(frozen=True, slots=True)
class SiteRatings:
    """Every CT report of a site (by CT code) and the site's static findings."""

    reports: dict[str, dict[str, Any]]
    findings: list[Finding]


def site_ratings(
    record: rec.SiteRecord | Mapping[str, Any],
    *,
    burdens: Mapping[str, Mapping[str, complex | None]],
    feeds: Mapping[str, set[str]],
) -> SiteRatings:
    """All CT reports and :func:`site_static_findings` of one site in one pass (each CT is
    evaluated once). ``reports[ct]`` equals ``build_ct_report(record, ct, burdens=burdens[ct],
    devices_fed=<devices whose feeds hold ct>)``; ``findings`` equals
    ``site_static_findings(record, burdens=burdens, feeds=feeds)``."""
    index = SiteIndex(record)
    fed: dict[str, list[str]] = {}
    for device, cts in feeds.items():
        for ct in cts:
            fed.setdefault(ct, []).append(device)
    reports: dict[str, dict[str, Any]] = {}
    findings: list[Finding] = []
    for ct_code in index.cts:
        rating = evaluate_ct(index, ct_code, burdens.get(ct_code))
        findings.extend(rating.findings)
        own = list(rating.findings)
        for device in sorted(set(fed.get(ct_code, ()))):
            own.extend(device_static_findings(index, device, [ct_code]))
        reports[ct_code] = _report_json(index, rating, own)
    for device_code in index.devices:
        findings.extend(device_static_findings(index, device_code, feeds.get(device_code, ())))
    return SiteRatings(reports=reports, findings=findings)


@dataclass(frozen=True, slots=True)
class OperatingPoint:
    """A required point on the excitation curve at the site's fault level.

    ``symmetrical_v`` = I_f · |Z_s| (the steady fault current into winding + burden);
    ``required_v`` = (1 + X/R) · I_f · |Z_s| (the fully offset requirement of C37.110).
    Currents are None outside the measured curve.
    """

    case: str
    symmetrical_v: float
    symmetrical_current_a: float | None
    required_v: float
    required_current_a: float | None


@dataclass(frozen=True, slots=True)
class ExcitationPlotInputs:
    """What :func:`analysis.plots.excitation_plot` draws: the curve at the tap in use, both knee
    points and the required operating points."""

    title: str
    curve_at_tap: list[list[float]]  # [[I_A, V], ...]
    knee_ieee: KneePoint | None
    knee_iec: KneePoint | None
    operating_points: list[OperatingPoint] = field(default_factory=list)


def excitation_plot_inputs(
    record: rec.SiteRecord | Mapping[str, Any],
    ct_code: str,
    *,
    burdens: Mapping[str, complex | None],
) -> ExcitationPlotInputs | None:
    """Inputs of the excitation plot of one CT; None when the CT has no usable curve."""
    index = SiteIndex(record)
    rating = evaluate_ct(index, ct_code, burdens)
    curve = _curve_at_tap(index.ct(ct_code), rating)
    if curve is None or rating.tap is None:
        return None
    points = []
    for case in CASES:
        result = rating.cases.get(case)
        if (
            result is None
            or result.secondary_fault_a is None
            or result.burden_ohm is None
            or result.winding_ohm is None
            or result.x_over_r is None
        ):
            continue
        sym = result.secondary_fault_a * abs(result.burden_ohm + result.winding_ohm)
        req = (1.0 + result.x_over_r) * sym
        points.append(
            OperatingPoint(case, sym, current_at(curve, sym), req, current_at(curve, req))
        )
    tap = rating.tap
    title = f"{index.code} {ct_code} at {tap.terminals[0]}-{tap.terminals[1]} ({tap.ratio})" + (
        "" if rating.accuracy is None else f", {rating.accuracy.text}"
    )
    return ExcitationPlotInputs(
        title=title,
        curve_at_tap=curve.points(),
        knee_ieee=knee_point_ieee(curve),
        knee_iec=knee_point_iec(curve),
        operating_points=points,
    )
