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

import numpy as np

import record as rec
from analysis.engine import findings as fc
from analysis.engine.findings import Finding
from analysis.engine.ratings.columns import CASES as CASES
from analysis.engine.ratings.columns import Burdens, CTColumns, ct_columns
from analysis.engine.ratings.rounding import rounded_text as _g
from analysis.engine.ratings.rounding import text_columns
from analysis.engine.ratings.saturation import SaturationCase
from analysis.engine.ratings.site import SiteIndex
from analysis.engine.ratings.taps import Tap
from trade.accuracy import (
    IEC_METERING,
    IEC_PROTECTION,
    IEC_PX,
    IEC_TRANSIENT,
    AccuracyClass,
    effective_alf,
)
from trade.ratio import parse_ratio, ratio_value, ratios_equal

CASE_LABEL = {"ground_fault": "ground fault", "phase_fault": "phase fault"}


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
    return _input_rating_finding(device, _rated_inputs(inputs), ct, secondary_a)


def _input_rating_finding(
    device: str, rated: list[tuple[str, float]], ct: str, secondary_a: float
) -> Finding | None:
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
    if result.missing:
        return [_saturation_missing(ct, result.case, result.missing)]
    iec_p = result.alf_effective is not None
    index = result.c37_110_index
    if not _fails(index is not None, result.index_fails, result.voltage_fails, iec_p):
        return []
    vx_required, vx_available = result.vx_required_v, result.vx_available_v
    time_ms = result.time_to_saturate_ms
    texts = (
        None if index is None else _g(index, 3),
        None if vx_required is None else _g(vx_required),
        None if vx_available is None else _g(vx_available),
        _g(result.secondary_fault_a),
        _g(result.fault_a),
        _g(result.x_over_r),
        _g(abs(result.burden_ohm or 0)),
        None if time_ms is None else _g(time_ms, 2),
    )
    numbers = {
        "case": result.case,
        "c37_110_index": index,
        "limit": result.limit,
        "vx_required_v": vx_required,
        "vx_available_v": vx_available,
        "time_to_saturate_ms": time_ms,
    }
    return [_saturation_risk(ct, _tap_text(tap), result.index_fails, texts, numbers)]


def _fails(has_index: Any, index_fails: Any, voltage_fails: Any, iec_p: Any) -> Any:
    """Whether a case is a saturation risk (one value or a column alike). The per-unit
    criterion decides for IEEE C/K/T; the voltage form, which also counts the winding drop,
    decides for PX. For IEC P classes either one failing is a risk: their per-unit index leaves
    out the CT's own winding, which dominates with 1 A secondaries, while the voltage form
    compares with E_al, the accuracy limit e.m.f. (S10)."""
    if isinstance(has_index, np.ndarray):
        return np.where(has_index, index_fails | (iec_p & voltage_fails), voltage_fails)
    return (index_fails or (iec_p and voltage_fails)) if has_index else voltage_fails


def _saturation_missing(ct: str, case: str, missing: tuple[str, ...]) -> Finding:
    label = CASE_LABEL.get(case, case)
    return Finding(
        code=fc.MISSING_DATA,
        ct=ct,
        message=f"{ct}: saturation check ({label}) not run: missing " + ", ".join(missing),
        numbers={"case": case, "missing": list(missing)},
    )


def _saturation_risk(
    ct: str,
    tap_text: str,
    index_fails: bool,
    texts: tuple[str | None, ...],
    numbers: dict[str, Any],
) -> Finding:
    """The ``saturation_risk`` finding; ``texts`` are the figures it quotes (index, V_x needed,
    V_x available, I_f secondary, I_f primary, X/R, |Z_b|, time to saturate), None where
    absent."""
    index, vx_required, vx_available, i_sec, i_pri, x_over_r, burden, time_ms = texts
    case = numbers["case"]
    parts = []
    if index is not None:
        relation = ">" if index_fails else "≤"
        parts.append(f"C37.110 index {index} {relation} {numbers['limit']:g}")
    if vx_required is not None and vx_available is not None:
        parts.append(f"voltage form needs {vx_required} V, has {vx_available} V")
    parts.append(f"at {tap_text}")
    parts.append(f"I_f {i_sec} A secondary ({i_pri} A primary), X/R {x_over_r}, burden {burden} Ω")
    if time_ms is not None:
        parts.append(f"saturates after about {time_ms} ms")
    return Finding(
        code=fc.SATURATION_RISK,
        ct=ct,
        message=f"{ct} ({CASE_LABEL.get(case, case)}): " + "; ".join(parts),
        numbers=numbers,
    )


# --- CTs ---------------------------------------------------------------------------------------


@dataclass(slots=True)
class CTRating:
    """Everything the ratings know about one CT at its tap in use."""

    code: str
    tap: Tap | None
    accuracy: AccuracyClass | None
    winding_ohm_at_tap: float | None
    cases: dict[str, SaturationCase | None] = field(default_factory=dict)
    findings: list[Finding] = field(default_factory=list)


def _missing(ct: str, what: str, **numbers: Any) -> Finding:
    return Finding(code=fc.MISSING_DATA, ct=ct, message=f"{ct}: {what}", numbers=numbers)


def _class_notes(
    has_text: bool, accuracy: AccuracyClass | None, error: str | None, secondary_a: float
) -> tuple[str, ...]:
    """What a CT's accuracy class leaves unassessed, as missing-data messages."""
    notes = []
    if not has_text:
        notes.append("no accuracy class: accuracy and saturation checks not run")
    elif error is not None:
        notes.append(f"accuracy class not understood: {error}")
    if accuracy is not None and accuracy.standard == IEC_PX and accuracy.knee_v is None:
        notes.append(f"class {accuracy.text} without knee_v")
    if (
        accuracy is not None
        and accuracy.standard in (IEC_PROTECTION, IEC_METERING)
        and accuracy.rated_burden_ohm(secondary_a) is None
    ):
        notes.append(f"class {accuracy.text} without rated_burden_va")
    if accuracy is not None and accuracy.standard == IEC_TRANSIENT:
        notes.append(
            f"transient class {accuracy.text}: saturation and accuracy not assessed "
            "(needs the transient dimensioning data of IEC 61869-2)"
        )
    return tuple(notes)


def ct_findings(columns: CTColumns) -> list[list[Finding]]:
    """Each CT's own findings (thermal, accuracy, saturation, missing data), one list per row,
    in the order a planner reads them: what is missing about the CT, thermal, the voltage
    form's winding, each fault case, accuracy. Checks run on the columns at once; a finding is
    written only for the rows that have one."""
    n = len(columns)
    out: list[list[Finding]] = [[] for _ in range(n)]
    codes, taps = columns.codes, columns.taps
    has_tap = np.array([t is not None for t in taps], dtype=np.bool_)
    neutral = np.array(columns.neutral, dtype=np.bool_)

    for i, error in enumerate(columns.tap_errors):
        if error is not None:
            out[i].append(_missing(codes[i], f"ratings not computed: {error}"))
    notes_of: dict[tuple[Any, ...], tuple[str, ...]] = {}  # the CTs of a set share them
    for i, (ct, tap, acc, error) in enumerate(
        zip(columns.cts, taps, columns.accuracy, columns.accuracy_errors, strict=True)
    ):
        if tap is None:
            continue
        key = (bool(ct.accuracy), id(acc), error, tap.secondary_a)
        notes = notes_of.get(key)
        if notes is None:
            notes = notes_of[key] = _class_notes(key[0], acc, error, tap.secondary_a)
        for note in notes:
            out[i].append(_missing(codes[i], note))

    # A neutral CT carries the unbalance of the phases, about 0 A in normal service, not the
    # equipment's load: a thermal check against the load would be a false finding, and the
    # record holds no unbalance to check it against (common practice, no source).
    load, factor = columns.max_load_a, columns.rating_factor
    no_load = np.isnan(load)
    with np.errstate(invalid="ignore"):
        over = ~no_load & (load > columns.primary_a * factor)
    for i in np.flatnonzero(has_tap & ~neutral & (no_load | over)).tolist():
        if no_load[i]:
            out[i].append(_missing(codes[i], "thermal check not run: equipment has no max_load_a"))
        else:
            finding = thermal_check(
                ct=codes[i],
                max_load_a=float(load[i]),
                tap=taps[i],  # type: ignore[arg-type]
                rating_factor=float(factor[i]),
            )
            if finding:
                out[i].append(finding)

    has_class = np.array([a is not None for a in columns.accuracy], dtype=np.bool_)
    no_winding = np.isnan(columns.winding_ohm)
    for i in np.flatnonzero(has_class & no_winding & columns.relaying).tolist():
        out[i].append(_missing(codes[i], "no winding_ohm: voltage form of C37.110 not computed"))

    failing: list[tuple[str, np.ndarray, np.ndarray]] = []
    figures: list[tuple[np.ndarray, int]] = []
    for case in CASES:
        c = columns.cases[case]
        iec_p = np.array([a is not None for a in columns.alf_effective[case]], dtype=np.bool_)
        missing = np.array([bool(m) for m in c.missing], dtype=np.bool_)
        fails = _fails(c.has_index, c.index_fails, c.voltage_fails, iec_p)
        in_case = columns.in_case[case] & columns.relaying
        rows = np.flatnonzero(in_case & ~missing & fails)
        failing.append((case, np.flatnonzero(in_case & missing), rows))
        figures += [
            (np.where(c.has_index[rows], c.c37_110_index[rows], math.nan), 3),
            (np.where(c.has_vx_required[rows], c.vx_required_v[rows], math.nan), 4),
            (c.vx_available_v[rows], 4),
            (c.secondary_fault_a[rows], 4),
            (c.fault_a[rows], 4),
            (c.x_over_r[rows], 4),
            (c.burden_abs_ohm[rows], 4),
            (c.time_to_saturate_ms[rows], 2),
        ]
    # The figures the failing rows quote, rounded and written in one pass.
    texts = text_columns(figures)
    tap_texts: dict[Tap, str] = {}
    for n, (case, missing_rows, rows) in enumerate(failing):
        c = columns.cases[case]
        for i in missing_rows.tolist():
            out[i].append(_saturation_missing(codes[i], case, c.missing[i]))
        has_vx = c.has_vx_required[rows] & ~np.isnan(c.vx_available_v[rows])
        values = zip(
            rows.tolist(),
            _optional(c.c37_110_index[rows], c.has_index[rows]),
            c.index_fails[rows].tolist(),
            _optional(c.vx_required_v[rows], c.has_vx_required[rows]),
            _optional(c.vx_available_v[rows]),
            _optional(c.limit[rows]),
            _optional(c.time_to_saturate_ms[rows]),
            has_vx.tolist(),
            *texts[8 * n : 8 * n + 8],
            strict=True,
        )
        for i, idx, idx_fails, req, avail, limit, time_ms, vx_ok, *t in values:
            tap = taps[i]
            tap_text = tap_texts.get(tap)
            if tap_text is None:
                tap_text = tap_texts[tap] = _tap_text(tap)
            out[i].append(
                _saturation_risk(
                    codes[i],
                    tap_text,
                    idx_fails,
                    (
                        None if idx is None else t[0],
                        t[1] if vx_ok else None,
                        t[2] if vx_ok else None,
                        t[3],
                        t[4],
                        t[5],
                        t[6],
                        None if time_ms is None else t[7],
                    ),
                    {
                        "case": case,
                        "c37_110_index": idx,
                        "limit": limit,
                        "vx_required_v": req,
                        "vx_available_v": avail,
                        "time_to_saturate_ms": time_ms,
                    },
                )
            )

    # accuracy_exceeded on the larger burden of the two cases (the ground-fault one on a tie).
    gf, pf = columns.cases["ground_fault"], columns.cases["phase_fault"]
    gf_on = columns.in_case["ground_fault"] & gf.has_burden
    pf_on = columns.in_case["phase_fault"] & pf.has_burden
    take_pf = pf_on & (~gf_on | (pf.burden_abs_ohm > gf.burden_abs_ohm))
    worst = np.where(take_pf, pf.burden_abs_ohm, gf.burden_abs_ohm)
    std = columns.standard_burden_ohm
    with np.errstate(invalid="ignore"):
        exceeded = has_class & (gf_on | pf_on) & ~np.isnan(std) & ~(worst <= std)
    for i in np.flatnonzero(exceeded).tolist():
        c = pf if take_pf[i] else gf
        finding = accuracy_check(
            ct=codes[i],
            accuracy=columns.accuracy[i],  # type: ignore[arg-type]
            tap=taps[i],  # type: ignore[arg-type]
            burden_ohm=complex(float(c.burden_r_ohm[i]), float(c.burden_x_ohm[i])),
            case=c.case,
            winding_ohm=_value(columns.winding_ohm, i),
        )
        if finding:
            out[i].append(finding)
    return out


def _value(column: np.ndarray, i: int) -> float | None:
    v = float(column[i])
    return None if v != v else v


def _optional(column: np.ndarray, present: np.ndarray | None = None) -> list[float | None]:
    """A column as Python numbers, None where absent (NaN, or not ``present``)."""
    values: list[float] = column.tolist()
    flags: list[bool] = (~np.isnan(column) if present is None else present).tolist()
    return [v if f else None for v, f in zip(values, flags, strict=True)]


def ct_rating(columns: CTColumns, i: int, findings: list[Finding]) -> CTRating:
    """The :class:`CTRating` of row ``i`` of the columns."""
    tap = columns.taps[i]
    if tap is None:
        return CTRating(columns.codes[i], None, None, None, dict.fromkeys(CASES), findings)
    cases: dict[str, SaturationCase | None] = {}
    for case in CASES:
        on = bool(columns.in_case[case][i])
        cases[case] = columns.cases[case].row(i, columns.alf_effective[case][i]) if on else None
    return CTRating(
        columns.codes[i],
        tap,
        columns.accuracy[i],
        _value(columns.winding_ohm, i),
        cases,
        findings,
    )


def evaluate_ct(index: SiteIndex, ct_code: str, burdens: Burdens | None) -> CTRating:
    """Tap, accuracy at the tap, both fault cases and the CT's own findings (thermal, accuracy,
    saturation, missing data). ``burdens`` maps "ground_fault"/"phase_fault" to the external
    burden at the CT terminals (complex ohms), None where open or unknown."""
    columns = ct_columns(index, [ct_code], {ct_code: burdens})
    return ct_rating(columns, 0, ct_findings(columns)[0])


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


@functools.lru_cache(maxsize=4096)
def _setting_verdict(settings: tuple[str, ...], tap_ratio: float) -> str | bool:
    """True when one of the settings is the tap's ratio, False when none is, and the parse
    error of the first setting that is no ratio."""
    try:
        for s in settings:
            parse_ratio(s)
    except ValueError as err:
        return str(err)
    return any(ratios_equal(s, tap_ratio) for s in settings)


@dataclass(frozen=True, slots=True)
class _DeviceCT:
    """A device's findings against one CT: the missing-setting finding (a relay reports it
    once over all its CTs) and the others."""

    no_setting: Finding | None
    others: tuple[Finding, ...]


_CLEAN = _DeviceCT(None, ())


class _DeviceChecks:
    """The device findings of a site, each (device, CT) pair checked once."""

    __slots__ = ("_clean", "_inputs_ok", "_pairs", "_settings", "index")

    def __init__(self, index: SiteIndex) -> None:
        self.index = index
        self._pairs: dict[tuple[str, str], _DeviceCT | None] = {}
        # Per device: its settings when they are the same for every CT (None: by CT).
        self._settings: dict[str, tuple[str, ...] | None] = {}
        self._inputs_ok: dict[tuple[str, float], bool] = {}
        self._clean: set[tuple[str, int] | None] = set()

    def pair(self, device: rec.Device, ct_code: str) -> _DeviceCT | None:
        """None when the CT is unknown or has no tap (reported on the CT itself)."""
        key = (device.code, ct_code)
        if key in self._pairs:
            return self._pairs[key]
        self._pairs[key] = hit = self._check(device, ct_code)
        return hit

    def _settings_for(self, device: rec.Device, ct: rec.CT) -> tuple[str, ...]:
        code = device.code
        if code in self._settings:
            shared = self._settings[code]
        else:
            by_ct = isinstance(device.ratio_setting, Mapping)
            shared = self._settings[code] = None if by_ct else tuple(_settings(device, ct))
        return tuple(_settings(device, ct)) if shared is None else shared

    def _check(self, device: rec.Device, ct_code: str) -> _DeviceCT | None:
        ct = self.index.cts.get(ct_code)
        if ct is None:
            return None
        try:
            tap = self.index.tap(ct)
        except ValueError:
            return None
        device_code = device.code
        settings = self._settings_for(device, ct)
        # A device whose settings are the same for every CT finds nothing against one CT of a
        # tap exactly when it found nothing against another of that tap (a set's CTs).
        clean_key = (device_code, id(tap)) if self._settings[device_code] is not None else None
        if clean_key in self._clean:
            return _CLEAN
        no_setting = None
        others: list[Finding] = []
        if not settings:
            if device.kind == "relay":
                no_setting = Finding(
                    code=fc.MISSING_DATA,
                    device=device_code,
                    ct=ct_code,
                    message=f"{device_code}: no ratio setting to check against {ct_code}",
                )
        else:
            verdict = _setting_verdict(settings, tap.ratio_value)
            if isinstance(verdict, str):
                others.append(
                    Finding(
                        code=fc.MISSING_DATA,
                        device=device_code,
                        ct=ct_code,
                        message=f"{device_code}: ratio setting not understood: {verdict}",
                    )
                )
            elif not verdict:
                finding = ratio_setting_check(
                    device=device_code, setting=settings[0], ct=ct_code, tap=tap
                )
                if finding:
                    if len(settings) > 1:
                        extra = f" (settings {', '.join(settings)})"
                        finding = replace(finding, message=finding.message + extra)
                    others.append(finding)
        key = (device_code, tap.secondary_a)
        inputs_ok = self._inputs_ok.get(key)
        if inputs_ok is None:
            rated = _rated_inputs(device.inputs)
            inputs_ok = self._inputs_ok[key] = (
                _input_rating_finding(device_code, rated, ct_code, tap.secondary_a) is None
            )
        if not inputs_ok:
            finding = _input_rating_finding(
                device_code, _rated_inputs(device.inputs), ct_code, tap.secondary_a
            )
            if finding:
                others.append(finding)
        if no_setting is None and not others:
            if clean_key is not None:
                self._clean.add(clean_key)
            return _CLEAN
        return _DeviceCT(no_setting, tuple(others))

    def for_site(
        self, feeds: Mapping[str, Iterable[str]]
    ) -> tuple[list[Finding], dict[str, list[Finding]]]:
        """Every device's findings in one pass: the site's list (devices in record order, as
        :meth:`for_device`) and each CT's (as :meth:`for_ct`; CTs without any left out)."""
        site: list[Finding] = []
        by_ct: dict[str, list[tuple[str, _DeviceCT]]] = {}
        for device_code, device in self.index.devices.items():
            reported_missing = False
            for ct_code in sorted(feeds.get(device_code, ())):  # a set: each CT once
                pair = self._check(device, ct_code)
                if pair is None or pair is _CLEAN:
                    continue
                if pair.no_setting is not None and not reported_missing:
                    site.append(pair.no_setting)
                    reported_missing = True
                site.extend(pair.others)
                by_ct.setdefault(ct_code, []).append((device_code, pair))
        per_ct: dict[str, list[Finding]] = {}
        for ct_code, pairs in by_ct.items():
            out: list[Finding] = []
            for _, pair in sorted(pairs, key=lambda p: p[0]):
                if pair.no_setting is not None:
                    out.append(pair.no_setting)
                out.extend(pair.others)
            per_ct[ct_code] = out
        return site, per_ct

    def for_device(self, device_code: str, ct_codes: Iterable[str]) -> list[Finding]:
        """:func:`device_static_findings`."""
        device = self.index.devices.get(device_code)
        if device is None:
            return []
        out: list[Finding] = []
        reported_missing = False
        for ct_code in sorted(ct_codes):
            pair = self.pair(device, ct_code)
            if pair is None:
                continue
            if pair.no_setting is not None and not reported_missing:
                out.append(pair.no_setting)
                reported_missing = True
            out.extend(pair.others)
        return out

    def for_ct(self, ct_code: str, devices: Iterable[str]) -> list[Finding]:
        """The findings of each device (sorted) against one CT, as the CT report lists them."""
        out: list[Finding] = []
        for device_code in sorted(set(devices)):
            device = self.index.devices.get(device_code)
            pair = None if device is None else self.pair(device, ct_code)
            if pair is not None:
                if pair.no_setting is not None:
                    out.append(pair.no_setting)
                out.extend(pair.others)
        return out


def device_static_findings(
    index: SiteIndex, device_code: str, ct_codes: Iterable[str]
) -> list[Finding]:
    """``ratio_setting_mismatch`` and ``input_rating_mismatch`` for one device against each CT
    whose current reaches it; ``missing_data`` for a relay with no ratio setting (once) or a
    setting that is not a ratio."""
    return _DeviceChecks(index).for_device(device_code, ct_codes)


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
    for own in ct_findings(ct_columns(index, index.cts, burdens)):
        out.extend(own)
    devices = _DeviceChecks(index)
    for device_code in index.devices:
        out.extend(devices.for_device(device_code, feeds.get(device_code, ())))
    return out
