"""The register's winding shorthand against the standard multi-ratio tables.

Source S4 (shared/reference.md): the ratio of every terminal pair of the IEEE C57.13 multi-ratio
CTs, as quoted on a public forum; the positions reproduce it (agreement with the standard's own
table from memory)."""

from __future__ import annotations

import pytest

from trade.taps import format_tap, format_terminals, parse_tap, parse_terminals

# Ratio (primary A, to 5 A) of each terminal pair, as the standard tables list them (S4).
TABLES = {
    "600:5 MR": {
        ("X2", "X3"): 50, ("X1", "X2"): 100, ("X1", "X3"): 150, ("X4", "X5"): 200,
        ("X3", "X4"): 250, ("X2", "X4"): 300, ("X1", "X4"): 400, ("X3", "X5"): 450,
        ("X2", "X5"): 500, ("X1", "X5"): 600,
    },
    "1200:5 MR": {
        ("X2", "X3"): 100, ("X1", "X2"): 200, ("X1", "X3"): 300, ("X4", "X5"): 400,
        ("X3", "X4"): 500, ("X2", "X4"): 600, ("X1", "X4"): 800, ("X3", "X5"): 900,
        ("X2", "X5"): 1000, ("X1", "X5"): 1200,
    },
}  # fmt: skip


@pytest.mark.parametrize("text", sorted(TABLES))
def test_the_shorthand_gives_the_standard_ratio_of_every_pair(text):
    terminals, secondary = parse_terminals(text)
    assert secondary == 5
    ratios = {(a, b): abs(terminals[a] - terminals[b]) for a, b in TABLES[text]}
    assert ratios == TABLES[text]


def test_explicit_positions_and_a_single_ratio():
    assert parse_terminals("X1=0; X2=100;X3=150.5") == ({"X1": 0, "X2": 100, "X3": 150.5}, None)
    assert parse_terminals("400:5") == ({"X1": 0, "X2": 400}, 5)
    assert parse_terminals("1000/1") == ({"X1": 0, "X2": 1000}, 1)
    assert format_terminals({"X1": 0.0, "X2": 100.0, "X3": 150.5}) == "X1=0;X2=100;X3=150.5"


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("700:5 MR", "no standard multi-ratio table for '700:5 MR'"),
        ("X1=0;X1=5", "terminal 'X1' is given twice"),
        ("X1=0;X2=inf", "position of X2 must be a number of primary amperes, got 'inf'"),
        ("0:5", "ratio '0:5': the primary rating must be positive"),
    ],
)
def test_bad_windings_say_what_is_wrong(text, message):
    with pytest.raises(ValueError, match=message.replace("(", r"\(").replace(")", r"\)")):
        parse_terminals(text)


def test_taps_keep_their_order():
    assert parse_tap("X5-X1") == ("X5", "X1")
    assert parse_tap("X1 – X4") == ("X1", "X4")
    assert format_tap(("X2", "X4")) == "X2-X4"
    with pytest.raises(ValueError, match="a tap is two terminals"):
        parse_tap("X1-X2-X3")
