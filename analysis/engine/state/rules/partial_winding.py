"""Rule ``partial_winding_short``: part of a live CT's winding is shorted."""

from __future__ import annotations

from analysis.engine import findings as fc
from analysis.engine.findings import Finding
from analysis.engine.netlist import Netlist
from analysis.engine.state.rules.common import _fmt_a
from analysis.engine.state.rules.registry import Rule
from analysis.engine.state.solve import StateEval


def check_partial(nl: Netlist, ev: StateEval, stage: str | None) -> list[Finding]:
    """``partial_winding_short``: a section of a live CT's winding is shorted, inside or outside
    the tap in use. The message gives each shorted section's current and what the tap now
    delivers against its load current (the winding solved as coupled sections of one core,
    ``windings.py``): the devices' currents change with it, which the trip rules see."""
    out = []
    for code, sections in ev.partial.items():
        ct = nl.cts[code]
        cur = {(a, b): (t, i) for a, b, t, i in ev.sections(code)}
        parts = []
        section_a = []
        for a, b, inside in sections:
            turns, i = cur[(a, b)]
            section_a.append(round(abs(i), 4))
            parts.append(
                f"{a}-{b} ({ct.positions[a]:g}-{ct.positions[b]:g} A, {turns:g} turns, "
                f"{'inside' if inside else 'outside'} the tap in use) carries {_fmt_a(abs(i))}"
            )
        delivered = ev.delivered(code)
        now = abs(delivered) if delivered is not None else 0.0
        ideal = ct.load_secondary_a
        if ev.ct_open[ct.index]:
            tail = "; the tap in use is open"
        elif ideal <= 0:
            tail = f"; the tap in use delivers {_fmt_a(now)} (no load recorded)"
        else:
            tail = (
                f"; the tap in use delivers {_fmt_a(now)} instead of {_fmt_a(ideal)} "
                f"({now / ideal * 100:.0f} %: the shorted turns take a share of the core's "
                f"ampere-turns)"
            )
        out.append(
            Finding(
                code=fc.PARTIAL_WINDING_SHORT,
                message=(
                    f"CT {code} ({ct.ratio_text}, tap {ct.in_use[0]}-{ct.in_use[1]}) has "
                    f"winding section{'s' if len(parts) > 1 else ''} shorted: "
                    f"{'; '.join(parts)}{tail}"
                ),
                ct=code,
                circuit=ev.circ_id.get(ev.ct_circ[ct.index]),
                stage=stage,
                numbers={
                    "sections": [[a, b] for a, b, _ in sections],
                    "inside_tap": [inside for _, _, inside in sections],
                    "section_a": section_a,
                    "delivered_a": round(now, 4),
                    "load_a": round(ideal, 4),
                },
            )
        )
    return out


RULE = Rule(
    name="partial_winding_short",
    codes=(fc.PARTIAL_WINDING_SHORT,),
    check=lambda nl, c: check_partial(nl, c.ev, c.stage),
    skip="by_key",
)
