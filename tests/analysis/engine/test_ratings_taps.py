"""Taps: ratio of any terminal pair, turns, ratio strings (design.md "Terminal positions")."""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st

from analysis.engine.ratings import (
    all_taps,
    ct_tap,
    full_primary_a,
    parse_tap,
    tap_of,
    winding_ohm_at_tap,
)
from trade.ratio import (
    parse_ratio,
    ratio_value,
    ratios_equal,
)

POS_600 = {"X1": 0, "X2": 100, "X3": 150, "X4": 400, "X5": 600}


def test_design_example_pairs():
    # design.md: X2-X3 = 50:5, X1-X2 = 100:5, X1-X4 = 400:5, X1-X5 = 600:5 (from S4).
    assert tap_of(POS_600, "X2-X3", 5).ratio == "50:5"
    assert tap_of(POS_600, "X1-X2", 5).ratio == "100:5"
    assert tap_of(POS_600, "X1-X4", 5).ratio == "400:5"
    assert tap_of(POS_600, "X5-X1", 5).ratio == "600:5"  # order of the pair does not matter


def test_turns_and_fraction():
    tap = tap_of(POS_600, ["X1", "X4"], 5)
    assert tap.turns == 80 and tap.full_turns == 120
    assert tap.turns_fraction == pytest.approx(400 / 600)
    assert tap.ratio_value == 80


def test_one_amp_secondary():
    tap = tap_of({"X1": 0, "X2": 400}, "X1-X2", 1)
    assert tap.ratio == "400:1" and tap.turns == 400


def test_duplicate_ratios_are_legal():
    # S4: a 2000:5 winding gives 800:5 at X2-X3 and at X3-X5.
    taps = all_taps({"X1": 0, "X2": 400, "X3": 1200, "X4": 1500, "X5": 2000}, 5)
    eights = [t.terminals for t in taps if t.primary_a == 800]
    assert sorted(eights) == [("X2", "X3"), ("X3", "X5")]


@pytest.mark.parametrize(
    ("text", "pair"),
    [
        ("X2-X4", ("X2", "X4")),
        ("x2 – x4", ("X2", "X4")),
        ("X1/X5", ("X1", "X5")),
        (" X1 X3 ", ("X1", "X3")),
        (["X1", "X2"], ("X1", "X2")),
    ],
)
def test_parse_tap(text, pair):
    assert parse_tap(text) == pair


@pytest.mark.parametrize("bad", ["X2", "X2-X2", "X1-X2-X3", ["X1"], ""])
def test_parse_tap_rejects(bad):
    with pytest.raises(ValueError):
        parse_tap(bad)


@pytest.mark.parametrize(
    ("text", "pair"),
    [
        ("300:5", (300, 5)),
        ("300/5", (300, 5)),
        (" 80 : 1 ", (80, 1)),
        ("1200:5A", (1200, 5)),
        ("2.5:1", (2.5, 1)),
    ],
)
def test_parse_ratio(text, pair):
    assert parse_ratio(text) == pair


@pytest.mark.parametrize("bad", ["300", "300:", ":5", "0:5", "abc", "300-5"])
def test_parse_ratio_rejects(bad):
    with pytest.raises(ValueError, match="ratio"):
        parse_ratio(bad)


def test_ratios_compare_as_numbers():
    # 400:5 and 80:1 are the same ratio (brief: compare ratios as numbers).
    assert ratios_equal("400:5", "80:1")
    assert ratios_equal("400/5", 80)
    assert not ratios_equal("400:5", "600:5")
    assert ratio_value("1200:5") == 240


def test_bad_terminals():
    with pytest.raises(ValueError, match="not on this CT"):
        tap_of(POS_600, "X1-X9", 5)
    with pytest.raises(ValueError, match="same position"):
        tap_of({"X1": 0, "X2": 0, "X3": 100}, "X1-X2", 5)
    with pytest.raises(ValueError, match="1 or 5 A"):
        tap_of(POS_600, "X1-X2", 2)


def test_ct_tap_from_site_entry():
    tap = ct_tap({"code": "CT", "secondary_a": 5, "terminals": POS_600, "in_use": ["X2", "X4"]})
    assert tap.ratio == "300:5"
    with pytest.raises(ValueError, match="no terminals in use"):
        ct_tap({"code": "CT", "terminals": POS_600})


@given(
    st.lists(st.integers(min_value=0, max_value=10000), min_size=2, max_size=6, unique=True),
    st.sampled_from([1, 5]),
)
def test_pairs_are_additive_along_the_winding(positions, secondary):
    # Invariant: for terminals a < b < c along the winding, N(a,c) = N(a,b) + N(b,c); the full
    # winding is the widest pair; winding resistance scales with turns.
    pos = {f"X{i + 1}": p for i, p in enumerate(sorted(positions))}
    names = list(pos)
    for i in range(len(names) - 2):
        a, b, c = names[i], names[i + 1], names[i + 2]
        ab, bc, ac = (tap_of(pos, p, secondary) for p in ((a, b), (b, c), (a, c)))
        assert ac.turns == pytest.approx(ab.turns + bc.turns)
    assert max(t.primary_a for t in all_taps(pos, secondary)) == full_primary_a(pos)
    full = tap_of(pos, (names[0], names[-1]), secondary)
    assert winding_ohm_at_tap(1.0, full) == pytest.approx(1.0)
