"""Plots render: PNG opened with Pillow (size, not blank), SVG is SVG."""

from __future__ import annotations

import io
from dataclasses import asdict

import numpy as np
import pytest
from PIL import Image

from analysis.engine.ratings import excitation_plot_inputs
from analysis.plots import burden_plot, excitation_plot
from tests.analysis.engine.test_ratings_checks import BURDENS, site_doc


def _image(png: bytes) -> np.ndarray:
    img = Image.open(io.BytesIO(png))
    assert img.format == "PNG"
    assert img.width >= 400 and img.height >= 300
    return np.asarray(img.convert("L"), dtype=float)


def _not_blank(pixels: np.ndarray) -> None:
    # A blank canvas is one colour; a drawn plot has dark ink over a good share of pixels.
    assert pixels.std() > 10
    assert (pixels < 128).mean() > 0.005


def test_excitation_png():
    inputs = excitation_plot_inputs(site_doc(), "CB-1-A", burdens=BURDENS["CB-1-A"])
    _not_blank(_image(excitation_plot(inputs, "png")))


def test_excitation_from_a_dict_and_svg():
    inputs = asdict(excitation_plot_inputs(site_doc(), "CB-1-A", burdens=BURDENS["CB-1-A"]))
    svg = excitation_plot(inputs, fmt="svg")
    assert svg.lstrip().startswith(b"<?xml") and b"<svg" in svg
    assert b"IEEE knee" in svg  # matplotlib writes each text as a comment beside its path


def test_excitation_plot_differs_when_knees_are_left_out():
    inputs = excitation_plot_inputs(site_doc(), "CB-1-A", burdens=BURDENS["CB-1-A"])
    with_knees = _image(excitation_plot(inputs))
    bare = asdict(inputs) | {"knee_ieee": None, "knee_iec": None, "operating_points": []}
    without = _image(excitation_plot(bare))
    assert with_knees.shape != without.shape or np.abs(with_knees - without).sum() > 0


def test_burden_png_and_svg():
    elements = [
        ("leads CB-1-A", "lead", 0.6),
        ("R-1:IA", "device_input", 0.008 + 0.001j),
        ("M-1:IA", 0.05),
    ]
    _not_blank(_image(burden_plot(elements, 0.2, "png")))
    assert b"<svg" in burden_plot(elements, None, "svg", title="CB-1-A ground fault")


def test_bad_format_and_empty_input():
    with pytest.raises(ValueError, match="png, svg"):
        burden_plot([("leads", 0.5)], 0.2, "gif")
    with pytest.raises(ValueError):
        burden_plot([], None)
