"""CT saturation at the site's fault level: IEEE C37.110 criteria and time to saturate.

Per-unit criterion (IEEE C37.110, as taught in S7 and implemented by electricpy, S8)::

    (1 + X/R) · I_F · Z_B ≤ 20

I_F is the maximum fault current in per unit of the tap's rated current, Z_B the external burden
(leads and devices, not the CT winding) in per unit of the standard burden at the tap in use. For
IEC P classes the same index is compared with the class's accuracy limit factor instead of 20
(the class guarantees its error up to ALF × I_n, as C-classes do up to 20 × I_n).

Voltage form (C37.110 practice, from memory): the saturation e.m.f. V_x must reach
``(1 + X/R) · I_f · |Z_s|`` with I_f in secondary amperes and Z_s = R_ct + leads + devices.

Time to saturate (C37.110 eq. 18/19 as corrected by Cor 1-2010, S25; the form below is derived
here from the flux of an ideal CT and agrees with reference.md's from-memory eq. 18 and with
electricpy's ``ct_timetosat`` "Vsat1" curve for a resistive burden). With a fully offset fault
current i(t) = √2 I_f (e^(-t/T1) - cos ωt), T1 = (X/R)/ω, no remanence and a secondary time
constant much longer than T1, the core flux through burden R_s + jX_s, in units of the
symmetrical flux peak, has the envelope

    f(t) = 1 + a (1 - e^(-t/T1)) + b e^(-t/T1),  a = (X/R) R_s/|Z_s|,  b = X_s/|Z_s|

and the CT saturates when f(t) reaches K_s = V_x / (I_f |Z_s|)::

    t_s = -T1 · ln((1 + a - K_s) / (a - b))

For a resistive burden (b = 0, a = X/R) this is t_s = -(X/R)/ω · ln(1 - (K_s - 1)/(X/R)).
No saturation when K_s ≥ 1 + a; t_s = 0 when K_s ≤ 1 + b (saturates in the first cycle).

Every formula works on one value or on a column (numpy, one row per CT): :func:`assess_cases`
assesses a fault case for all CTs of a site at once, :func:`assess_case` is its one-CT form.
Magnitudes of complex burdens are taken with ``hypot``, as Python's ``abs`` does (numpy's
``abs`` of a complex array may differ in the last bit).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TypeVar

import numpy as np
import numpy.typing as npt

Floats = npt.NDArray[np.float64]
Flags = npt.NDArray[np.bool_]
# The formulas below take one value or a column of values (one per CT) alike.
F = TypeVar("F", float, Floats)

DEFAULT_FREQUENCY_HZ = 60.0
C37_110_LIMIT = 20.0


def c37_110_index(*, x_over_r: F, fault_pu: F, burden_pu: F) -> F:
    """IEEE C37.110 index (1 + X/R) · I_F · Z_B, both in per unit (S7, S8)."""
    return (1.0 + x_over_r) * fault_pu * burden_pu


def saturation_index(
    *,
    x_over_r: float,
    secondary_fault_a: float,
    secondary_a: float,
    burden_ohm: float | complex,
    standard_burden_ohm: float,
) -> float:
    """C37.110 index from physical values: I_F = I_f / I_n, Z_B = |Z_b| / Z_std (at the tap)."""
    if standard_burden_ohm <= 0:
        raise ValueError("standard burden must be positive")
    return c37_110_index(
        x_over_r=x_over_r,
        fault_pu=secondary_fault_a / secondary_a,
        burden_pu=abs(burden_ohm) / standard_burden_ohm,
    )


def passes_c37_110(index: float, limit: float = C37_110_LIMIT) -> bool:
    """The criterion holds at equality: index ≤ limit (C37.110; S7)."""
    return index <= limit


def _offset_emf(x_over_r: F, secondary_fault_a: F, z_abs: F) -> F:
    """(1 + X/R) · I_f · |Z|: the e.m.f. of a fully offset fault current into |Z|."""
    return (1.0 + x_over_r) * secondary_fault_a * z_abs


def required_class_voltage_v(
    *, x_over_r: float, secondary_fault_a: float, burden_ohm: float | complex
) -> float:
    """Class voltage (at the tap) for which the C37.110 index is exactly 20:
    (1 + X/R) · I_f · |Z_b| with the external burden only. The quantity electricpy's
    ``ct_cclass`` returns (S8)."""
    return _offset_emf(x_over_r, secondary_fault_a, abs(burden_ohm))


def required_saturation_emf_v(
    *, x_over_r: float, secondary_fault_a: float, total_burden_ohm: float | complex
) -> float:
    """Voltage form: V_x needed to carry the fully offset fault without saturating,
    (1 + X/R) · I_f · |Z_s|, Z_s including the CT winding (C37.110 practice, from memory)."""
    return _offset_emf(x_over_r, secondary_fault_a, abs(total_burden_ohm))


def time_to_saturate_s(
    *,
    x_over_r: float,
    saturation_emf_v: float,
    secondary_fault_a: float,
    total_burden_ohm: float | complex,
    frequency_hz: float = DEFAULT_FREQUENCY_HZ,
) -> float | None:
    """Time from fault inception to saturation, seconds; None when the CT does not saturate.

    Flux-envelope method of the module docstring (C37.110 eq. 18/19 as corrected, S25); the
    one-value form of :func:`times_to_saturate_s`.
    """
    z = complex(total_burden_ohm)
    (t,) = times_to_saturate_s(
        x_over_r=np.array([float(x_over_r)]),
        saturation_emf_v=np.array([float(saturation_emf_v)]),
        secondary_fault_a=np.array([float(secondary_fault_a)]),
        total_r_ohm=np.array([z.real]),
        total_x_ohm=np.array([z.imag]),
        frequency_hz=frequency_hz,
    ).tolist()
    return None if math.isnan(t) else float(t)


def times_to_saturate_s(
    *,
    x_over_r: Floats,
    saturation_emf_v: Floats,
    secondary_fault_a: Floats,
    total_r_ohm: Floats,
    total_x_ohm: Floats,
    frequency_hz: float = DEFAULT_FREQUENCY_HZ,
) -> Floats:
    """:func:`time_to_saturate_s` of a column of CTs (total burden R + jX), NaN where a CT
    does not saturate. The logarithm is ``math.log``, one value at a time, for the rows that
    need it."""
    z_abs = np.hypot(total_r_ohm, total_x_ohm)
    out = np.full(len(z_abs), math.nan)
    live = (secondary_fault_a > 0) & (z_abs != 0)
    if not live.any():
        return out
    omega = 2.0 * math.pi * frequency_hz
    with np.errstate(all="ignore"):  # rows outside ``live`` are computed and dropped
        t1 = x_over_r / omega
        ks = saturation_emf_v / (secondary_fault_a * z_abs)
        a = x_over_r * total_r_ohm / z_abs
        b = np.where(total_x_ohm > 0, total_x_ohm, 0.0) / z_abs
    saturates = live & ~(ks >= 1.0 + a)
    at_once = saturates & ((ks <= 1.0 + b) | (t1 <= 0))
    out[at_once] = 0.0
    later = np.flatnonzero(saturates & ~at_once)
    if len(later):
        q = (1.0 + a[later] - ks[later]) / (a[later] - b[later])
        out[later] = -t1[later] * np.array([math.log(v) for v in q.tolist()])
    return out


@dataclass(frozen=True, slots=True)
class SaturationCase:
    """Saturation figures of one CT in one fault case. None where a value is missing."""

    case: str  # "ground_fault" or "phase_fault"
    fault_a: float | None
    secondary_fault_a: float | None
    x_over_r: float | None
    burden_ohm: complex | None  # external, at the CT terminals
    winding_ohm: float | None
    vx_required_v: float | None
    vx_available_v: float | None
    c37_110_index: float | None
    limit: float | None
    time_to_saturate_ms: float | None
    missing: tuple[str, ...] = ()
    alf_effective: float | None = None  # IEC P classes: ALF' for this burden (S10)

    @property
    def index_fails(self) -> bool:
        return (
            self.c37_110_index is not None
            and self.limit is not None
            and not passes_c37_110(self.c37_110_index, self.limit)
        )

    @property
    def voltage_fails(self) -> bool:
        return (
            self.vx_required_v is not None
            and self.vx_available_v is not None
            and self.vx_required_v > self.vx_available_v
        )


def _nan(values: Sequence[float | None]) -> Floats:
    """A column from optional numbers, NaN for None."""
    return np.array([math.nan if v is None else v for v in values], dtype=np.float64)


def _opt(value: float, present: bool) -> float | None:
    return value if present else None


_MISSING_NAMES = ("fault current", "X/R", "burden", "winding resistance")
# What a case misses, by a 4-bit code (fault current 8, X/R 4, burden 2, winding 1), in the
# order the findings name it; the rows share the tuples.
_MISSING = [
    tuple(n for b, n in zip((8, 4, 2, 1), _MISSING_NAMES, strict=True) if code & b)
    for code in range(16)
]


@dataclass(frozen=True, slots=True)
class CaseColumns:
    """One fault case of a column of CTs (:func:`assess_cases`); NaN where a value is missing,
    a flag where NaN could be a value."""

    case: str
    fault_a: Floats
    secondary_fault_a: Floats
    x_over_r: Floats
    burden_r_ohm: Floats
    burden_x_ohm: Floats
    burden_abs_ohm: Floats  # |Z_b|, hypot
    has_burden: Flags
    winding_ohm: Floats
    vx_required_v: Floats
    has_vx_required: Flags
    vx_available_v: Floats
    c37_110_index: Floats
    has_index: Flags
    limit: Floats
    time_to_saturate_ms: Floats
    index_fails: Flags
    voltage_fails: Flags
    missing: list[tuple[str, ...]]

    def row(self, i: int, alf_effective: float | None = None) -> SaturationCase:
        """The :class:`SaturationCase` of row ``i``."""

        def value(column: Floats) -> float | None:
            v = float(column[i])
            return None if math.isnan(v) else v

        burden = (
            complex(float(self.burden_r_ohm[i]), float(self.burden_x_ohm[i]))
            if self.has_burden[i]
            else None
        )
        return SaturationCase(
            case=self.case,
            fault_a=value(self.fault_a),
            secondary_fault_a=value(self.secondary_fault_a),
            x_over_r=value(self.x_over_r),
            burden_ohm=burden,
            winding_ohm=value(self.winding_ohm),
            vx_required_v=float(self.vx_required_v[i]) if self.has_vx_required[i] else None,
            vx_available_v=value(self.vx_available_v),
            c37_110_index=float(self.c37_110_index[i]) if self.has_index[i] else None,
            limit=value(self.limit),
            time_to_saturate_ms=value(self.time_to_saturate_ms),
            missing=self.missing[i],
            alf_effective=alf_effective,
        )


def assess_cases(
    *,
    case: str,
    fault_a: Floats,
    x_over_r: Floats,
    ratio_value: Floats,
    secondary_a: Floats,
    burden_r_ohm: Floats,
    burden_x_ohm: Floats,
    has_burden: Flags,
    winding_ohm: Floats,
    standard_burden_ohm: Floats,
    vx_available_v: Floats,
    limit: Floats,
    frequency_hz: float = DEFAULT_FREQUENCY_HZ,
) -> CaseColumns:
    """Both C37.110 forms and the time to saturate for one case of a column of CTs; records
    what is missing. NaN marks a missing value in every input column (a missing burden is
    marked by ``has_burden``); a standard burden of NaN or 0 leaves the per-unit index out.

    ``fault_a`` is the primary fault current (A) and ``ratio_value`` the tap ratio (primary /
    secondary), so I_f = fault_a / ratio_value secondary amperes.
    """
    with np.errstate(all="ignore"):  # missing rows compute NaN and are masked out
        secondary_fault_a = fault_a / ratio_value
        burden_abs = np.hypot(burden_r_ohm, burden_x_ohm)
        has_fault = ~np.isnan(fault_a)
        has_x_over_r = ~np.isnan(x_over_r)
        has_winding = ~np.isnan(winding_ohm)
        data = has_fault & has_x_over_r & has_burden
        has_index = data & ~np.isnan(standard_burden_ohm) & (standard_burden_ohm != 0)
        if (has_index & (standard_burden_ohm < 0)).any():
            raise ValueError("standard burden must be positive")
        index = c37_110_index(
            x_over_r=x_over_r,
            fault_pu=secondary_fault_a / secondary_a,
            burden_pu=burden_abs / standard_burden_ohm,
        )
        has_required = data & has_winding
        # Z_s = Z_b + R_ct, as ``complex(Z_b) + R_ct`` forms it (the imaginary part + 0.0).
        total_r, total_x = burden_r_ohm + winding_ohm, burden_x_ohm + 0.0
        required = _offset_emf(x_over_r, secondary_fault_a, np.hypot(total_r, total_x))
        voltage_fails = has_required & ~np.isnan(vx_available_v) & (required > vx_available_v)
    time_ms = np.full(len(fault_a), math.nan)
    rows = np.flatnonzero(voltage_fails)
    if len(rows):
        time_ms[rows] = (
            times_to_saturate_s(
                x_over_r=x_over_r[rows],
                saturation_emf_v=vx_available_v[rows],
                secondary_fault_a=secondary_fault_a[rows],
                total_r_ohm=total_r[rows],
                total_x_ohm=total_x[rows],
                frequency_hz=frequency_hz,
            )
            * 1000.0
        )
    has_limit = ~np.isnan(limit)
    with np.errstate(invalid="ignore"):
        index_fails = has_index & has_limit & ~(index <= limit)
    code = (
        np.where(has_fault, 0, 8)
        + np.where(has_x_over_r, 0, 4)
        + np.where(has_burden, 0, 2)
        + np.where(data & ~has_winding, 1, 0)
    )
    missing = [_MISSING[c] for c in code.tolist()]
    return CaseColumns(
        case=case,
        fault_a=fault_a,
        secondary_fault_a=secondary_fault_a,
        x_over_r=x_over_r,
        burden_r_ohm=burden_r_ohm,
        burden_x_ohm=burden_x_ohm,
        burden_abs_ohm=burden_abs,
        has_burden=has_burden,
        winding_ohm=winding_ohm,
        vx_required_v=required,
        has_vx_required=has_required,
        vx_available_v=vx_available_v,
        c37_110_index=index,
        has_index=has_index,
        limit=limit,
        time_to_saturate_ms=time_ms,
        index_fails=index_fails,
        voltage_fails=voltage_fails,
        missing=missing,
    )


def assess_case(
    *,
    case: str,
    fault_a: float | None,
    x_over_r: float | None,
    ratio_value: float,
    secondary_a: float,
    burden_ohm: complex | None,
    winding_ohm: float | None,
    standard_burden_ohm: float | None,
    vx_available_v: float | None,
    limit: float | None,
    frequency_hz: float = DEFAULT_FREQUENCY_HZ,
) -> SaturationCase:
    """Both C37.110 forms and the time to saturate for one case of one CT; records what is
    missing (:func:`assess_cases` for one row).

    ``fault_a`` is the primary fault current (A) and ``ratio_value`` the tap ratio (primary /
    secondary), so I_f = fault_a / ratio_value secondary amperes.
    """
    z = 0j if burden_ohm is None else complex(burden_ohm)
    return assess_cases(
        case=case,
        fault_a=_nan([fault_a]),
        x_over_r=_nan([x_over_r]),
        ratio_value=_nan([ratio_value]),
        secondary_a=_nan([secondary_a]),
        burden_r_ohm=np.array([z.real]),
        burden_x_ohm=np.array([z.imag]),
        has_burden=np.array([burden_ohm is not None]),
        winding_ohm=_nan([winding_ohm]),
        standard_burden_ohm=_nan([standard_burden_ohm]),
        vx_available_v=_nan([vx_available_v]),
        limit=_nan([limit]),
        frequency_hz=frequency_hz,
    ).row(0)
