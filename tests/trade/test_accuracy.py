"""Accuracy class parsing and capability at a tap (IEEE C57.13, IEC 61869-2)."""

from __future__ import annotations

import pytest

from trade.accuracy import (
    IEC_METERING,
    IEC_PROTECTION,
    IEC_PX,
    IEC_TRANSIENT,
    IEEE_METERING,
    IEEE_RELAYING,
    effective_alf,
    parse_accuracy,
)


@pytest.mark.parametrize(
    ("text", "canonical", "letter", "volts"),
    [
        ("C400", "C400", "C", 400),
        ("c800", "C800", "C", 800),
        ("K200", "K200", "K", 200),
        ("T100", "T100", "T", 100),
        ("10C400", "C400", "C", 400),
        ("C 10", "C10", "C", 10),
        ("class C200", "C200", "C", 200),
    ],
)
def test_ieee_relaying(text, canonical, letter, volts):
    acc = parse_accuracy(text)
    assert (acc.text, acc.standard, acc.letter, acc.class_voltage_v) == (
        canonical,
        IEEE_RELAYING,
        letter,
        volts,
    )
    assert acc.is_relaying
    assert acc.criterion_limit() == 20  # C37.110 (S7)


def test_ieee_relaying_non_standard_voltage_is_an_error():
    # S1: C57.13 classes are C10, C20, C50, C100, C200, C400, C800.
    with pytest.raises(ValueError, match="not an IEEE C57.13 class voltage"):
        parse_accuracy("C300")


@pytest.mark.parametrize(
    ("text", "canonical", "error_pct", "burden"),
    [
        ("0.3B0.9", "0.3B0.9", 0.3, 0.9),
        ("0.15B1.8", "0.15B1.8", 0.15, 1.8),
        ("0.6 B-2", "0.6B2", 0.6, 2.0),
        ("1.2B4", "1.2B4", 1.2, 4.0),
        ("0.15SB0.5", "0.15SB0.5", 0.15, 0.5),
    ],
)
def test_ieee_metering(text, canonical, error_pct, burden):
    acc = parse_accuracy(text)
    assert acc.standard == IEEE_METERING and acc.text == canonical
    assert acc.error_pct == error_pct and acc.standard_burden_ohm == burden
    assert not acc.is_relaying
    # S5, S6 scaling applied to the metering burden too.
    assert acc.standard_burden_ohm_at_tap(5, 0.5) == pytest.approx(burden / 2)


def test_ieee_metering_needs_a_standard_burden():
    with pytest.raises(ValueError, match="standard burden"):
        parse_accuracy("0.3B0.7")


@pytest.mark.parametrize(
    ("text", "va", "err", "alf", "letter"),
    [("5P20", 15, 5, 20, "P"), ("10P10", 30, 10, 10, "P"), ("5PR20", 10, 5, 20, "PR")],
)
def test_iec_p_classes(text, va, err, alf, letter):
    acc = parse_accuracy(text, rated_burden_va=va)
    assert acc.standard == IEC_PROTECTION and acc.letter == letter
    assert (acc.error_pct, acc.alf, acc.rated_burden_va) == (err, alf, va)
    # S10: rated burden S_n / I_n²; terminal voltage at ALF × I_n into it.
    assert acc.rated_burden_ohm(5) == pytest.approx(va / 25)
    assert acc.rated_burden_ohm(1) == pytest.approx(va)
    assert acc.voltage_at_tap_v(5, 1.0) == pytest.approx(alf * 5 * va / 25)
    assert acc.criterion_limit() == alf


def test_iec_p_burden_in_text():
    acc = parse_accuracy("15VA 5P20")
    assert acc.text == "5P20" and acc.rated_burden_va == 15
    assert parse_accuracy("5P20 15 VA").rated_burden_va == 15
    with pytest.raises(ValueError, match="rated_burden_va"):
        parse_accuracy("15VA 5P20", rated_burden_va=30)


def test_iec_p_error_must_be_5_or_10():
    with pytest.raises(ValueError, match="5P or 10P"):
        parse_accuracy("3P20")


def test_iec_accuracy_limit_emf_at_tap():
    # S10: E_al = ALF · I_n · (R_ct + R_b,rated); at half the turns both R_ct and R_b halve.
    acc = parse_accuracy("5P20", rated_burden_va=15)
    assert acc.saturation_emf_at_tap_v(5, 1.0, 0.2) == pytest.approx(20 * 5 * 0.8)
    assert acc.saturation_emf_at_tap_v(5, 0.5, 0.1) == pytest.approx(20 * 5 * 0.4)


@pytest.mark.parametrize("text", ["PX", "pxr", "Class PX"])
def test_px(text):
    acc = parse_accuracy(text, knee_v=250)
    assert acc.standard == IEC_PX and acc.knee_v == 250
    assert acc.rated_burden_ohm(5) is None
    assert acc.saturation_emf_at_tap_v(1, 0.5, 2.0) == pytest.approx(125.0)


def test_transient_classes_are_recognised():
    assert parse_accuracy("TPY").standard == IEC_TRANSIENT


@pytest.mark.parametrize(
    ("text", "canonical", "fs"),
    [
        ("0.1", "0.1", None),
        ("0.2", "0.2", None),
        ("0.2S", "0.2S", None),
        ("0,5", "0.5", None),
        ("0.5s", "0.5S", None),
        ("1", "1", None),
        ("3", "3", None),
        ("5", "5", None),
        ("0.5 FS5", "0.5", 5),
        ("cl. 0.2S FS10", "0.2S", 10),
    ],
)
def test_iec_metering(text, canonical, fs):
    acc = parse_accuracy(text, rated_burden_va=10)
    assert acc.standard == IEC_METERING and acc.text == canonical
    assert acc.security_factor == fs
    assert acc.rated_burden_ohm(5) == pytest.approx(0.4)


@pytest.mark.parametrize("bad", ["", "   ", "C", "X400", "0.4", "5P", "B0.9", "C400 C800", "abc"])
def test_not_a_class(bad):
    with pytest.raises(ValueError):
        parse_accuracy(bad)


def test_not_a_class_message_lists_the_forms():
    with pytest.raises(ValueError, match=r"is not a class: expected IEEE relaying C10\.\.C800"):
        parse_accuracy("Q99")


def test_effective_alf_rises_as_burden_falls():
    # Invariant of the ALF' formula (S10 practice): lighter burden → larger ALF'; at the rated
    # burden ALF' = ALF.
    values = [
        effective_alf(alf=20, winding_ohm=0.2, rated_burden_ohm=0.6, burden_ohm=b)
        for b in (0.1, 0.3, 0.6, 1.2)
    ]
    assert values == sorted(values, reverse=True)
    assert values[2] == pytest.approx(20)
