"""Accuracy classes of CTs and what they guarantee at the tap in use.

Parsed forms:

- IEEE C57.13 relaying ``C10`` .. ``C800`` and ``K..``, ``T..`` (optionally written ``10C400``):
  the class voltage is the secondary terminal voltage the CT delivers at 20 × rated current into
  the matching standard burden with no more than 10 % ratio error, so the standard burden is
  ``V / (20 · I_n)``: C100 ↔ B-1 … C800 ↔ B-8 for 5 A (S1, S3).
- IEEE C57.13 metering ``0.3B0.9``, ``0.15B1.8``, ``0.6B-2``, ``0.15SB0.5`` …: accuracy class in
  percent and the standard burden in ohms.
- IEC 61869-2 protection ``5P20``, ``10P10``, ``5PR20``: composite error %, accuracy limit
  factor; the rated output (VA) is given separately (``rated_burden_va``) or in the text
  (``15VA 5P20``) (S10).
- IEC 61869-2 ``PX`` / ``PXR``: knee-point e.m.f. given separately (``knee_v``) (S10).
- IEC 61869-2 transient ``TPX``, ``TPY``, ``TPZ``: recognised; no capability figures derived.
- IEC 61869-2 metering ``0.1``, ``0.2``, ``0.2S``, ``0.5``, ``0.5S``, ``1``, ``3``, ``5``
  (optional ``FS5`` security factor).

At a tap the capability scales with the turns in use, N_tap / N_full (S5, S6): the core carries
the same flux per turn, so the e.m.f. and the class voltage scale with N, and at the same 20 ×
rated secondary current the standard burden scales with N too. A 1200:5 C800 used at 600:5 is a
C400 with a 4 Ω standard burden.
"""

from __future__ import annotations

import functools
import re
from dataclasses import dataclass

IEEE_RELAYING = "ieee_relaying"
IEEE_METERING = "ieee_metering"
IEC_PROTECTION = "iec_protection"
IEC_PX = "iec_px"
IEC_TRANSIENT = "iec_transient"
IEC_METERING = "iec_metering"

# IEEE C57.13 relaying class voltages (S1, S3).
IEEE_CLASS_VOLTAGES_V: tuple[int, ...] = (10, 20, 50, 100, 200, 400, 800)
# IEEE C57.13 standard burdens: |Z| Ω, power factor (S1).
IEEE_STANDARD_BURDENS: dict[str, tuple[float, float]] = {
    "B-0.1": (0.1, 0.9),
    "B-0.2": (0.2, 0.9),
    "B-0.5": (0.5, 0.9),
    "B-0.9": (0.9, 0.9),
    "B-1.8": (1.8, 0.9),
    "B-1": (1.0, 0.5),
    "B-2": (2.0, 0.5),
    "B-4": (4.0, 0.5),
    "B-8": (8.0, 0.5),
}
IEEE_METERING_CLASSES: tuple[str, ...] = ("0.15", "0.15S", "0.3", "0.6", "1.2")
IEC_METERING_CLASSES: tuple[str, ...] = ("0.1", "0.2", "0.2S", "0.5", "0.5S", "1", "3", "5")
IEC_P_ERRORS_PCT: tuple[int, ...] = (5, 10)
IEC_ALFS: tuple[int, ...] = (5, 10, 15, 20, 30)

# The multiple of rated current at which the IEEE relaying class voltage is defined.
IEEE_RELAYING_MULTIPLE = 20.0

_IEEE_RELAY_RE = re.compile(r"^(?:10\s*)?([CKT])\s*(\d+)$")
_IEEE_METER_RE = re.compile(r"^(0\.15S?|0\.3|0\.6|1\.2)\s*B\s*-?\s*(\d+(?:\.\d+)?)$")
_IEC_P_RE = re.compile(r"^(\d+)\s*(PR|P)\s*(\d+)$")
_IEC_METER_RE = re.compile(r"^(0\.1|0\.2S?|0\.5S?|1|3|5)(?:\s*FS\s*(\d+))?$")
_VA_RE = re.compile(r"(\d+(?:\.\d+)?)\s*VA")


def _burden_key(ohm: float) -> str:
    return f"B-{ohm:g}"


@dataclass(frozen=True, slots=True)
class AccuracyClass:
    """A parsed accuracy class. Figures are for the full winding unless a method says tap."""

    text: str  # canonical spelling, e.g. "C400", "0.3B0.9", "5P20", "PX", "0.2S"
    standard: str  # one of IEEE_RELAYING, IEEE_METERING, IEC_PROTECTION, IEC_PX, ...
    letter: str | None = None  # C, K, T (IEEE relaying); P, PR (IEC); PX, PXR
    class_voltage_v: float | None = None  # IEEE relaying class voltage
    error_pct: float | None = None  # IEEE/IEC metering class, or IEC P composite error
    standard_burden_ohm: float | None = None  # IEEE metering standard burden
    alf: float | None = None  # IEC accuracy limit factor
    rated_burden_va: float | None = None  # IEC rated output
    knee_v: float | None = None  # IEC PX knee-point e.m.f.
    security_factor: float | None = None  # IEC metering FS

    @property
    def is_relaying(self) -> bool:
        """Whether the class states a capability at fault currents (saturation checks apply)."""
        return self.standard in (IEEE_RELAYING, IEC_PROTECTION, IEC_PX)

    def rated_burden_ohm(self, secondary_a: float) -> float | None:
        """Full-winding burden the class is rated for, in ohms at the rated secondary current.

        IEEE relaying: V / (20 · I_n) (for 5 A the B-0.1 … B-8 table of S1; for 1 A the same
        volts at 20 × 1 A, common practice, no source). IEEE metering: the B value. IEC: the
        rated output S_n / I_n² (S10).
        """
        if self.standard == IEEE_RELAYING and self.class_voltage_v is not None:
            return self.class_voltage_v / (IEEE_RELAYING_MULTIPLE * secondary_a)
        if self.standard == IEEE_METERING:
            return self.standard_burden_ohm
        if self.standard in (IEC_PROTECTION, IEC_METERING) and self.rated_burden_va is not None:
            return self.rated_burden_va / secondary_a**2
        return None

    def standard_burden_ohm_at_tap(self, secondary_a: float, turns_fraction: float) -> float | None:
        """Rated/standard burden at the tap in use: full-winding value × N_tap / N_full (S5, S6)."""
        full = self.rated_burden_ohm(secondary_a)
        return None if full is None else full * turns_fraction

    def voltage_at_tap_v(self, secondary_a: float, turns_fraction: float) -> float | None:
        """Terminal voltage the class guarantees at its accuracy limit, at the tap in use.

        IEEE relaying: class voltage × N_tap / N_full (S5, S6). IEC P: ALF · I_n · R_b,rated at
        the tap (the terminal voltage at the accuracy limit current into the rated burden).
        Other classes: None.
        """
        if self.standard == IEEE_RELAYING and self.class_voltage_v is not None:
            return self.class_voltage_v * turns_fraction
        if self.standard == IEC_PROTECTION and self.alf is not None:
            rb = self.standard_burden_ohm_at_tap(secondary_a, turns_fraction)
            return None if rb is None else self.alf * secondary_a * rb
        return None

    def saturation_emf_at_tap_v(
        self, secondary_a: float, turns_fraction: float, winding_ohm_at_tap: float | None
    ) -> float | None:
        """Secondary e.m.f. available before saturation (V_x of C37.110) at the tap in use.

        IEEE relaying: class voltage at the tap plus the winding drop at 20 × I_n, the e.m.f.
        behind the winding when the class voltage appears at the terminals (from memory).
        IEC P: the accuracy limit e.m.f. E_al = ALF · I_n · (R_ct + R_b,rated) at the tap (S10).
        PX: the knee-point e.m.f. × N_tap / N_full. None when the class does not say.
        """
        r_ct = winding_ohm_at_tap or 0.0
        if self.standard == IEEE_RELAYING and self.class_voltage_v is not None:
            return self.class_voltage_v * turns_fraction + (
                IEEE_RELAYING_MULTIPLE * secondary_a * r_ct
            )
        if self.standard == IEC_PROTECTION and self.alf is not None:
            rb = self.standard_burden_ohm_at_tap(secondary_a, turns_fraction)
            return None if rb is None else self.alf * secondary_a * (r_ct + rb)
        if self.standard == IEC_PX and self.knee_v is not None:
            return self.knee_v * turns_fraction
        return None

    def criterion_limit(self) -> float | None:
        """The multiple of rated current the class is defined at: 20 for IEEE relaying (C37.110),
        the ALF for IEC P classes."""
        if self.standard == IEEE_RELAYING:
            return IEEE_RELAYING_MULTIPLE
        if self.standard == IEC_PROTECTION:
            return self.alf
        return None


def effective_alf(
    *, alf: float, winding_ohm: float, rated_burden_ohm: float, burden_ohm: float
) -> float:
    """IEC effective accuracy limit factor for the actual burden (IEC 61869-2 practice, S10;
    formula from memory): ALF' = ALF · (R_ct + R_b,rated) / (R_ct + R_b).

    All resistances at the same tap. The accuracy limit e.m.f. is fixed by the core, so a lighter
    burden raises the usable multiple of rated current.
    """
    denominator = winding_ohm + burden_ohm
    if denominator <= 0:
        raise ValueError("winding plus burden resistance must be positive")
    return alf * (winding_ohm + rated_burden_ohm) / denominator


def _number(value: float | None, name: str) -> float | None:
    if value is None:
        return None
    value = float(value)
    if value <= 0:
        raise ValueError(f"{name} must be positive, got {value}")
    return value


def parse_accuracy(
    text: str, *, rated_burden_va: float | None = None, knee_v: float | None = None
) -> AccuracyClass:
    """Parse an accuracy class string (IEEE C57.13 or IEC 61869-2, forms in the module docstring).

    Raises ``ValueError`` saying what is wrong for a string that is not a class.
    """
    if not isinstance(text, str):
        raise ValueError(f"accuracy class must be a string, got {type(text).__name__}")
    return _parse_accuracy(text, rated_burden_va, knee_v)


@functools.lru_cache(maxsize=4096)
def _parse_accuracy(
    text: str, rated_burden_va: float | None, knee_v: float | None
) -> AccuracyClass:
    if not text.strip():
        raise ValueError("accuracy class is empty; expected e.g. C400, 0.3B0.9, 5P20, PX, 0.2S")
    raw = text.strip()
    norm = re.sub(r"\s+", " ", raw.upper().replace(",", "."))
    norm = re.sub(r"^(CLASS|CL\.?)\s*", "", norm)
    rated_burden_va = _number(rated_burden_va, "rated_burden_va")
    knee_v = _number(knee_v, "knee_v")
    va_in_text = _VA_RE.search(norm)
    if va_in_text:
        va = float(va_in_text.group(1))
        if rated_burden_va is not None and abs(rated_burden_va - va) > 1e-9:
            raise ValueError(
                f"accuracy {raw!r} says {va:g} VA but rated_burden_va is {rated_burden_va:g}"
            )
        rated_burden_va = va
        norm = (norm[: va_in_text.start()] + norm[va_in_text.end() :]).strip()
    compact = norm.replace(" ", "")

    m = _IEEE_RELAY_RE.match(compact)
    if m:
        letter, volts = m.group(1), int(m.group(2))
        if volts not in IEEE_CLASS_VOLTAGES_V:
            allowed = ", ".join(f"{letter}{v}" for v in IEEE_CLASS_VOLTAGES_V)
            raise ValueError(
                f"accuracy {raw!r}: {volts} V is not an IEEE C57.13 class voltage; use {allowed}"
            )
        return AccuracyClass(
            text=f"{letter}{volts}",
            standard=IEEE_RELAYING,
            letter=letter,
            class_voltage_v=float(volts),
            error_pct=10.0,
        )

    m = _IEEE_METER_RE.match(compact)
    if m:
        cls, burden = m.group(1), float(m.group(2))
        key = _burden_key(burden)
        if key not in IEEE_STANDARD_BURDENS:
            raise ValueError(
                f"accuracy {raw!r}: B{burden:g} is not an IEEE C57.13 standard burden; "
                f"use one of {', '.join(IEEE_STANDARD_BURDENS)}"
            )
        return AccuracyClass(
            text=f"{cls}B{burden:g}",
            standard=IEEE_METERING,
            error_pct=float(cls.rstrip("S")),
            standard_burden_ohm=IEEE_STANDARD_BURDENS[key][0],
        )

    m = _IEC_P_RE.match(compact)
    if m:
        err, letter, alf = int(m.group(1)), m.group(2), int(m.group(3))
        if err not in IEC_P_ERRORS_PCT:
            raise ValueError(f"accuracy {raw!r}: IEC P classes are 5P or 10P, not {err}P")
        if alf <= 0:
            raise ValueError(f"accuracy {raw!r}: accuracy limit factor must be positive")
        return AccuracyClass(
            text=f"{err}{letter}{alf}",
            standard=IEC_PROTECTION,
            letter=letter,
            error_pct=float(err),
            alf=float(alf),
            rated_burden_va=rated_burden_va,
        )

    if compact in ("PX", "PXR"):
        return AccuracyClass(text=compact, standard=IEC_PX, letter=compact, knee_v=knee_v)

    if compact in ("TPX", "TPY", "TPZ"):
        return AccuracyClass(text=compact, standard=IEC_TRANSIENT, letter=compact)

    m = _IEC_METER_RE.match(compact)
    if m:
        return AccuracyClass(
            text=m.group(1),
            standard=IEC_METERING,
            error_pct=float(m.group(1).rstrip("S")),
            rated_burden_va=rated_burden_va,
            security_factor=float(m.group(2)) if m.group(2) else None,
        )

    raise ValueError(
        f"accuracy {raw!r} is not a class: expected IEEE relaying C10..C800 / K.. / T.., "
        "IEEE metering like 0.3B0.9, IEC 5P20 / 10P10, PX / PXR, or IEC metering 0.1, 0.2, "
        "0.2S, 0.5, 0.5S, 1, 3, 5"
    )
