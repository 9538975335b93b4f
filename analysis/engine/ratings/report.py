"""The CT report: design.md's "CT report JSON", from a site record and the engine's burdens.

The site is a ``record.SiteRecord``; a ``loopkeep.site/1`` dict is converted
(``record.record_from_document``)."""

from __future__ import annotations

import functools
import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

import record as rec
from analysis.engine.findings import Finding
from analysis.engine.ratings.checks import (
    CASES,
    _DeviceChecks,
    ct_findings,
    evaluate_ct,
)
from analysis.engine.ratings.columns import CTColumns, ct_columns
from analysis.engine.ratings.excitation import (
    ExcitationCurve,
    KneePoint,
    current_at,
    excitation_curve,
    knee_point_iec,
    knee_point_ieee,
    knee_points_iec,
    scale_to_tap,
)
from analysis.engine.ratings.rounding import Column, Rounded, rounded_columns
from analysis.engine.ratings.saturation import Floats
from analysis.engine.ratings.site import SiteIndex
from analysis.engine.ratings.taps import Tap

SIGNIFICANT_DIGITS = 4


def _curve_at_tap(ct: rec.CT, tap: Tap | None) -> ExcitationCurve | None:
    points = ct.excitation
    if not points or tap is None:
        return None
    return _scaled_curve(points, tap.turns_fraction)


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


def _knee_voltages(columns: CTColumns) -> tuple[Floats, Floats]:
    """IEEE and IEC knee-point e.m.f. of each CT's curve at its tap (NaN without one), each
    distinct curve worked out once, the IEC searches of a site's curves in one batch."""
    ieee = np.full(len(columns), math.nan)
    iec = np.full(len(columns), math.nan)
    rows: list[int] = []
    curves: list[ExcitationCurve] = []
    for i, ct in enumerate(columns.cts):
        if ct.excitation:
            curve = _curve_at_tap(ct, columns.taps[i])
            if curve is not None:
                rows.append(i)
                curves.append(curve)
    for i, curve, k_iec in zip(rows, curves, knee_points_iec(curves), strict=True):
        k_ieee = knee_point_ieee(curve)
        if k_ieee is not None:
            ieee[i] = k_ieee.voltage_v
        if k_iec is not None:
            iec[i] = k_iec.voltage_v
    return ieee, iec


def _no_case() -> dict[str, Any]:
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


def _case_figures(columns: CTColumns, case: str) -> list[Column]:
    """The figures of a case's JSON, each column with its significant digits."""
    c = columns.cases[case]
    # Solver round-off (1e-16 Ω of reactance in a resistive loop) is not a value to show.
    eps = 1e-9 * np.maximum(c.burden_abs_ohm, 1e-3)
    r = np.where(np.abs(c.burden_r_ohm) < eps, 0.0, c.burden_r_ohm)
    x = np.where(np.abs(c.burden_x_ohm) < eps, 0.0, c.burden_x_ohm)
    return [
        (r, SIGNIFICANT_DIGITS),
        (x, SIGNIFICANT_DIGITS),
        (np.hypot(r, x), SIGNIFICANT_DIGITS),
        (c.fault_a, 6),
        (c.secondary_fault_a, SIGNIFICANT_DIGITS),
        (c.x_over_r, SIGNIFICANT_DIGITS),
        (np.where(c.has_vx_required, c.vx_required_v, math.nan), SIGNIFICANT_DIGITS),
        (c.vx_available_v, SIGNIFICANT_DIGITS),
        (np.where(c.has_index, c.c37_110_index, math.nan), SIGNIFICANT_DIGITS),
        (c.time_to_saturate_ms, 3),
    ]


def _case_rows(
    columns: CTColumns, case: str, figures: list[list[Rounded]]
) -> list[dict[str, Any] | None]:
    """The case JSON of each row (None where the CT has no such case) from its rounded
    figures (:func:`_case_figures`)."""
    c = columns.cases[case]
    return [
        {
            "burden_ohm": {"r": r, "x": x, "z": z} if has_burden else None,
            "fault_a": fault,
            "secondary_fault_a": sf,
            "x_over_r": xr,
            "vx_required_v": req,
            "vx_available_v": avail,
            "c37_110_index": index,
            "time_to_saturate_ms": time,
        }
        if on
        else None
        for on, has_burden, r, x, z, fault, sf, xr, req, avail, index, time in zip(
            columns.in_case[case].tolist(), c.has_burden.tolist(), *figures, strict=True
        )
    ]


def reports_json(columns: CTColumns, findings: list[list[Finding]]) -> list[dict[str, Any]]:
    """design.md's CT report JSON of each row, with that row's findings; the figures rounded
    to significant digits for people, all columns in one pass."""
    site = columns.index.code
    ieee, iec = _knee_voltages(columns)
    has_class = np.array([a is not None for a in columns.accuracy], dtype=np.bool_)
    figures: list[Column] = [
        (columns.turns, 6),
        (columns.winding_ohm, SIGNIFICANT_DIGITS),
        (np.where(has_class, columns.voltage_at_tap_v, math.nan), SIGNIFICANT_DIGITS),
        (np.where(has_class, columns.standard_burden_ohm, math.nan), SIGNIFICANT_DIGITS),
        (ieee, SIGNIFICANT_DIGITS),
        (iec, SIGNIFICANT_DIGITS),
    ]
    for case in CASES:
        figures += _case_figures(columns, case)
    rounded = rounded_columns(figures)
    ground, phase = (
        _case_rows(columns, case, rounded[6 + 10 * n : 16 + 10 * n]) for n, case in enumerate(CASES)
    )
    ratios: dict[int, str] = {}  # by tap (the CTs of a set share the Tap)
    for tap in columns.taps:
        if tap is not None and id(tap) not in ratios:
            ratios[id(tap)] = tap.ratio
    return [
        {
            "site": site,
            "ct": code,
            "tap": None if tap is None else list(tap.terminals),
            "ratio": None if tap is None else ratios[id(tap)],
            "turns": turns,
            "winding_ohm_at_tap": winding,
            "accuracy": {
                "class": None if acc is None else acc.text,
                "voltage_at_tap_v": volts,
                "standard_burden_ohm_at_tap": std,
            },
            "knee_point_v": {"ieee": k_ieee, "iec": k_iec},
            "cases": {"ground_fault": gf or _no_case(), "phase_fault": pf or _no_case()},
            "findings": [f.to_json() for f in own],
        }
        for code, tap, acc, turns, winding, volts, std, k_ieee, k_iec, gf, pf, own in zip(
            columns.codes,
            columns.taps,
            columns.accuracy,
            *rounded[:6],
            ground,
            phase,
            findings,
            strict=True,
        )
    ]


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
    columns = ct_columns(index, [ct_code], {ct_code: burdens})
    findings = ct_findings(columns)[0]
    findings.extend(_DeviceChecks(index).for_ct(ct_code, devices_fed))
    return reports_json(columns, [findings])[0]


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
    """All CT reports and :func:`site_static_findings` of one site in one pass: the CTs rated
    as columns (:func:`analysis.engine.ratings.columns.ct_columns`), each device checked once
    against each CT it is fed by. ``reports[ct]`` equals ``build_ct_report(record, ct,
    burdens=burdens[ct], devices_fed=<devices whose feeds hold ct>)``; ``findings`` equals
    ``site_static_findings(record, burdens=burdens, feeds=feeds)``."""
    index = SiteIndex(record)
    columns = ct_columns(index, index.cts, burdens)
    own = ct_findings(columns)
    device_findings, fed = _DeviceChecks(index).for_site(feeds)
    findings: list[Finding] = [f for row in own for f in row]
    findings += device_findings
    rows = [
        [*row, *fed[code]] if code in fed else row
        for code, row in zip(columns.codes, own, strict=True)
    ]
    reports = dict(zip(columns.codes, reports_json(columns, rows), strict=True))
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
    curve = _curve_at_tap(index.ct(ct_code), rating.tap)
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
