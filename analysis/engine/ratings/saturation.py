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
"""

from __future__ import annotations

import math
from dataclasses import dataclass

DEFAULT_FREQUENCY_HZ = 60.0
C37_110_LIMIT = 20.0


def c37_110_index(*, x_over_r: float, fault_pu: float, burden_pu: float) -> float:
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


def required_class_voltage_v(
    *, x_over_r: float, secondary_fault_a: float, burden_ohm: float | complex
) -> float:
    """Class voltage (at the tap) for which the C37.110 index is exactly 20:
    (1 + X/R) · I_f · |Z_b| with the external burden only. The quantity electricpy's
    ``ct_cclass`` returns (S8)."""
    return (1.0 + x_over_r) * secondary_fault_a * abs(burden_ohm)


def required_saturation_emf_v(
    *, x_over_r: float, secondary_fault_a: float, total_burden_ohm: float | complex
) -> float:
    """Voltage form: V_x needed to carry the fully offset fault without saturating,
    (1 + X/R) · I_f · |Z_s|, Z_s including the CT winding (C37.110 practice, from memory)."""
    return (1.0 + x_over_r) * secondary_fault_a * abs(total_burden_ohm)


def time_to_saturate_s(
    *,
    x_over_r: float,
    saturation_emf_v: float,
    secondary_fault_a: float,
    total_burden_ohm: float | complex,
    frequency_hz: float = DEFAULT_FREQUENCY_HZ,
) -> float | None:
    """Time from fault inception to saturation, seconds; None when the CT does not saturate.

    Flux-envelope method of the module docstring (C37.110 eq. 18/19 as corrected, S25).
    """
    z = complex(total_burden_ohm)
    z_abs = abs(z)
    if secondary_fault_a <= 0 or z_abs == 0:
        return None
    omega = 2.0 * math.pi * frequency_hz
    t1 = x_over_r / omega
    ks = saturation_emf_v / (secondary_fault_a * z_abs)
    a = x_over_r * z.real / z_abs
    b = max(z.imag, 0.0) / z_abs
    if ks >= 1.0 + a:
        return None
    if ks <= 1.0 + b or t1 <= 0:
        return 0.0
    return -t1 * math.log((1.0 + a - ks) / (a - b))


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
    """Both C37.110 forms and the time to saturate for one case; records what is missing.

    ``fault_a`` is the primary fault current (A) and ``ratio_value`` the tap ratio (primary /
    secondary), so I_f = fault_a / ratio_value secondary amperes.
    """
    missing: list[str] = []
    if fault_a is None:
        missing.append("fault current")
    if x_over_r is None:
        missing.append("X/R")
    if burden_ohm is None:
        missing.append("burden")
    secondary_fault_a = None if fault_a is None else fault_a / ratio_value
    index = required = time_ms = None
    if secondary_fault_a is not None and x_over_r is not None and burden_ohm is not None:
        if standard_burden_ohm:
            index = saturation_index(
                x_over_r=x_over_r,
                secondary_fault_a=secondary_fault_a,
                secondary_a=secondary_a,
                burden_ohm=burden_ohm,
                standard_burden_ohm=standard_burden_ohm,
            )
        if winding_ohm is None:
            missing.append("winding resistance")
        else:
            total = complex(burden_ohm) + winding_ohm
            required = required_saturation_emf_v(
                x_over_r=x_over_r, secondary_fault_a=secondary_fault_a, total_burden_ohm=total
            )
            if vx_available_v is not None and required > vx_available_v:
                t = time_to_saturate_s(
                    x_over_r=x_over_r,
                    saturation_emf_v=vx_available_v,
                    secondary_fault_a=secondary_fault_a,
                    total_burden_ohm=total,
                    frequency_hz=frequency_hz,
                )
                time_ms = None if t is None else t * 1000.0
    return SaturationCase(
        case=case,
        fault_a=fault_a,
        secondary_fault_a=secondary_fault_a,
        x_over_r=x_over_r,
        burden_ohm=None if burden_ohm is None else complex(burden_ohm),
        winding_ohm=winding_ohm,
        vx_required_v=required,
        vx_available_v=vx_available_v,
        c37_110_index=index,
        limit=limit,
        time_to_saturate_ms=time_ms,
        missing=tuple(missing),
    )
