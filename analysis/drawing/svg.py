"""A circuit of the record drawn as SVG, laid out by graphviz ``dot``.

What is drawn, for the part of the site asked for (a circuit, a device's circuits with its
trip paths, or a CT's circuit):

- a CT as one box: its code, phase and set, every terminal position of the winding in order
  with its cumulative primary rating, the polarity terminal (the X1 end, position 0) marked
  with a filled square, the tap in use in bold with its ratio;
- every other owner of terminals (terminal block, test switch, device with its draw-out case,
  equipment cabinet) as a framed group of its terminals;
- wires (with their resistance), links, switch contacts (named by role: knife, shorting jaw,
  case contact, shorting screw, slide link), temporary jumpers, device current inputs (a box
  between their two terminals, with the burden) and ground points (a triangle);
- with a step's state: closed contacts solid, open ones dashed and labelled ``open``, the
  shorting paths in place thick and labelled ``SHORT`` with their current, lifted conductors
  dashed ``LIFTED``, removed devices ``REMOVED``, a CT that would open drawn red with a
  double-octagon ``OPEN SECONDARY`` marker (never colour alone), and the step's clamp-meter
  readings on the device inputs and shorting paths.

Layout: ``dot`` (left to right, CT side first) places the groups so that an arbitrary recorded
netlist stays readable without hand placement; the elements are oriented by their distance
from the CTs so the current's path reads left to right. Everything fed to ``dot`` is sorted,
so the same record gives the same SVG, byte for byte (``dot`` is deterministic for the same
input and version).
"""

from __future__ import annotations

import html
import re
from collections import deque
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import graphviz

import record as rec
from analysis.drawing.states import StepState
from analysis.engine.netlist import Netlist, Switch, build_netlist
from analysis.textout import op_text

# Our own neutral palette; meaning is always carried by text and line style as well.
INK = "#2b2b2b"
MUTED = "#8a8a8a"
SHORT = "#0b6e75"
DANGER = "#b3261e"
DANGER_FILL = "#fbe9e7"
FILLS = {
    "device": "#f4f1ea",
    "switch": "#eaf0f2",
    "block": "#f2f2f2",
    "equipment": "#ffffff",
    "other": "#ffffff",
}
FONT = "Helvetica"
LEFT = ' align="left"'
SPAN2 = ' colspan="2"'

_CONTACT_ROLE = {
    "test_switch_pole": ("knife", "shorting jaw"),
    "draw_out_case": ("case contact", "case short"),
    "shorting_screw": ("contact", "shorting screw"),
    "slide_link": ("slide link", "shorting contact"),
}


class DrawingError(ValueError):
    """The part of the site asked for does not exist (the message names it and what does)."""


def _natural(name: str) -> tuple[Any, ...]:
    return tuple(int(p) if p.isdigit() else p for p in re.split(r"(\d+)", name))


def _q(text: str) -> str:
    """A DOT double-quoted string."""
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n") + '"'


def _h(text: str) -> str:
    """Text for a graphviz HTML-like label."""
    return html.escape(text, quote=True)


def _sid(text: str) -> str:
    """An SVG id made of the record's code (letters, digits, ``-`` and ``_`` only)."""
    return re.sub(r"[^A-Za-z0-9_-]", "_", text)


def _amps(a: float) -> str:
    return f"{a:.2f} A"


def _cell(html_text: str, width: int, height: int = 15, *, extra: str = "") -> str:
    """A table cell of a fixed size: what changes from state to state sits in cells like
    this, so every step of a procedure gets the same layout."""
    return f'<td fixedsize="true" width="{width}" height="{height}"{extra}>{html_text}</td>'


def _two_line(const: str, var: str, width: int) -> str:
    """An HTML-like label: a line fixed for the element, then a fixed-size line for its
    state."""
    return (
        '<<table border="0" cellborder="0" cellspacing="0" cellpadding="0">'
        f"<tr><td>{_h(const)}</td></tr><tr>{_cell(_h(var), width)}</tr></table>>"
    )


def as_netlist(source: Netlist | rec.SiteRecord | Mapping[str, Any]) -> Netlist:
    """The engine netlist of ``source`` (a netlist is returned as it is)."""
    if isinstance(source, Netlist):
        return source
    return build_netlist(source)


# ---------------------------------------------------------------------------------------------
# the part of the site to draw


def _union(nl: Netlist) -> list[int]:
    """Component of every terminal over every element, whatever its state (cached)."""
    hit = nl.cache.get("drawing_union")
    if hit is not None:
        return list(hit)
    parent = list(range(nl.n_terminals))

    def find(x: int) -> int:
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    def join(a: int, b: int) -> None:
        ra, rb = find(a), find(b)
        if ra != rb:
            parent[max(ra, rb)] = min(ra, rb)

    for k in nl.links:
        join(k.a, k.b)
    for c in nl.contacts:
        join(c.a, c.b)
    for w in nl.wires:
        join(w.a, w.b)
    for i in nl.inputs:
        join(i.a, i.b)
    for ct in nl.ct_list:
        ts = sorted(ct.terminals.values())
        for t in ts[1:]:
            join(ts[0], t)
    labels = [find(t) for t in range(nl.n_terminals)]
    nl.cache["drawing_union"] = tuple(labels)
    return labels


def region(
    nl: Netlist,
    *,
    circuit: str | None = None,
    device: str | None = None,
    ct: str | None = None,
    devices: Iterable[str] = (),
) -> set[int]:
    """Terminals to draw: the parts (over every element, open or closed) holding the CT of
    ``circuit`` (``CKT-<CT code>``), ``ct`` or the terminals of ``device``, plus the trip
    paths of every device with an input there (``devices``: several devices). None of them:
    the whole site."""
    wanted = ([device] if device is not None else []) + list(devices)
    if circuit is None and not wanted and ct is None:
        return set(range(nl.n_terminals))
    seeds: set[int] = set()
    if circuit is not None:
        code = circuit.removeprefix("CKT-")
        if code not in nl.cts or not circuit.startswith("CKT-"):
            raise DrawingError(f"no circuit {circuit!r} at site {nl.site_code}")
        seeds.update(nl.cts[code].terminals.values())
    if ct is not None:
        if ct not in nl.cts:
            known = ", ".join(sorted(nl.cts)) or "none"
            raise DrawingError(f"no CT {ct!r} at site {nl.site_code} (CTs: {known})")
        seeds.update(nl.cts[ct].terminals.values())
    for code in wanted:
        dev = nl.devices.get(code)
        if dev is None:
            known = ", ".join(sorted(nl.devices)) or "none"
            raise DrawingError(f"no device {code!r} at site {nl.site_code} (devices: {known})")
        seeds.update(t for i in dev.inputs for t in (i.a, i.b))
        seeds.update(t for o in dev.outputs for t in (o.terminal, o.target))
    lab = _union(nl)
    chosen = {lab[t] for t in seeds}
    for dev in nl.devices.values():
        if any(lab[i.a] in chosen for i in dev.inputs):
            chosen.update(lab[t] for o in dev.outputs for t in (o.terminal, o.target))
    return {t for t in range(nl.n_terminals) if lab[t] in chosen}


# ---------------------------------------------------------------------------------------------
# DOT


@dataclass
class _Edge:
    a: int
    b: int
    attrs: dict[str, str]
    sort: tuple[Any, ...] = ()


@dataclass
class _Doc:
    nl: Netlist
    terms: list[int]
    node: dict[int, str]
    state: StepState | None
    highlight: frozenset[str]
    reading: dict[frozenset[str], float] = field(default_factory=dict)
    # room kept for what other states of the same procedure show (same layout every step)
    reserve_jumpers: tuple[tuple[str, str, str], ...] = ()
    reserve_open: frozenset[str] = frozenset()
    danger_lines: int = 0
    lines: list[str] = field(default_factory=list)
    edges: list[_Edge] = field(default_factory=list)


def _switch_group(code: str) -> str:
    return code.split("/", 1)[0]


def _position(doc: _Doc, sw: Switch) -> str:
    if doc.state is None:
        return sw.normal
    return str(doc.state.positions.get(sw.code, sw.normal))


def _energized(doc: _Doc, equipment: str | None) -> bool:
    if equipment is None:
        return True
    if doc.state is not None and doc.state.energized is not None:
        return equipment in doc.state.energized
    eq = doc.nl.equipment.get(equipment)
    return eq is None or eq.in_service


def _ct_node(doc: _Doc, code: str, lines: list[str]) -> None:
    nl = doc.nl
    ct = nl.cts[code]
    open_ = doc.state is not None and code in doc.state.open_cts
    live = _energized(doc, ct.equipment)
    border = DANGER if open_ else INK
    # the frame keeps its width from step to step (same layout): red, with the OPEN
    # SECONDARY row and the double-octagon marker, tells the open CT apart
    width = "3" if code in doc.highlight else "2"
    bg = DANGER_FILL if open_ else "#ffffff"
    order = sorted(ct.terminals, key=lambda n: (ct.positions[n], _natural(n)))
    polarity = order[0]
    ratio = f"{ct.tap_primary_a:g}:{ct.secondary_a:g}"
    head = f"phase {ct.phase or '?'}" + (f", set {ct.set_name}" if ct.set_name else "")
    rows = [
        f'<tr><td colspan="2"><b>{_h(code)}</b></td></tr>',
        f'<tr><td colspan="2"><font point-size="8">{_h(head)}</font></td></tr>',
    ]
    for name in order:
        t = ct.terminals[name]
        mark = (
            '<td width="7" height="7" fixedsize="true" bgcolor="#111111"></td>'
            if name == polarity
            else '<td width="7" height="7" fixedsize="true"></td>'
        )
        text = f"{_h(name)} {ct.positions[name]:g}"
        if name in ct.in_use:
            text = f"<b>{text}</b>"
            cell = f'<td port="{doc.node[t]}" align="left" border="1">{text}</td>'
        else:
            cell = f'<td port="{doc.node[t]}" align="left"><font color="{MUTED}">{text}</font></td>'
        rows.append(f"<tr>{mark}{cell}</tr>")
    tap = f"tap {ct.in_use[0]}-{ct.in_use[1]} {ratio}"
    rows.append(f'<tr><td colspan="2"><font point-size="8">{_h(tap)}</font></td></tr>')
    # the secondary current the engine injects in every state (equipment maximum load
    # through the tap; 1 A where unknown): what the branches' readings come from
    drive = f"drives {_amps(ct.load_secondary_a)}" if live else "de-energized"
    small = f'<font point-size="8">{drive}</font>'
    rows.append(f"<tr>{_cell(small, 76, extra=SPAN2)}</tr>")
    if open_ or code in doc.reserve_open:
        text = '<font color="#ffffff"><b>OPEN SECONDARY</b></font>' if open_ else ""
        fill = f' bgcolor="{DANGER}"' if open_ else ""
        rows.append(f"<tr>{_cell(text, 100, 17, extra=SPAN2 + fill)}</tr>")
    label = (
        f'<<table border="{width}" cellborder="0" cellspacing="1" cellpadding="2" '
        f'color="{border}" bgcolor="{bg}">' + "".join(rows) + "</table>>"
    )
    name = f"ct_{ct.index}"
    lines.append(
        f"  {name} [shape=plain label={label} id={_q('lk-ct-' + _sid(code))}"
        f" class={_q('lk-ct lk-danger' if open_ else 'lk-ct')}];"
    )
    if open_ or code in doc.reserve_open:
        # the marker's room is kept in every step that does not show it (style invis)
        mid = ("lk-open-" if open_ else "lk-reserved-") + _sid(code)
        style = "filled" if open_ else "invis"
        lines.append(
            f"  {name}_open [shape=doubleoctagon style={style} fillcolor={_q(DANGER)} "
            f'fontcolor="#ffffff" color={_q(DANGER)} fontsize=9 '
            f'label="OPEN\\nSECONDARY" id={_q(mid)} class="lk-danger"];'
        )
        edge_style = "dashed" if open_ else "invis"
        lines.append(
            f"  {name} -> {name}_open [dir=none style={edge_style} color={_q(DANGER)} penwidth=2];"
        )


def _owner_kind(nl: Netlist, owner: str, switch_groups: set[str]) -> str:
    if owner in nl.devices:
        return "device"
    if owner in nl.terminal_blocks:
        return "block"
    if owner in switch_groups:
        return "switch"
    if owner in nl.equipment:
        return "equipment"
    return "other"


def _owner_label(doc: _Doc, owner: str, kind: str, switches: list[Switch]) -> str:
    nl = doc.nl
    rows: list[str] = []
    if owner in doc.highlight:
        rows.append("<b>WORK ON</b>")
    rows.append(f"<b>{_h(owner)}</b>")
    if kind == "device":
        dev = nl.devices[owner]
        funcs = " ".join(dev.functions)
        rows.append(_h(f"{dev.kind} {funcs}".strip()))
        if dev.ratio_setting:
            rows.append(_h(f"set {dev.ratio_setting}"))
    elif kind == "block":
        rows.append("terminal block")
    elif kind == "equipment":
        rows.append(_h(nl.equipment[owner].kind))
    out = [f'<tr><td colspan="2">{r}</td></tr>' for r in rows]
    for sw in switches:
        kind_text = sw.kind.replace("_", " ")
        width = 10 + 6 * max(len(p) for p in sw.positions)
        out.append(
            f'<tr><td align="right">{_h(f"{sw.code} ({kind_text}):")}</td>'
            f"{_cell(_h(_position(doc, sw)), width, extra=LEFT)}</tr>"
        )
    if kind == "device":
        removed = doc.state is not None and owner in doc.state.removed
        mark = "<b>REMOVED</b>" if removed else ""
        out.append(f"<tr>{_cell(mark, 64, 17, extra=SPAN2)}</tr>")
    return (
        '<<table border="0" cellborder="0" cellspacing="0" cellpadding="1">'
        + "".join(out)
        + "</table>>"
    )


def _terminal_node(doc: _Doc, t: int, outputs: Mapping[int, str]) -> str:
    name = doc.nl.terminals[t]
    short = name.split(":", 1)[1]
    label = short
    if t in outputs:
        label = f"{short}\n{outputs[t]}"
    return (
        f'    {doc.node[t]} [label={_q(label)} id={_q("lk-t-" + _sid(name))} class="lk-terminal"];'
    )


def _reading(doc: _Doc, a: int, b: int) -> float | None:
    key = frozenset((doc.nl.terminals[a], doc.nl.terminals[b]))
    return doc.reading.get(key)


def _end(doc: _Doc, t: int) -> str:
    owner = doc.nl.owner(t)
    if owner in doc.nl.cts:
        return f"ct_{doc.nl.cts[owner].index}:{doc.node[t]}"
    return doc.node[t]


def _contact_edges(doc: _Doc, inside: set[int]) -> None:
    for sw in doc.nl.switches.values():
        pos = _position(doc, sw)
        role_normal, role_short = _CONTACT_ROLE.get(sw.kind, ("contact", "shorting contact"))
        for k, c in enumerate(sw.contacts):
            if c.a not in inside:
                continue
            closed = pos in c.closed_in
            normally = sw.normal in c.closed_in
            role = role_normal if normally else role_short
            eid = _q(f"lk-contact-{_sid(sw.code)}-{k}")
            if closed and not normally:
                amps = _reading(doc, c.a, c.b)
                label = "SHORT" + (f" {_amps(amps)}" if amps is not None else "")
                attrs = {
                    "color": SHORT,
                    "fontcolor": SHORT,
                    "penwidth": "3.5",
                    "style": "bold",
                    "class": '"lk-contact lk-closed lk-short"',
                }
            elif closed:
                label = "closed"
                attrs = {
                    "color": INK,
                    "penwidth": "2.2",
                    "class": '"lk-contact lk-closed"',
                }
            else:
                label = "open"
                attrs = {
                    "color": MUTED,
                    "fontcolor": MUTED,
                    "style": "dashed",
                    "class": '"lk-contact lk-open"',
                }
            attrs["label"] = _two_line(f"{sw.code} {role}", label, 74)
            attrs["id"] = eid
            doc.edges.append(_Edge(c.a, c.b, attrs, ("c", _natural(sw.code), k)))


def _lead_text(spec: rec.Wire) -> str:
    """What a wire is: its size and length as recorded (``10AWG 310 ft``), or ``lead``."""
    if spec.length_m is not None:
        length = f"{spec.length_m:g} m"
    elif spec.length_ft is not None:
        length = f"{spec.length_ft:g} ft"
    else:
        length = ""
    material = "" if (spec.material or "cu") == "cu" else f" {spec.material}"
    return " ".join(x for x in (f"{spec.size}{material}".strip(), length) if x) or "lead"


def _lifted(doc: _Doc, a: int, b: int) -> bool:
    if doc.state is None:
        return False
    return frozenset((doc.nl.terminals[a], doc.nl.terminals[b])) in doc.state.lifted


def _dot(doc: _Doc, title: str | None) -> str:
    nl = doc.nl
    inside = set(doc.terms)
    switch_groups = {_switch_group(code) for code in nl.switches}
    lines = doc.lines
    lines.append("digraph circuit {")
    lines.append(
        f"  graph [rankdir=LR nodesep=0.18 ranksep=0.55 fontname={_q(FONT)} fontsize=10 "
        f'labelloc=t labeljust=l pad=0.2 bgcolor="#ffffff"];'
    )
    lines.append(
        f"  node [fontname={_q(FONT)} fontsize=9 shape=box style=rounded height=0.2 "
        f'width=0.3 margin="0.05,0.02" color={_q(INK)}];'
    )
    lines.append(f"  edge [fontname={_q(FONT)} fontsize=8 dir=none color={_q(INK)}];")
    lines.append(f"  label=<{_legend(doc, title)}>;")

    outputs: dict[int, str] = {}
    for o in nl.outputs:
        if o.terminal in inside:
            outputs[o.terminal] = f"{o.name} output, operates {nl.terminals[o.target]}"

    by_owner: dict[str, list[int]] = {}
    for t in doc.terms:
        by_owner.setdefault(nl.owner(t), []).append(t)
    for inp in nl.inputs:
        # an input's box sits in its device's frame, even where the record wires the input
        # between terminals of other owners (a block's, say)
        if inp.a in inside:
            by_owner.setdefault(inp.device, [])
    switches_of: dict[str, list[Switch]] = {}
    for sw in nl.switches.values():
        if any(c.a in inside for c in sw.contacts):
            # listed with its group (TS-1 for TS-1/A) where the group has terminals drawn,
            # else with the owner of its first contact (a case's contacts are the relay's)
            group = _switch_group(sw.code)
            owner = group if group in by_owner else nl.owner(sw.contacts[0].a)
            switches_of.setdefault(owner, []).append(sw)
    for owner in sorted(by_owner, key=_natural):
        if owner in nl.cts:
            _ct_node(doc, owner, lines)
            continue
        kind = _owner_kind(nl, owner, switch_groups)
        sws = sorted(switches_of.get(owner, []), key=lambda s: _natural(s.code))
        removed = doc.state is not None and owner in doc.state.removed
        style = "rounded,dashed" if removed else "rounded"
        pen = "3" if owner in doc.highlight else "1"
        lines.append(f"  subgraph {_q('cluster_' + _sid(owner))} {{")
        lines.append(
            f"    graph [label={_owner_label(doc, owner, kind, sws)} style={_q(style)} "
            f"fillcolor={_q(FILLS[kind])} bgcolor={_q(FILLS[kind])} penwidth={pen} "
            f"color={_q(INK)} id={_q('lk-' + kind + '-' + _sid(owner))} "
            f"class={_q('lk-' + kind + (' lk-removed' if removed else ''))}];"
        )
        for t in sorted(by_owner[owner], key=lambda t: _natural(nl.terminals[t])):
            lines.append(_terminal_node(doc, t, outputs))
        if kind == "device":
            for inp in nl.devices[owner].inputs:
                if inp.a not in inside:
                    continue
                amps = _reading(doc, inp.a, inp.b) if not removed else None
                z = abs(inp.z_ohm)
                text = (
                    '<<table border="0" cellborder="0" cellspacing="0" cellpadding="0">'
                    f"<tr><td>{_h(f'input {inp.name}')}</td></tr>"
                    f"<tr><td>{_h(f'{z:.3g} ohm')}</td></tr>"
                    f"<tr>{_cell('' if amps is None else _amps(amps), 48)}</tr></table>>"
                )
                nid = f"in_{inp.index}"
                lines.append(
                    f"    {nid} [label={text} style={_q('filled' if not removed else 'dashed')}"
                    f' fillcolor="#ffffff" penwidth=1.4 '
                    f"id={_q('lk-input-' + _sid(owner) + '-' + _sid(inp.name))} "
                    f'class="lk-input"];'
                )
        lines.append("  }")

    # grounds
    for g in sorted((g for g in nl.grounds if g in inside), key=lambda t: nl.terminals[t]):
        gid = f"gnd_{g}"
        lines.append(
            f'  {gid} [shape=invtriangle label="" xlabel="ground" width=0.25 height=0.2 '
            f'style=filled fillcolor="#555555" id={_q("lk-ground-" + _sid(nl.terminals[g]))} '
            f'class="lk-ground"];'
        )
        doc.edges.append(_Edge(g, -1, {"penwidth": "1.5", "_head": gid}, ("g", nl.terminals[g])))

    specs = nl.record.wires if nl.record is not None else ()
    for w in nl.wires:
        if w.a not in inside:
            continue
        lead = _lead_text(specs[w.index]) if w.index < len(specs) else "lead"
        if _lifted(doc, w.a, w.b):
            attrs = {"style": "dashed", "color": MUTED, "fontcolor": MUTED}
            attrs["label"] = _two_line(lead, "LIFTED", 66)
        else:
            attrs = {"penwidth": "1.3"}
            attrs["label"] = _two_line(lead, f"{w.r_ohm:.3g} ohm", 66)
        attrs["id"] = _q(f"lk-wire-{w.index}")
        attrs["class"] = '"lk-wire"'
        doc.edges.append(_Edge(w.a, w.b, attrs, ("w", w.index)))
    for k in nl.links:
        if k.a not in inside:
            continue
        if _lifted(doc, k.a, k.b):
            attrs = {"style": "dashed", "color": MUTED, "fontcolor": MUTED}
            attrs["label"] = f'<<table border="0"><tr>{_cell("LIFTED", 44)}</tr></table>>'
        else:
            attrs = {"penwidth": "2.4"}
            attrs["label"] = f'<<table border="0"><tr>{_cell("", 44)}</tr></table>>'
        attrs["id"] = _q(f"lk-link-{k.index}")
        attrs["class"] = '"lk-link"'
        doc.edges.append(_Edge(k.a, k.b, attrs, ("l", k.index)))
    _contact_edges(doc, inside)
    placed = set(doc.state.jumpers) if doc.state is not None else set()
    for jumper in sorted(placed | set(doc.reserve_jumpers)):
        jid, a_name, b_name = jumper
        a, b = nl.index.get(a_name), nl.index.get(b_name)
        if a is None or b is None or a not in inside:
            continue
        amps = _reading(doc, a, b) if jumper in placed else None
        label = "SHORT" + (f" {_amps(amps)}" if amps is not None else "")
        shown = jumper in placed
        doc.edges.append(
            _Edge(
                a,
                b,
                {
                    "label": _two_line(f"jumper {jid}", label, 74),
                    "color": SHORT,
                    "fontcolor": SHORT,
                    "style": '"bold,dashed"' if shown else "invis",
                    "penwidth": "3.5",
                    "id": _q(f"lk-jumper-{_sid(jid)}" if shown else f"lk-reserved-{_sid(jid)}"),
                    "class": '"lk-jumper lk-short"' if shown else '"lk-reserved"',
                },
                ("j", jid, a_name, b_name),
            )
        )
    for inp in nl.inputs:
        if inp.a not in inside:
            continue
        removed = doc.state is not None and inp.device in doc.state.removed
        attrs = {"penwidth": "1.3"}
        if removed:
            attrs = {"style": "dotted", "color": MUTED}
        doc.edges.append(
            _Edge(inp.a, -1, {**attrs, "_head": f"in_{inp.index}"}, ("i", 0, inp.index))
        )
        doc.edges.append(
            _Edge(-1, inp.b, {**attrs, "_tail": f"in_{inp.index}"}, ("i", 1, inp.index))
        )

    _emit_edges(doc)
    lines.append("}")
    return "\n".join(lines) + "\n"


def _distances(doc: _Doc) -> dict[int, int]:
    """Hops of every terminal from the nearest CT terminal, over the drawn elements."""
    adj: dict[int, list[int]] = {}
    for e in doc.edges:
        a = e.a
        b = e.b
        if a < 0 or b < 0:
            continue
        adj.setdefault(a, []).append(b)
        adj.setdefault(b, []).append(a)
    for inp in doc.nl.inputs:
        adj.setdefault(inp.a, []).append(inp.b)
        adj.setdefault(inp.b, []).append(inp.a)
    dist: dict[int, int] = {}
    queue: deque[int] = deque()
    for ct in doc.nl.ct_list:
        for t in sorted(ct.terminals.values()):
            if t in doc.node:
                dist[t] = 0
                queue.append(t)
    while queue:
        t = queue.popleft()
        for u in sorted(adj.get(t, ())):
            if u not in dist:
                dist[u] = dist[t] + 1
                queue.append(u)
    return dist


def _emit_edges(doc: _Doc) -> None:
    dist = _distances(doc)
    far = 1 << 20
    for e in sorted(doc.edges, key=lambda e: e.sort):
        attrs = dict(e.attrs)
        head_node = attrs.pop("_head", None)
        tail_node = attrs.pop("_tail", None)
        if head_node is not None:
            tail, head = _end(doc, e.a), head_node
        elif tail_node is not None:
            tail, head = tail_node, _end(doc, e.b)
        else:
            ka = (dist.get(e.a, far), _natural(doc.nl.terminals[e.a]))
            kb = (dist.get(e.b, far), _natural(doc.nl.terminals[e.b]))
            a, b = (e.a, e.b) if ka <= kb else (e.b, e.a)
            tail, head = _end(doc, a), _end(doc, b)
        text = " ".join(
            f"{k}={v if v.startswith((chr(34), '<')) else _q(v)}" for k, v in sorted(attrs.items())
        )
        doc.lines.append(f"  {tail} -> {head} [{text}];")


def _legend(doc: _Doc, title: str | None) -> str:
    rows = []
    if title:
        rows.append(f'<tr><td align="left"><b>{_h(title)}</b></td></tr>')
    st = doc.state
    if st is not None:
        what = "normal state" if st.op is None else op_text(dict(st.op))
        rows.append(f"<tr>{_cell(_h(f'Step {st.step}: {what}'), 560, 18, extra=LEFT)}</tr>")
        for k in range(max(doc.danger_lines, len(st.dangers))):
            text = (
                f'<font color="{DANGER}"><b>DANGER</b> {_h(st.dangers[k])}</font>'
                if k < len(st.dangers)
                else ""
            )
            rows.append(f"<tr>{_cell(text, 560, 17, extra=LEFT)}</tr>")
    else:
        rows.append(
            '<tr><td align="left">Normal state (every switch in its normal position)</td></tr>'
        )
    legend = (
        "Solid dark line: closed contact, link or wire (with its resistance).",
        "Dashed grey 'open': open contact. Thick blue-green 'SHORT': a shorting path in place,"
        " with its current.",
        "Red 'OPEN SECONDARY' double octagon: a CT that would open.",
        "Black square: CT polarity terminal (position 0: X1 or S1); bold boxed: the tap in use."
        " Triangle: ground point.",
    )
    text = "".join(f'{_h(line)}<br align="left"/>' for line in legend)
    rows.append(f'<tr><td align="left"><font point-size="8">{text}</font></td></tr>')
    return '<table border="0" cellborder="0" cellspacing="0">' + "".join(rows) + "</table>"


def _readings(state: StepState | None) -> dict[frozenset[str], float]:
    out: dict[frozenset[str], float] = {}
    if state is None:
        return out
    for r in state.readings:
        between = r.get("between") or ()
        if len(between) == 2 and r.get("a") is not None:
            out[frozenset(str(x) for x in between)] = float(r["a"])
    return out


def circuit_dot(
    source: Netlist | rec.SiteRecord | Mapping[str, Any],
    *,
    circuit: str | None = None,
    device: str | None = None,
    ct: str | None = None,
    state: StepState | None = None,
    highlight: Iterable[str] = (),
    title: str | None = None,
    devices: Iterable[str] = (),
    layout_states: Sequence[StepState] = (),
) -> str:
    """The DOT text ``circuit_svg`` lays out (see there)."""
    nl = as_netlist(source)
    devices = tuple(devices)
    terms = sorted(
        region(nl, circuit=circuit, device=device, ct=ct, devices=devices),
        key=lambda t: _natural(nl.terminals[t]),
    )
    node = {t: f"n{k}" for k, t in enumerate(terms)}
    doc = _Doc(
        nl=nl,
        terms=terms,
        node=node,
        state=state,
        highlight=frozenset(highlight),
        reading=_readings(state),
        reserve_jumpers=tuple(sorted({j for s in layout_states for j in s.jumpers})),
        reserve_open=frozenset(c for s in layout_states for c in s.open_cts),
        danger_lines=max((len(s.dangers) for s in layout_states), default=0),
    )
    return _dot(doc, title or _default_title(nl, circuit, device, ct, devices))


def _default_title(
    nl: Netlist, circuit: str | None, device: str | None, ct: str | None, devices: Iterable[str]
) -> str:
    named = ([device] if device else []) + list(devices)
    what = (
        circuit
        or (("device " if len(named) == 1 else "devices ") + ", ".join(named) if named else None)
        or (f"CT {ct}" if ct else None)
    )
    return f"{nl.site_code} " + (what or "whole site")


def circuit_svg(
    source: Netlist | rec.SiteRecord | Mapping[str, Any],
    *,
    circuit: str | None = None,
    device: str | None = None,
    ct: str | None = None,
    state: StepState | None = None,
    highlight: Iterable[str] = (),
    title: str | None = None,
    devices: Iterable[str] = (),
    layout_states: Sequence[StepState] = (),
) -> str:
    """The circuit as an SVG document (text, no XML prolog), laid out by graphviz ``dot``.

    ``source``: a netlist, a site record or a site document. ``circuit`` (``CKT-<CT code>``),
    ``device`` (or several ``devices``) or ``ct`` choose the part to draw (none: the whole
    site); ``layout_states``: the other states of the same procedure, whose jumpers, open-CT
    markers and danger lines get room (hidden) here too, so every step has the same layout;
    ``state``: a step's state (``step_states``), else the normal state; ``highlight``: codes
    drawn with a heavy frame (the device worked on). Raises ``DrawingError`` for an unknown
    circuit, device or CT. The same input gives the same bytes."""
    nl = as_netlist(source)
    devices = tuple(devices)
    title = title or _default_title(nl, circuit, device, ct, devices)
    dot = circuit_dot(
        nl,
        circuit=circuit,
        device=device,
        ct=ct,
        state=state,
        highlight=highlight,
        title=title,
        devices=devices,
        layout_states=layout_states,
    )
    try:
        raw = graphviz.pipe("dot", "svg", dot.encode("utf-8"), quiet=True).decode("utf-8")
    except graphviz.ExecutableNotFound as exc:
        raise RuntimeError(
            "circuit drawings need graphviz's `dot` program (Debian: apt-get install graphviz)"
        ) from exc
    start = raw.find("<svg")
    svg = raw[start:]
    # comments name the graphviz version and the graph: not needed inline
    svg = re.sub(r"<!--.*?-->\n?", "", svg, flags=re.S)
    # graphviz writes "-" as "&#45;" (for comments' sake); plain is easier to select on
    svg = svg.replace("&#45;", "-")
    label = _h(title)
    svg = svg.replace("<svg ", f'<svg role="img" aria-label="{label}" class="lk-drawing" ', 1)
    return svg
