"""Plots of CT ratings as PNG or SVG bytes (matplotlib, Agg backend, no Django).

- :func:`excitation_plot`: the excitation curve at the tap in use on log-log axes, the IEEE
  (45° tangent, S9) and IEC (10 %/50 %, S10) knee points, and the e.m.f. the site's fault level
  requires (symmetrical and fully offset, C37.110).
- :func:`burden_plot`: the burden of one CT by element (leads, each device input, winding).
"""

from __future__ import annotations

import io
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

import matplotlib
import numpy as np

matplotlib.use("Agg")

from matplotlib.figure import Figure

from analysis.engine.ratings.excitation import KneePoint, excitation_curve, voltage_at
from analysis.engine.ratings.report import ExcitationPlotInputs, OperatingPoint

FORMATS = ("png", "svg")
FIGSIZE_IN = (7.0, 5.0)
DPI = 110

_CASE_LABEL = {"ground_fault": "ground fault", "phase_fault": "phase fault"}


def _render(fig: Figure, fmt: str) -> bytes:
    if fmt not in FORMATS:
        raise ValueError(f"plot format must be one of {', '.join(FORMATS)}, got {fmt!r}")
    buf = io.BytesIO()
    fig.savefig(buf, format=fmt, dpi=DPI, bbox_inches="tight")
    return buf.getvalue()


def _knee(value: Any) -> KneePoint | None:
    if value is None or isinstance(value, KneePoint):
        return value
    return KneePoint(voltage_v=float(value["voltage_v"]), current_a=float(value["current_a"]))


def _points(values: Iterable[Any]) -> list[OperatingPoint]:
    out = []
    for p in values:
        out.append(p if isinstance(p, OperatingPoint) else OperatingPoint(**p))
    return out


def excitation_plot(inputs: ExcitationPlotInputs | Mapping[str, Any], fmt: str = "png") -> bytes:
    """The excitation curve at the tap in use with both knee points and the required points.

    ``inputs`` is :func:`analysis.engine.ratings.excitation_plot_inputs`'s result (or the same
    as a dict: ``title``, ``curve_at_tap`` [[I_A, V], ...], ``knee_ieee`` / ``knee_iec``
    {voltage_v, current_a} or None, ``operating_points`` [{case, symmetrical_v,
    symmetrical_current_a, required_v, required_current_a}]). ``fmt`` is "png" or "svg".
    """
    if isinstance(inputs, Mapping):
        inputs = ExcitationPlotInputs(
            title=str(inputs.get("title", "")),
            curve_at_tap=[list(map(float, p)) for p in inputs["curve_at_tap"]],
            knee_ieee=_knee(inputs.get("knee_ieee")),
            knee_iec=_knee(inputs.get("knee_iec")),
            operating_points=_points(inputs.get("operating_points") or ()),
        )
    if len(inputs.curve_at_tap) < 2:
        raise ValueError("an excitation plot needs at least two curve points")
    current = sorted(p[0] for p in inputs.curve_at_tap)
    volts = sorted(p[1] for p in inputs.curve_at_tap)

    fig = Figure(figsize=FIGSIZE_IN)
    ax = fig.subplots()
    # The knee points sit on the log-log PCHIP interpolant, so draw that, with the measured
    # points as markers.
    curve = excitation_curve(inputs.curve_at_tap)
    grid = np.geomspace(current[0], current[-1], 200)
    grid = np.clip(grid, current[0], current[-1])
    smooth = [voltage_at(curve, float(i)) for i in grid]
    ax.loglog(grid, smooth, "-", color="#1f4e79", lw=2, label="excitation at tap")
    ax.loglog(current, volts, "o", color="#1f4e79", ms=4, label="measured points (scaled)")
    if inputs.knee_ieee is not None:
        k = inputs.knee_ieee
        ax.plot(
            k.current_a,
            k.voltage_v,
            "s",
            ms=9,
            color="#c55a11",
            zorder=5,
            label=f"IEEE knee (45°) {k.voltage_v:.4g} V",
        )
    if inputs.knee_iec is not None:
        k = inputs.knee_iec
        ax.plot(
            k.current_a,
            k.voltage_v,
            "D",
            ms=8,
            color="#548235",
            zorder=5,
            label=f"IEC knee (10 %/50 %) {k.voltage_v:.4g} V",
        )
    styles = {"ground_fault": "#7030a0", "phase_fault": "#bf0041"}
    for op in inputs.operating_points:
        color = styles.get(op.case, "#404040")
        name = _CASE_LABEL.get(op.case, op.case)
        if op.symmetrical_current_a is not None:
            ax.plot(
                op.symmetrical_current_a,
                op.symmetrical_v,
                "^",
                ms=9,
                color=color,
                zorder=6,
                label=f"{name}: I_f·Z_s {op.symmetrical_v:.4g} V",
            )
        else:
            ax.axhline(
                op.symmetrical_v,
                color=color,
                ls=":",
                lw=1.2,
                label=f"{name}: I_f·Z_s {op.symmetrical_v:.4g} V (off curve)",
            )
        ax.axhline(
            op.required_v,
            color=color,
            ls="--",
            lw=1.2,
            label=f"{name}: (1+X/R)·I_f·Z_s {op.required_v:.4g} V",
        )
    ax.set_xlabel("exciting current (A r.m.s.)")
    ax.set_ylabel("secondary e.m.f. (V r.m.s.)")
    ax.set_title(inputs.title or "Excitation curve at the tap in use")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=8, loc="lower right")
    return _render(fig, fmt)


def burden_plot(
    elements: Sequence[tuple[str, complex | float] | tuple[str, str, complex | float]],
    winding_ohm: float | None,
    fmt: str = "png",
    *,
    title: str = "",
) -> bytes:
    """Bar chart of one CT's burden by element, ohms.

    ``elements``: the engine's burden elements as ``(label, ohms)`` or ``(label, kind, ohms)``
    (complex ohms split into R and X bars); ``winding_ohm``: the CT winding at the tap, drawn as
    its own bar (None to leave it out). ``fmt`` is "png" or "svg".
    """
    labels: list[str] = []
    r: list[float] = []
    x: list[float] = []
    for element in elements:
        label, value = (element[0], element[-1])
        z = complex(value)
        labels.append(str(label))
        r.append(z.real)
        x.append(z.imag)
    if winding_ohm is not None:
        labels.append("CT winding")
        r.append(float(winding_ohm))
        x.append(0.0)
    if not labels:
        raise ValueError("a burden plot needs at least one element")
    fig = Figure(figsize=(max(5.0, 0.7 * len(labels) + 2.5), 4.5))
    ax = fig.subplots()
    pos = list(range(len(labels)))
    has_x = any(abs(v) > 1e-12 for v in x)
    width = 0.4 if has_x else 0.6
    colors = ["#7f7f7f" if lab == "CT winding" else "#1f4e79" for lab in labels]
    ax.bar([p - (width / 2 if has_x else 0) for p in pos], r, width, color=colors, label="R")
    if has_x:
        ax.bar([p + width / 2 for p in pos], x, width, color="#c55a11", label="X")
        ax.legend(fontsize=8)
    total = complex(sum(r), sum(x))
    ax.set_xticks(pos, labels, rotation=30, ha="right", fontsize=8)
    ax.set_ylabel("ohms")
    ax.set_title(
        (title + "\n" if title else "") + f"total {abs(total):.4g} Ω "
        f"({total.real:.4g} + j{total.imag:.4g})",
        fontsize=10,
    )
    ax.grid(True, axis="y", alpha=0.3)
    return _render(fig, fmt)
