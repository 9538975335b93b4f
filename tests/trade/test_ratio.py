"""Ratio strings as the trade writes them: a CT ratio is primary amperes : secondary amperes
(IEEE C57.13 nameplate form, e.g. 1200:5; common practice, no source for the accepted
spellings), and a relay's ratio setting names the same two currents."""

from __future__ import annotations

import pytest

from trade.ratio import format_ratio, parse_ratio, ratio_setting_error, ratio_value, ratios_equal


@pytest.mark.parametrize(
    ("text", "expected"),
    [("1200:5", (1200.0, 5.0)), ("300/5", (300.0, 5.0)), ("80 : 1 A", (80.0, 1.0))],
)
def test_parse_ratio_spellings(text, expected):
    assert parse_ratio(text) == expected


def test_ratio_value_and_equality_compare_turns_not_spelling():
    # 400:5 and 80:1 both step the primary current down by 80 (80 turns per primary turn).
    assert ratio_value("400:5") == 80.0 == ratio_value("80:1")
    assert ratios_equal("400:5", "80:1") and not ratios_equal("400:5", "600:5")
    assert format_ratio(400.0, 5.0) == "400:5" and format_ratio(2.5, 1.0) == "2.5:1"


@pytest.mark.parametrize("good", ["400:5", "1000:1", "300/5", " 1200 : 5 "])
def test_ratio_setting_accepts_n_to_5_or_1(good):
    assert ratio_setting_error(good) is None


@pytest.mark.parametrize(
    ("bad", "message"),
    [
        ("400 to 5", "ratio setting must look like '400:5' or '1000:1', got '400 to 5'"),
        ("400:2", "ratio setting must look like '400:5' or '1000:1', got '400:2'"),
        ("0:5", "ratio setting must have a positive primary current, got '0:5'"),
        (400, "ratio setting must look like '400:5' or '1000:1', got 400"),
    ],
)
def test_ratio_setting_refuses_with_the_value(bad, message):
    assert ratio_setting_error(bad) == message
