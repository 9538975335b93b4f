"""IEEE C57.13 standard burdens, class voltages, multi-ratio tables and class at a tap.

Sources are the codes of shared/reference.md.
"""

from __future__ import annotations

import pytest

from analysis.engine.ratings import (
    all_taps,
    tap_of,
    winding_ohm_at_tap,
)
from trade.accuracy import (
    IEEE_STANDARD_BURDENS,
    parse_accuracy,
)

# S1: standard burden |Z| Ω, VA at 5 A, power factor. (R and L columns of reference.md are from
# memory; R = |Z|·PF is checked below, L = X/ω within 1 % also from memory.)
S1_BURDENS = {
    "B-0.1": (0.1, 2.5, 0.9),
    "B-0.2": (0.2, 5.0, 0.9),
    "B-0.5": (0.5, 12.5, 0.9),
    "B-0.9": (0.9, 22.5, 0.9),
    "B-1.8": (1.8, 45.0, 0.9),
    "B-1": (1.0, 25.0, 0.5),
    "B-2": (2.0, 50.0, 0.5),
    "B-4": (4.0, 100.0, 0.5),
    "B-8": (8.0, 200.0, 0.5),
}
# R Ω, L mH (from memory, reference.md table).
MEMORY_R_L = {
    "B-0.1": (0.09, 0.116),
    "B-0.2": (0.18, 0.232),
    "B-0.5": (0.45, 0.580),
    "B-0.9": (0.81, 1.04),
    "B-1.8": (1.62, 2.08),
    "B-1": (0.5, 2.3),
    "B-2": (1.0, 4.6),
    "B-4": (2.0, 9.2),
    "B-8": (4.0, 18.4),
}


@pytest.mark.parametrize("name", sorted(S1_BURDENS))
def test_standard_burden_table(name):
    z, va, pf = S1_BURDENS[name]
    ours_z, ours_pf = IEEE_STANDARD_BURDENS[name]
    assert ours_z == z and ours_pf == pf  # S1
    assert ours_z * 5.0**2 == pytest.approx(va)  # S1: VA at 5 A = |Z| · 25
    r_mem, l_mem_mh = MEMORY_R_L[name]
    assert ours_z * ours_pf == pytest.approx(r_mem, rel=1e-9)  # from memory
    x = ours_z * (1 - ours_pf**2) ** 0.5
    assert x / (2 * 3.141592653589793 * 60) * 1000 == pytest.approx(l_mem_mh, rel=0.01)


@pytest.mark.parametrize(
    ("cls", "burden"),
    [("C100", "B-1"), ("C200", "B-2"), ("C400", "B-4"), ("C800", "B-8")],
)
def test_class_voltage_is_20_times_5a_into_standard_burden(cls, burden):
    # S1, S3: class voltage = 20 × 5 A × standard burden.
    acc = parse_accuracy(cls)
    assert acc.class_voltage_v == 20 * 5 * IEEE_STANDARD_BURDENS[burden][0]
    assert acc.rated_burden_ohm(5) == IEEE_STANDARD_BURDENS[burden][0]
    assert acc.voltage_at_tap_v(5, 1.0) == acc.class_voltage_v


@pytest.mark.parametrize(("cls", "burden"), [("C10", "B-0.1"), ("C20", "B-0.2"), ("C50", "B-0.5")])
def test_low_classes_map_to_the_low_burdens(cls, burden):
    # Same rule of S1 for the 0.9-PF burdens (pairing from memory).
    assert parse_accuracy(cls).rated_burden_ohm(5) == pytest.approx(
        IEEE_STANDARD_BURDENS[burden][0]
    )


# S4 (IEEE C57.13 multi-ratio table as quoted; ratio ↔ terminals from memory of the standard).
# Positions from reference.md; each row lists ratio (primary A) → terminal pairs giving it.
MULTI_RATIO = {
    600: (
        {"X1": 0, "X2": 100, "X3": 150, "X4": 400, "X5": 600},
        {
            50: {"X2-X3"},
            100: {"X1-X2"},
            150: {"X1-X3"},
            200: {"X4-X5"},
            250: {"X3-X4"},
            300: {"X2-X4"},
            400: {"X1-X4"},
            450: {"X3-X5"},
            500: {"X2-X5"},
            600: {"X1-X5"},
        },
    ),
    1200: (
        {"X1": 0, "X2": 200, "X3": 300, "X4": 800, "X5": 1200},
        {
            100: {"X2-X3"},
            200: {"X1-X2"},
            300: {"X1-X3"},
            400: {"X4-X5"},
            500: {"X3-X4"},
            600: {"X2-X4"},
            800: {"X1-X4"},
            900: {"X3-X5"},
            1000: {"X2-X5"},
            1200: {"X1-X5"},
        },
    ),
    2000: (
        {"X1": 0, "X2": 400, "X3": 1200, "X4": 1500, "X5": 2000},
        {
            300: {"X3-X4"},
            400: {"X1-X2"},
            500: {"X4-X5"},
            800: {"X2-X3", "X3-X5"},
            1100: {"X2-X4"},
            1200: {"X1-X3"},
            1500: {"X1-X4"},
            1600: {"X2-X5"},
            2000: {"X1-X5"},
        },
    ),
    3000: (
        {"X1": 0, "X2": 1000, "X3": 2200, "X4": 2500, "X5": 3000},
        {
            300: {"X3-X4"},
            500: {"X4-X5"},
            800: {"X3-X5"},
            1000: {"X1-X2"},
            1200: {"X2-X3"},
            1500: {"X2-X4"},
            2000: {"X2-X5"},
            2200: {"X1-X3"},
            2500: {"X1-X4"},
            3000: {"X1-X5"},
        },
    ),
    4000: (
        {"X1": 0, "X2": 500, "X3": 2000, "X4": 3000, "X5": 4000},
        {
            500: {"X1-X2"},
            1000: {"X3-X4", "X4-X5"},
            1500: {"X2-X3"},
            2000: {"X1-X3", "X3-X5"},
            2500: {"X2-X4"},
            3000: {"X1-X4"},
            3500: {"X2-X5"},
            4000: {"X1-X5"},
        },
    ),
    5000: (
        {"X1": 0, "X2": 1500, "X3": 2000, "X4": 4000, "X5": 5000},
        {
            500: {"X2-X3"},
            1000: {"X4-X5"},
            1500: {"X1-X2"},
            2000: {"X1-X3", "X3-X4"},
            2500: {"X2-X4"},
            3000: {"X3-X5"},
            3500: {"X2-X5"},
            4000: {"X1-X4"},
            5000: {"X1-X5"},
        },
    ),
}


@pytest.mark.parametrize("full", sorted(MULTI_RATIO))
def test_multi_ratio_table(full):
    positions, table = MULTI_RATIO[full]
    got: dict[int, set[str]] = {}
    for tap in all_taps(positions, 5):
        got.setdefault(int(tap.primary_a), set()).add("-".join(tap.terminals))
        assert tap.ratio == f"{int(tap.primary_a)}:5"
        assert tap.full_primary_a == full
    assert got == table  # S4; duplicate ratios (S4) are legal and listed
    assert len(all_taps(positions, 5)) == 10  # five terminals, every pair


def test_worked_case_3_c800_at_x2_x4_is_c400_with_4_ohm():
    # reference.md worked case 3 (S4, S5): 1200:5 C800 used at X2-X4 → 600:5, C400, 4 Ω.
    positions, _ = MULTI_RATIO[1200]
    tap = tap_of(positions, "X2-X4", 5)
    acc = parse_accuracy("C800")
    assert tap.ratio == "600:5"
    assert acc.voltage_at_tap_v(5, tap.turns_fraction) == pytest.approx(400.0)
    assert acc.standard_burden_ohm_at_tap(5, tap.turns_fraction) == pytest.approx(4.0)


def test_volts_per_turn_constant_over_taps():
    # S5, S6: volts per turn at a tap equal those of the full winding.
    positions, _ = MULTI_RATIO[600]
    acc = parse_accuracy("C400")
    full = tap_of(positions, "X1-X5", 5)
    for tap in all_taps(positions, 5):
        v = acc.voltage_at_tap_v(5, tap.turns_fraction)
        assert v / tap.turns == pytest.approx(400.0 / full.turns)


def test_winding_resistance_scales_with_turns():
    # S5/S6 scaling applied to the winding (even turn length, common practice, no source).
    positions, _ = MULTI_RATIO[600]
    tap = tap_of(positions, ["X1", "X4"], 5)
    assert winding_ohm_at_tap(0.30, tap) == pytest.approx(0.20)
