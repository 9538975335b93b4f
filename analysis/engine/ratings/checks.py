"""Static rating and setting checks of CTs and the devices they feed, as findings.

Each check is a small function of plain values (so it can be tested against outside figures)
plus a gatherer that reads a site record (``record.SiteRecord``; a site-file dict is
converted): :func:`evaluate_ct` (one CT, both fault cases) and :func:`site_static_findings`
(every CT and device of a site).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field, replace
from typing import Any

import record as rec
from analysis.engine import findings as fc
from analysis.engine.findings import Finding
from analysis.engine.ratings.saturation import SaturationCase, assess_case
from analysis.engine.ratings.site import SiteIndex
from analysis.engine.ratings.taps import Tap, winding_ohm_at_tap
from trade.accuracy import (
    IEC_METERING,
    IEC_PROTECTION,
    IEC_PX,
    IEC_TRANSIENT,
    AccuracyClass,
    effective_alf,
    parse_accuracy,
)
from trade.ratio import parse_ratio, ratio_value, ratios_equal

CASES = ("ground_fault", "phase_fault")
CASE_FAULT_KEY = {"ground_fault": "ground_fault_ka", "phase_fault": "three_phase_fault_ka"}
CASE_LABEL = {"ground_fault": "ground fault", "phase_fault": "phase fault"}


def _g(x: float | None, digits: int = 4) -> str:
    """A number for a message: ``digits`` significant figures, never in exponent form."""
    if x is None:
        return "?"
    if not math.isfinite(x):
        return f"{x:g}"
    value = float(f"{x:.{digits}g}")
    return f"{value:.0f}" if value.is_integer() else f"{value:g}"


def _tap_text(tap: Tap) -> str:
    return f"{tap.terminals[0]}-{tap.terminals[1]} ({tap.ratio})"


# --- single checks -----------------------------------------------------------------------------


def thermal_check(
    *, ct: str, max_load_a: float, tap: Tap, rating_factor: float = 1.0
) -> Finding | None:
    """``thermal_overload`` when the equipment's maximum load exceeds the tap's primary rating
    × the CT's continuous thermal rating factor (IEEE C57.13 rating factor, S1)."""
    limit_a = tap.primary_a * rating_factor
    if max_load_a <= limit_a:
        return None
    return Finding(
        code=fc.THERMAL_OVERLOAD,
        ct=ct,
        message=(
            f"{ct}: maximum load {_g(max_load_a)} A exceeds {_g(limit_a)} A, the tap "
            f"{_tap_text(tap)} rating {_g(tap.primary_a)} A × rating factor {_g(rating_factor)}"
        ),
        numbers={
            "max_load_a": max_load_a,
            "limit_a": limit_a,
            "tap_primary_a": tap.primary_a,
            "rating_factor": rating_factor,
        },
    )


def ratio_setting_check(*, device: str, setting: str, ct: str, tap: Tap) -> Finding | None:
    """``ratio_setting_mismatch`` when a device's ratio setting is not the ratio of the tap in
    use of a CT feeding it. Ratios compare as numbers: 400:5 equals 80:1."""
    if ratios_equal(setting, tap.ratio_value):
        return None
    setting_value = ratio_value(setting)
    return Finding(
        code=fc.RATIO_SETTING_MISMATCH,
        ct=ct,
        device=device,
        message=(
            f"{device}: ratio setting {setting} ({_g(setting_value)}:1) but {ct} is wired at "
            f"{tap.terminals[0]}-{tap.terminals[1]}, {tap.ratio} ({_g(tap.ratio_value)}:1); "
            "the device would read "
            f"{_g(setting_value / tap.ratio_value)} × the true primary current"
        ),
        numbers={"setting": setting_value, "tap_ratio": tap.ratio_value},
    )


def _rated_inputs(inputs: Iterable[rec.DeviceInput | Mapping[str, Any]]) -> list[tuple[str, float]]:
    out = []
    for i in inputs:
        if isinstance(i, rec.DeviceInput):
            name, rated = i.name, i.rated_a
        else:
            name, rated = str(i.get("name")), i.get("rated_a")
        if rated:
            out.append((name, float(rated)))
    return out


def input_rating_check(
    *,
    device: str,
    inputs: Iterable[rec.DeviceInput | Mapping[str, Any]],
    ct: str,
    secondary_a: float,
) -> Finding | None:
    """``input_rating_mismatch`` when the CT's secondary rating (1 A / 5 A) matches none of the
    rated currents of the device inputs it can feed (record inputs or site-file entries)."""
    rated = _rated_inputs(inputs)
    if not rated or any(abs(r - secondary_a) < 1e-9 for _, r in rated):
        return None
    names = ", ".join(f"{n} {r:g} A" for n, r in rated)
    return Finding(
        code=fc.INPUT_RATING_MISMATCH,
        ct=ct,
        device=device,
        input=rated[0][0] if len(rated) == 1 else None,
        message=(
            f"{device}: {ct} has a {secondary_a:g} A secondary but the device inputs are rated "
            f"{names}"
        ),
        numbers={"ct_secondary_a": secondary_a, "input_rated_a": [r for _, r in rated]},
    )


def accuracy_check(
    *,
    ct: str,
    accuracy: AccuracyClass,
    tap: Tap,
    burden_ohm: complex,
    case: str,
    winding_ohm: float | None = None,
) -> Finding | None:
    """``accuracy_exceeded`` when |external burden| is above the standard burden the class
    supports at the tap in use (C57.13 classes scaled by N_tap/N_full, S5, S6; IEC classes
    the rated burden S_n / I_n², scaled the same way). IEC P classes quote the effective
    accuracy limit factor ALF' for the actual burden."""
    limit = accuracy.standard_burden_ohm_at_tap(tap.secondary_a, tap.turns_fraction)
    z = abs(burden_ohm)
    if limit is None or z <= limit:
        return None
    extra = ""
    numbers: dict[str, Any] = {"burden_ohm": z, "standard_burden_ohm_at_tap": limit}
    if accuracy.standard == IEC_PROTECTION and accuracy.alf is not None:
        alf_eff = effective_alf(
            alf=accuracy.alf,
            winding_ohm=winding_ohm or 0.0,
            rated_burden_ohm=limit,
            burden_ohm=z,
        )
        numbers["alf_effective"] = alf_eff
        extra = f"; effective accuracy limit factor {_g(alf_eff, 3)} instead of {accuracy.alf:g}"
    return Finding(
        code=fc.ACCURACY_EXCEEDED,
        ct=ct,
        message=(
            f"{ct} ({CASE_LABEL.get(case, case)}): burden {_g(z)} Ω exceeds the {_g(limit)} Ω "
            f"that {accuracy.text} supports at {_tap_text(tap)}{extra}"
        ),
        numbers=numbers,
    )


def saturation_findings(*, ct: str, tap: Tap, result: SaturationCase) -> list[Finding]:
    """``saturation_risk`` where the C37.110 criterion fails (the per-unit index above 20, or
    the ALF for IEC P; the voltage form for PX), ``missing_data`` where it cannot run."""
    label = CASE_LABEL.get(result.case, result.case)
    if result.missing:
        return [
            Finding(
                code=fc.MISSING_DATA,
                ct=ct,
                message=(
                    f"{ct}: saturation check ({label}) not run: missing "
                    + ", ".join(result.missing)
                ),
                numbers={"case": result.case, "missing": list(result.missing)},
            )
        ]
    # The per-unit criterion decides for IEEE C/K/T; the voltage form, which also counts the
    # winding drop, decides for PX. For IEC P classes either one failing is a risk: their
    # per-unit index leaves out the CT's own winding, which dominates with 1 A secondaries,
    # while the voltage form compares with E_al, the accuracy limit e.m.f. (S10).
    iec_p = result.alf_effective is not None
    if result.c37_110_index is None:
        fails = result.voltage_fails
    else:
        fails = result.index_fails or (iec_p and result.voltage_fails)
    if not fails:
        return []
    parts = []
    if result.c37_110_index is not None:
        relation = ">" if result.index_fails else "≤"
        parts.append(f"C37.110 index {_g(result.c37_110_index, 3)} {relation} {result.limit:g}")
    if result.vx_required_v is not None and result.vx_available_v is not None:
        parts.append(
            f"voltage form needs {_g(result.vx_required_v)} V, has {_g(result.vx_available_v)} V"
        )
    parts.append(f"at {_tap_text(tap)}")
    parts.append(
        f"I_f {_g(result.secondary_fault_a)} A secondary ({_g(result.fault_a)} A primary), "
        f"X/R {_g(result.x_over_r)}, burden {_g(abs(result.burden_ohm or 0))} Ω"
    )
    if result.time_to_saturate_ms is not None:
        parts.append(f"saturates after about {_g(result.time_to_saturate_ms, 2)} ms")
    return [
        Finding(
            code=fc.SATURATION_RISK,
            ct=ct,
            message=f"{ct} ({label}): " + "; ".join(parts),
            numbers={
                "case": result.case,
                "c37_110_index": result.c37_110_index,
                "limit": result.limit,
                "vx_required_v": result.vx_required_v,
                "vx_available_v": result.vx_available_v,
                "time_to_saturate_ms": result.time_to_saturate_ms,
            },
        )
    ]


# --- one CT ------------------------------------------------------------------------------------


@dataclass(slots=True)
class CTRating:
    """Everything the ratings know about one CT at its tap in use."""

    code: str
    tap: Tap | None
    accuracy: AccuracyClass | None
    winding_ohm_at_tap: float | None
    cases: dict[str, SaturationCase | None] = field(default_factory=dict)
    findings: list[Finding] = field(default_factory=list)


def _float(value: Any) -> float | None:
    """A number from the document, or None when absent or not a number (validation reports
    the latter at import; the ratings then treat it as missing)."""
    if value is None or value == "" or isinstance(value, bool):
        return None
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return number if math.isfinite(number) else None


@functools.lru_cache(maxsize=4096)
def _accuracy(
    text: str, rated_burden_va: float | None, knee_v: float | None
) -> AccuracyClass | str:
    """The class parsed once per distinct (class, rated burden, knee) — the CTs of a set share
    them; the error message where it is not a class."""
    try:
        return parse_accuracy(text, rated_burden_va=rated_burden_va, knee_v=knee_v)
    except ValueError as err:
        return str(err)


def _missing(ct: str, what: str, **numbers: Any) -> Finding:
    return Finding(code=fc.MISSING_DATA, ct=ct, message=f"{ct}: {what}", numbers=numbers)


def evaluate_ct(
    index: SiteIndex, ct_code: str, burdens: Mapping[str, complex | None] | None
) -> CTRating:
    """Tap, accuracy at the tap, both fault cases and the CT's own findings (thermal, accuracy,
    saturation, missing data). ``burdens`` maps "ground_fault"/"phase_fault" to the external
    burden at the CT terminals (complex ohms), None where open or unknown."""
    ct = index.ct(ct_code)
    burdens = burdens or {}
    neutral = str(ct.phase or "").upper() == "N"
    out: list[Finding] = []
    try:
        tap = index.tap(ct)
    except ValueError as err:
        out.append(_missing(ct_code, f"ratings not computed: {err}"))
        return CTRating(ct_code, None, None, None, dict.fromkeys(CASES), out)

    accuracy: AccuracyClass | None = None
    text = ct.accuracy
    if not text:
        out.append(_missing(ct_code, "no accuracy class: accuracy and saturation checks not run"))
    else:
        parsed = _accuracy(text, _float(ct.rated_burden_va), _float(ct.knee_v))
        if isinstance(parsed, AccuracyClass):
            accuracy = parsed
        else:
            out.append(_missing(ct_code, f"accuracy class not understood: {parsed}"))
    if accuracy is not None and accuracy.standard == IEC_PX and accuracy.knee_v is None:
        out.append(_missing(ct_code, f"class {accuracy.text} without knee_v"))
    if (
        accuracy is not None
        and accuracy.standard in (IEC_PROTECTION, IEC_METERING)
        and accuracy.rated_burden_ohm(tap.secondary_a) is None
    ):
        out.append(_missing(ct_code, f"class {accuracy.text} without rated_burden_va"))
    if accuracy is not None and accuracy.standard == IEC_TRANSIENT:
        out.append(
            _missing(
                ct_code,
                f"transient class {accuracy.text}: saturation and accuracy not assessed "
                "(needs the transient dimensioning data of IEC 61869-2)",
            )
        )

    winding_full = _float(ct.winding_ohm)
    winding = None if winding_full is None else winding_ohm_at_tap(winding_full, tap)

    eq = index.equipment_of(ct)
    max_load_a = None if eq is None else _float(eq.max_load_a)
    # A neutral CT carries the unbalance of the phases, about 0 A in normal service, not the
    # equipment's load: a thermal check against the load would be a false finding, and the
    # record holds no unbalance to check it against (common practice, no source).
    if max_load_a is None and not neutral:
        out.append(_missing(ct_code, "thermal check not run: equipment has no max_load_a"))
    elif max_load_a is not None and not neutral:
        rating_factor = _float(ct.rating_factor) or 1.0
        finding = thermal_check(
            ct=ct_code, max_load_a=max_load_a, tap=tap, rating_factor=rating_factor
        )
        if finding:
            out.append(finding)

    bus = index.bus_of(ct)
    cases: dict[str, SaturationCase | None] = {}
    relaying = accuracy is not None and accuracy.is_relaying
    if accuracy is not None and winding is None and relaying:
        out.append(_missing(ct_code, "no winding_ohm: voltage form of C37.110 not computed"))
    worst_burden: tuple[float, str, complex] | None = None
    for case in CASES:
        burden = burdens.get(case)
        if case == "phase_fault" and neutral:
            cases[case] = None  # a neutral CT carries no current in a balanced phase fault
            continue
        if burden is not None and (worst_burden is None or abs(burden) > worst_burden[0]):
            worst_burden = (abs(burden), case, complex(burden))
        fault_ka = None if bus is None else _float(getattr(bus, CASE_FAULT_KEY[case]))
        x_over_r = None if bus is None else _float(bus.x_over_r)
        std = vx = limit = None
        if accuracy is not None:
            std = accuracy.standard_burden_ohm_at_tap(tap.secondary_a, tap.turns_fraction)
            vx = accuracy.saturation_emf_at_tap_v(tap.secondary_a, tap.turns_fraction, winding)
            limit = accuracy.criterion_limit()
        result = assess_case(
            case=case,
            fault_a=None if fault_ka is None else fault_ka * 1000.0,
            x_over_r=x_over_r,
            ratio_value=tap.ratio_value,
            secondary_a=tap.secondary_a,
            burden_ohm=burden,
            winding_ohm=winding,
            standard_burden_ohm=std if relaying else None,
            vx_available_v=vx if relaying else None,
            limit=limit if relaying else None,
            frequency_hz=index.frequency_hz,
        )
        if bus is None and result.missing:
            eq_code = None if eq is None else eq.code
            result = _replace_missing(result, f"bus of equipment {eq_code!r}")
        if (
            accuracy is not None
            and accuracy.standard == IEC_PROTECTION
            and accuracy.alf is not None
            and std is not None
            and burden is not None
        ):
            result = replace(
                result,
                alf_effective=effective_alf(
                    alf=accuracy.alf,
                    winding_ohm=winding or 0.0,
                    rated_burden_ohm=std,
                    burden_ohm=abs(burden),
                ),
            )
        cases[case] = result
        if relaying:
            # Metering classes state no capability at fault current: nothing to check.
            out.extend(saturation_findings(ct=ct_code, tap=tap, result=result))
    if accuracy is not None and worst_burden is not None:
        finding = accuracy_check(
            ct=ct_code,
            accuracy=accuracy,
            tap=tap,
            burden_ohm=worst_burden[2],
            case=worst_burden[1],
            winding_ohm=winding,
        )
        if finding:
            out.append(finding)
    return CTRating(ct_code, tap, accuracy, winding, cases, out)


def _replace_missing(result: SaturationCase, what: str) -> SaturationCase:
    missing = tuple(m for m in result.missing if m not in ("fault current", "X/R"))
    return replace(result, missing=(what, *missing))


# --- devices -----------------------------------------------------------------------------------


def _settings(device: rec.Device, ct: rec.CT) -> list[str]:
    """Ratio setting(s) that apply to a CT: a string, a list (any may match), or a mapping keyed
    by CT code or CT set name (for devices with several CT inputs, e.g. differential)."""
    setting = device.ratio_setting
    if setting is None or setting == "":
        return []
    if isinstance(setting, Mapping):
        chosen = setting.get(ct.code) or (setting.get(ct.set_name) if ct.set_name else None)
        return [] if chosen is None else [str(chosen)]
    if isinstance(setting, (list, tuple)):
        return [str(s) for s in setting]
    return [str(setting)]


def device_static_findings(
    index: SiteIndex, device_code: str, ct_codes: Iterable[str]
) -> list[Finding]:
    """``ratio_setting_mismatch`` and ``input_rating_mismatch`` for one device against each CT
    whose current reaches it; ``missing_data`` for a relay with no ratio setting or a setting
    that is not a ratio."""
    device = index.devices.get(device_code)
    if device is None:
        return []
    out: list[Finding] = []
    inputs = device.inputs
    reported_missing = False
    for ct_code in sorted(ct_codes):
        ct = index.cts.get(ct_code)
        if ct is None:
            continue
        try:
            tap = index.tap(ct)
        except ValueError:
            continue  # reported on the CT itself
        settings = _settings(device, ct)
        if not settings:
            if device.kind == "relay" and not reported_missing:
                out.append(
                    Finding(
                        code=fc.MISSING_DATA,
                        device=device_code,
                        ct=ct_code,
                        message=f"{device_code}: no ratio setting to check against {ct_code}",
                    )
                )
                reported_missing = True
        else:
            try:
                for s in settings:
                    parse_ratio(s)
            except ValueError as err:
                out.append(
                    Finding(
                        code=fc.MISSING_DATA,
                        device=device_code,
                        ct=ct_code,
                        message=f"{device_code}: ratio setting not understood: {err}",
                    )
                )
            else:
                if not any(ratios_equal(s, tap.ratio_value) for s in settings):
                    finding = ratio_setting_check(
                        device=device_code, setting=settings[0], ct=ct_code, tap=tap
                    )
                    if finding:
                        if len(settings) > 1:
                            extra = f" (settings {', '.join(settings)})"
                            finding = replace(finding, message=finding.message + extra)
                        out.append(finding)
        finding = input_rating_check(
            device=device_code, inputs=inputs, ct=ct_code, secondary_a=tap.secondary_a
        )
        if finding:
            out.append(finding)
    return out


def site_static_findings(
    record: rec.SiteRecord | Mapping[str, Any],
    *,
    burdens: Mapping[str, Mapping[str, complex | None]],
    feeds: Mapping[str, set[str]],
) -> list[Finding]:
    """Every static finding of a site: per CT (thermal_overload, accuracy_exceeded,
    saturation_risk, missing_data) and per device (ratio_setting_mismatch,
    input_rating_mismatch, missing_data).

    ``burdens``: CT code -> {"ground_fault": Z, "phase_fault": Z} external burdens (complex Ω,
    None when open or unknown); a CT absent from it is reported as missing its burden.
    ``feeds``: device code -> CT codes whose current reaches the device.
    """
    index = SiteIndex(record)
    out: list[Finding] = []
    for ct_code in index.cts:
        out.extend(evaluate_ct(index, ct_code, burdens.get(ct_code)).findings)
    for device_code in index.devices:
        out.extend(device_static_findings(index, device_code, feeds.get(device_code, ())))
    return out
