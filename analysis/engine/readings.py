"""Expected readings: what a crew would read with a clamp meter in a solved state.

For each device input in place, the current through it (the nodal solve gives it directly);
for each *shorting path* in place (a switch contact that is closed now but open in its
switch's normal position, such as a test-switch shorting jaw, a shorting screw or the
shorting contacts of a withdrawn draw-out case, and every temporary jumper), the current
through that element. This is what "confirm the short" of the cautions means in numbers.

Zero-impedance elements are merged into nodes before the solve (``topology``), so their
currents are not unknowns of it. They are recovered afterwards from Kirchhoff's current law
inside each merged node: every terminal of the node receives a known current from the
impedance branches and CT windings attached to it (``s``), and the zero-impedance elements
joining the node's terminals must carry it away. With the elements as equal conductances
(potentials ``φ``, Laplacian ``L`` of the node's element graph), ``L φ = s`` and the current
of an element a→b is ``φa − φb``. Where the elements form a tree (the usual case: a jaw onto
a shorting bar bonded to the neutral) this is the only current distribution that satisfies
KCL, whatever the conductances; where they form a loop (a jumper in parallel with a jaw),
the split between the parallel paths depends on contact resistances nobody records, and the
equal split is reported (the sum over the parallel paths is exact).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from analysis.engine.netlist import Netlist
from analysis.engine.topology import components

# Clamp meters on CT circuits read to 0.01 A at best; more digits would be false precision.
DECIMALS = 2


def _a(x: float) -> float:
    return round(float(x), DECIMALS) + 0.0  # + 0.0 turns -0.0 into 0.0


def input_readings(nl: Netlist, ev: Any, devices: set[str] | None = None) -> list[dict[str, Any]]:
    """The current in each input of the devices in place (``devices``: only theirs)."""
    removed = ev.state.removed
    cur = ev.inp_abs
    return [
        {"between": [nl.terminals[i.a], nl.terminals[i.b]], "a": _a(cur[i.index])}
        for i in nl.inputs
        if i.device not in removed and (devices is None or i.device in devices)
    ]


def shorting_currents(nl: Netlist, ev: Any) -> list[tuple[str, tuple[str, str], float, bool]]:
    """(element, its two terminals, current magnitude in A, whether it is in parallel) of
    every shorting path in place: contacts closed now that are open in their switch's normal
    position (element: the switch code), and temporary jumpers (element: the jumper id).

    An element is *in parallel* when it lies on a loop of zero-impedance elements (it is no
    bridge of its node's element graph: the effective resistance between its ends, with unit
    conductances, is below 1); its share of the current is then the equal-split estimate."""
    b = ev._b
    row = ev._row
    st = ev.state
    n_t = b.n_terminals
    z = b.zero
    if z is None:
        return []
    sel = np.nonzero(z["row"] == row)[0]
    za = z["a"][sel] - row * n_t
    zb = z["b"][sel] - row * n_t
    kind = z["kind"][sel]
    elem = z["elem"][sel]
    contacts = nl.contacts
    owner = {c.index: sw for sw in nl.switches.values() for c in sw.contacts}
    wanted: list[tuple[int, str, tuple[str, str]]] = []  # (edge position, element, ends)
    for k in range(len(sel)):
        if kind[k] == 0:
            c = contacts[int(elem[k])]
            sw = owner[c.index]
            if sw.normal in c.closed_in:
                continue
            wanted.append((k, sw.code, (nl.terminals[c.a], nl.terminals[c.b])))
        elif kind[k] == 3:
            jid, ja, jb = st.jumpers[int(elem[k])]
            wanted.append((k, jid, (nl.terminals[ja], nl.terminals[jb])))
    if not wanted:
        return []

    # Ground points of one circuit are one node (the station ground): join them as elements.
    ga: list[int] = []
    gb: list[int] = []
    gnode = b.gnode[row].tolist()
    first_of: dict[int, int] = {}
    for g, node in zip(nl.grounds, gnode, strict=True):
        if node in first_of:
            ga.append(first_of[node])
            gb.append(g)
        else:
            first_of[node] = g
    ea = np.concatenate([za, np.asarray(ga, dtype=np.int64)])
    eb = np.concatenate([zb, np.asarray(gb, dtype=np.int64)])
    lab = components(n_t, ea, eb)

    # s: the current each terminal receives from impedance branches and CT windings.
    s = np.zeros(n_t, dtype=np.complex128)
    br = b.branches
    bsel = np.nonzero(br["row"] == row)[0]
    if len(bsel):
        i_br = b.solution.dv(br["na"][bsel], br["nb"][bsel], 0) * b.branch_y[bsel]
        np.add.at(s, br["a"][bsel] - row * n_t, -i_br)
        np.add.at(s, br["b"][bsel] - row * n_t, i_br)
    inj = b.injections
    isel = np.nonzero(inj["row"] == row)[0]
    if len(isel):
        np.add.at(s, inj["term"][isel] - row * n_t, inj["cur"][isel])
    wa = b.windings
    if wa is not None and wa.n:
        # each section's current leaves the winding at its lower-position end (windings.py)
        j = b.row_sections(row)[0]
        np.add.at(s, wa.sec_a, j)
        np.add.at(s, wa.sec_b, -j)

    parts = sorted({int(lab[za[k]]) for k, _, _ in wanted})
    members = np.nonzero(np.isin(lab, parts))[0]
    local = {int(t): m for m, t in enumerate(members)}
    n = len(members)
    lap = np.zeros((n, n))
    inside = np.isin(lab[ea], parts)
    for x, y in zip(ea[inside].tolist(), eb[inside].tolist(), strict=True):
        if x == y:
            continue
        i, j = local[x], local[y]
        lap[i, i] += 1.0
        lap[j, j] += 1.0
        lap[i, j] -= 1.0
        lap[j, i] -= 1.0
    # one potential per part is the datum
    for p in parts:
        m = local[int(members[lab[members] == p][0])]
        lap[m, :] = 0.0
        lap[m, m] = 1.0
    rhs = s[members].copy()
    for p in parts:
        rhs[local[int(members[lab[members] == p][0])]] = 0.0
    inv = np.linalg.inv(lap)
    phi = inv @ rhs
    # rows and columns of the datum terminals: the grounded Laplacian's inverse has none
    for p in parts:
        m = local[int(members[lab[members] == p][0])]
        inv[m, :] = 0.0
        inv[:, m] = 0.0
    out = []
    for k, element, ends in wanted:
        i, j = local[int(za[k])], local[int(zb[k])]
        r_eff = inv[i, i] + inv[j, j] - inv[i, j] - inv[j, i]
        out.append((element, ends, float(abs(phi[i] - phi[j])), bool(r_eff < 1.0 - 1e-9)))
    return out


def state_readings(nl: Netlist, ev: Any, devices: set[str] | None = None) -> list[dict[str, Any]]:
    """``readings`` of a state: each device input in place (only those of ``devices`` when
    given), then each shorting path in place, as ``{"between": [T1, T2], "a": amps}``; a
    shorting path in parallel with another also says ``"parallel": true`` (its ``a`` is the
    equal-split estimate; the total over the parallel paths is what is exact)."""
    out = input_readings(nl, ev, devices)
    for _, ends, a, parallel in shorting_currents(nl, ev):
        reading: dict[str, Any] = {"between": list(ends), "a": _a(a)}
        if parallel:
            reading["parallel"] = True
        out.append(reading)
    return out
