"""Conductor resistance of CT secondary wiring.

Tables hold the DC resistance at 20 °C of one conductor, per metre:

- AWG copper (16 to 8 AWG): the annealed-copper values of the HyperPhysics wire gauge table
  (source S13 in the project's reference list), i.e. ρ/A with ρ = 1.7241e-8 Ω·m on the ASTM B258
  nominal area. They are solid-conductor values; NEC Chapter 9 Table 8 (S12) gives solid copper
  at 75 °C that these reproduce within 0.5 % after the temperature conversion below, and
  stranded copper about 2 % higher.
- Metric copper (1.5 to 10 mm²): IEC 60228 class 1/2 plain copper maxima (S14).
- Aluminium: the copper value scaled by the resistivity ratio ρ_Al / ρ_Cu = 2.8264 / 1.7241
  (IEC 60287-1-1 Table 1 resistivities; the copper figure is S15, the aluminium one from
  memory). IEC 60228 lists aluminium only from 10 mm² (3.08 Ω/km), which this reproduces within
  3 %; the smaller sizes are rarely aluminium in practice and are derived the same way.

Temperature: the inferred-zero-resistance-temperature form R2 = R1 · (T0 + T2) / (T0 + T1) with
T0 = 234.5 °C for annealed copper and 228 °C for hard-drawn aluminium (the form used by NEC
Table 8's notes; it reproduces Table 8's 75 °C column from the 20 °C values).
"""

from __future__ import annotations

import functools
import re

TABLE_TEMP_C = 20.0
FT_PER_KFT_M = 304.8  # 1000 ft in metres

# Inferred zero-resistance temperatures (°C below zero).
INFERRED_ZERO_C: dict[str, float] = {"cu": 234.5, "al": 228.0}

# ρ_Al / ρ_Cu at 20 °C from IEC 60287-1-1 Table 1 (1.7241e-8 and 2.8264e-8 Ω·m).
RHO_CU_OHM_M = 1.7241e-8
RHO_AL_OHM_M = 2.8264e-8

# Copper, Ω per 1000 ft at 20 °C (S13).
_AWG_CU_OHM_PER_KFT_20C: dict[int, float] = {
    16: 4.016,
    14: 2.525,
    12: 1.588,
    10: 0.9989,
    8: 0.6282,
}

# Copper, Ω per km at 20 °C, IEC 60228 class 1 and 2 plain copper (S14).
_MM2_CU_OHM_PER_KM_20C: dict[str, float] = {
    "1.5": 12.1,
    "2.5": 7.41,
    "4": 4.61,
    "6": 3.08,
    "10": 1.83,
}

# Canonical size string -> copper Ω/m at 20 °C.
_CU_OHM_PER_M_20C: dict[str, float] = {
    **{f"{g}AWG": r / FT_PER_KFT_M for g, r in _AWG_CU_OHM_PER_KFT_20C.items()},
    **{f"{a}mm2": r / 1000.0 for a, r in _MM2_CU_OHM_PER_KM_20C.items()},
}

KNOWN_SIZES: tuple[str, ...] = tuple(_CU_OHM_PER_M_20C)
MATERIALS: tuple[str, ...] = ("cu", "al")

_AWG_RE = re.compile(r"^(?:#\s*(\d+)|(\d+)\s*(?:awg|ga|gauge)|awg\s*#?\s*(\d+))$")
_MM2_RE = re.compile(r"^(\d+(?:[.,]\d+)?)\s*(?:mm2|mm²|mm\^2|sqmm|sq\s*mm|mm\s*sq)$")


def normalize_size(size: str) -> str:
    """Canonical form of a wire size string: ``"10AWG"`` or ``"2.5mm2"``.

    Accepts ``"10AWG"``, ``"10 AWG"``, ``"#10"``, ``"AWG 10"``, ``"10 ga"``, ``"4mm2"``,
    ``"4 mm²"``, ``"4.0 mm^2"``, ``"2,5 mm2"``. Raises ``ValueError`` naming the known sizes for
    anything else, including well-formed sizes the tables do not hold.
    """
    text = str(size).strip().lower()
    canonical: str | None = None
    m = _AWG_RE.match(text)
    if m:
        gauge = int(next(g for g in m.groups() if g is not None))
        canonical = f"{gauge}AWG"
    else:
        m = _MM2_RE.match(text)
        if m:
            area = float(m.group(1).replace(",", "."))
            canonical = f"{area:g}mm2"
    if canonical is None or canonical not in _CU_OHM_PER_M_20C:
        raise ValueError(f"unknown wire size {size!r}; known: {', '.join(KNOWN_SIZES)}")
    return canonical


def _material(material: str) -> str:
    key = str(material).strip().lower()
    aliases = {"copper": "cu", "aluminium": "al", "aluminum": "al"}
    key = aliases.get(key, key)
    if key not in MATERIALS:
        raise ValueError(f"unknown conductor material {material!r}; known: {', '.join(MATERIALS)}")
    return key


def temperature_factor(material: str, temp_c: float, from_temp_c: float = TABLE_TEMP_C) -> float:
    """R(temp_c) / R(from_temp_c) by the inferred-zero-resistance-temperature formula."""
    t0 = INFERRED_ZERO_C[_material(material)]
    if temp_c <= -t0:
        raise ValueError(f"temperature {temp_c} °C is at or below the inferred zero ({-t0} °C)")
    return (t0 + temp_c) / (t0 + from_temp_c)


@functools.lru_cache(maxsize=1024)
def conductor_ohm_per_m(size: str, material: str = "cu", temp_c: float = 75.0) -> float:
    """DC resistance of one conductor in Ω per metre at ``temp_c``.

    Tables at 20 °C (S13 for AWG, S14 IEC 60228 for mm²; aluminium by the IEC 60287 resistivity
    ratio), converted by the inferred-zero-temperature formula (234.5 °C Cu, 228 °C Al).
    Raises ``ValueError`` for an unknown size or material. Cached per (size, material,
    temperature): a site's netlist asks it for every wire, of a handful of distinct sizes.
    """
    canonical = normalize_size(size)
    mat = _material(material)
    r20 = _CU_OHM_PER_M_20C[canonical]
    if mat == "al":
        r20 *= RHO_AL_OHM_M / RHO_CU_OHM_M
    return r20 * temperature_factor(mat, temp_c)


def wire_resistance_ohm(
    *, size: str, length_m: float, material: str = "cu", temp_c: float = 75.0
) -> float:
    """Resistance of one conductor run of ``length_m`` (one wire element between two terminals)."""
    if length_m < 0:
        raise ValueError(f"wire length must not be negative, got {length_m} m")
    return conductor_ohm_per_m(size, material, temp_c) * length_m
