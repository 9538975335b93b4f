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
from scipy.sparse import csc_matrix
from scipy.sparse.linalg import splu

from analysis.engine.netlist import Netlist
from analysis.engine.topology import components

# Clamp meters on CT circuits read to 0.01 A at best; more digits would be false precision.
DECIMALS = 2


def _a(x: float) -> float:
    return round(float(x), DECIMALS) + 0.0  # + 0.0 turns -0.0 into 0.0


def _input_items(nl: Netlist) -> list[tuple[int, str, str, str]]:
    """(input index, device, terminal a, terminal b) of every input (cached)."""
    hit = nl.cache.get("readings_inputs")
    if hit is None:
        hit = nl.cache["readings_inputs"] = [
            (k, i.device, nl.terminals[i.a], nl.terminals[i.b]) for k, i in enumerate(nl.inputs)
        ]
    return hit


def _amps(ev: Any) -> list[float]:
    """The input currents of ``ev`` rounded as a clamp meter reads them, for every state of
    its batch at once (cached on the batch)."""
    b = ev._b
    hit = b.cache.get("amps")
    if hit is None:
        hit = b.cache["amps"] = (np.round(np.abs(b.inp_cur), DECIMALS) + 0.0).tolist()
    row: list[float] = hit[ev._row]
    return row


def input_readings(nl: Netlist, ev: Any, devices: set[str] | None = None) -> list[dict[str, Any]]:
    """The current in each input of the devices in place (``devices``: only theirs)."""
    removed = ev.state.removed
    amps = _amps(ev)
    return [
        {"between": [a, b], "a": amps[k]}
        for k, dev, a, b in _input_items(nl)
        if dev not in removed and (devices is None or dev in devices)
    ]


def _contact_info(nl: Netlist) -> tuple[np.ndarray, list[str]]:
    """(closed in its switch's normal position, switch code) of every contact (cached)."""
    hit = nl.cache.get("readings_contacts")
    if hit is None:
        normal = np.zeros(len(nl.contacts), dtype=bool)
        owner = [""] * len(nl.contacts)
        for sw in nl.switches.values():
            for c in sw.contacts:
                normal[c.index] = sw.normal in c.closed_in
                owner[c.index] = sw.code
        hit = nl.cache["readings_contacts"] = (normal, owner)
    return hit


def _csc(vals: np.ndarray, rows: np.ndarray, cols: np.ndarray, n: int) -> csc_matrix:
    """The n × n matrix of the (row, col, value) entries, duplicates summed, in canonical CSC
    form (sorted indices): what ``csc_matrix((vals, (rows, cols)))`` gives, without the
    general constructor's conversions."""
    key = cols * n + rows
    order = np.argsort(key, kind="stable")
    ks = key[order]
    first = np.ones(len(ks), dtype=bool)
    np.not_equal(ks[1:], ks[:-1], out=first[1:])
    starts = np.flatnonzero(first)
    data = np.add.reduceat(vals[order], starts) if len(starts) else vals[:0]
    uk = ks[starts]
    indptr = np.zeros(n + 1, dtype=np.int32)
    np.cumsum(np.bincount(uk // n, minlength=n), out=indptr[1:])
    return csc_matrix((data, (uk % n).astype(np.int32), indptr), shape=(n, n))


def _batch_shorting(
    nl: Netlist, b: Any, rows: list[int], states: dict[int, Any]
) -> dict[int, list[tuple[str, tuple[str, str], float, bool]]]:
    """``shorting_currents`` of the ``rows`` of one solved batch, all in one sparse solve."""
    out: dict[int, list[tuple[str, tuple[str, str], float, bool]]] = {r: [] for r in rows}
    z = b.zero
    if z is None or not len(z["row"]):
        return out
    n_t = b.n_terminals
    want_row = np.zeros(int(z["row"].max()) + 1 if len(z["row"]) else 0, dtype=bool)
    want_row[[r for r in rows if r < len(want_row)]] = True
    normal, owner = _contact_info(nl)
    in_rows = want_row[z["row"]]
    kind, elem = z["kind"], z["elem"]
    made = np.zeros(len(kind), dtype=bool)
    is_c = kind == 0
    made[is_c] = ~normal[elem[is_c]]
    made |= kind == 3
    wanted = np.nonzero(in_rows & made)[0]
    if not len(wanted):
        return out

    # the zero-impedance graph of those rows, with each circuit's ground points joined
    sel = np.nonzero(in_rows)[0]
    ga: list[int] = []
    gb: list[int] = []
    grounds = list(nl.grounds)
    for r in rows:
        first_of: dict[int, int] = {}
        for g, node in zip(grounds, b.gnode[r].tolist(), strict=True):
            v = r * n_t + g
            if node in first_of:
                ga.append(first_of[node])
                gb.append(v)
            else:
                first_of[node] = v
    ea = np.concatenate([z["a"][sel], np.asarray(ga, dtype=np.int64)])
    eb = np.concatenate([z["b"][sel], np.asarray(gb, dtype=np.int64)])
    n_v = b.gnode.shape[0] * n_t
    lab = components(n_v, ea, eb)
    parts = np.unique(lab[z["a"][wanted]])
    member = np.isin(lab, parts)
    members = np.nonzero(member)[0]
    local = np.full(n_v, -1, dtype=np.int64)
    local[members] = np.arange(len(members))

    # s: the current each terminal receives from impedance branches and CT windings
    s = np.zeros(n_v, dtype=np.complex128)
    br = b.branches
    bsel = np.nonzero(member[br["a"]] | member[br["b"]])[0]
    if len(bsel):
        i_br = b.solution.dv(br["na"][bsel], br["nb"][bsel], 0) * b.branch_y[bsel]
        np.add.at(s, br["a"][bsel], -i_br)
        np.add.at(s, br["b"][bsel], i_br)
    inj = b.injections
    isel = np.nonzero(member[inj["term"]])[0]
    if len(isel):
        np.add.at(s, inj["term"][isel], inj["cur"][isel])
    wa = b.windings
    if wa is not None and wa.n:
        # each section's current leaves the winding at its lower-position end (windings.py)
        for r in rows:
            j = b.row_sections(r)[0]
            np.add.at(s, wa.sec_a + r * n_t, j)
            np.add.at(s, wa.sec_b + r * n_t, -j)

    # Laplacian of the parts' elements (unit conductances), one datum terminal per part
    keep = member[ea] & (ea != eb)
    li, lj = local[ea[keep]], local[eb[keep]]
    n = len(members)
    _, first = np.unique(lab[members], return_index=True)
    datum = np.zeros(n, dtype=bool)
    datum[first] = True
    free_i = ~datum[li]
    free_j = ~datum[lj]
    rows_ = np.concatenate([li[free_i], lj[free_j], li[free_i & free_j], lj[free_i & free_j]])
    cols_ = np.concatenate([li[free_i], lj[free_j], lj[free_i & free_j], li[free_i & free_j]])
    vals = np.concatenate(
        [
            np.ones(int(free_i.sum())),
            np.ones(int(free_j.sum())),
            -np.ones(int((free_i & free_j).sum())),
            -np.ones(int((free_i & free_j).sum())),
        ]
    )
    rows_ = np.concatenate([rows_, np.nonzero(datum)[0]])
    cols_ = np.concatenate([cols_, np.nonzero(datum)[0]])
    vals = np.concatenate([vals, np.ones(int(datum.sum()))])
    lap = _csc(vals, rows_, cols_, n)
    rhs = s[members]
    rhs[datum] = 0.0
    wa, wb = local[z["a"][wanted]], local[z["b"][wanted]]
    # one column per wanted element for its effective resistance (e_a - e_b, datum rows 0)
    probe = np.zeros((n, len(wanted)))
    probe[wa, np.arange(len(wanted))] += 1.0
    probe[wb, np.arange(len(wanted))] -= 1.0
    probe[datum, :] = 0.0
    lu = splu(lap)
    phi = lu.solve(np.ascontiguousarray(rhs.real)) + 1j * lu.solve(np.ascontiguousarray(rhs.imag))
    pot = lu.solve(probe)
    pot[datum, :] = 0.0
    cols = np.arange(len(wanted))
    r_eff = pot[wa, cols] - pot[wb, cols]
    cur = np.abs(phi[wa] - phi[wb])
    for k, e in enumerate(wanted.tolist()):
        r = int(z["row"][e])
        if kind[e] == 0:
            c = nl.contacts[int(elem[e])]
            name, ends = owner[c.index], (nl.terminals[c.a], nl.terminals[c.b])
        else:
            jid, ja, jb = states[r].jumpers[int(elem[e])]
            name, ends = jid, (nl.terminals[ja], nl.terminals[jb])
        out[r].append((name, ends, float(cur[k]), bool(r_eff[k] < 1.0 - 1e-9)))
    return out


def shorting_currents(nl: Netlist, ev: Any) -> list[tuple[str, tuple[str, str], float, bool]]:
    """(element, its two terminals, current magnitude in A, whether it is in parallel) of
    every shorting path in place: contacts closed now that are open in their switch's normal
    position (element: the switch code), and temporary jumpers (element: the jumper id).

    An element is *in parallel* when it lies on a loop of zero-impedance elements (it is no
    bridge of its node's element graph: the effective resistance between its ends, with unit
    conductances, is below 1); its share of the current is then the equal-split estimate."""
    return _batch_shorting(nl, ev._b, [ev._row], {ev._row: ev.state})[ev._row]


def readings_of(
    nl: Netlist, evs: list[Any], devices: set[str] | None = None
) -> list[list[dict[str, Any]]]:
    """``state_readings`` of many solved states, one sparse solve per batch they come from."""
    by_batch: dict[int, list[int]] = {}
    for k, ev in enumerate(evs):
        by_batch.setdefault(id(ev._b), []).append(k)
    shorts: dict[int, list[tuple[str, tuple[str, str], float, bool]]] = {}
    for ks in by_batch.values():
        b = evs[ks[0]]._b
        rows = sorted({evs[k]._row for k in ks})
        got = _batch_shorting(nl, b, rows, {evs[k]._row: evs[k].state for k in ks})
        for k in ks:
            shorts[k] = got[evs[k]._row]
    out = []
    for k, ev in enumerate(evs):
        items = input_readings(nl, ev, devices)
        for _, ends, a, parallel in shorts[k]:
            reading: dict[str, Any] = {"between": list(ends), "a": _a(a)}
            if parallel:
                reading["parallel"] = True
            items.append(reading)
        out.append(items)
    return out


def state_readings(nl: Netlist, ev: Any, devices: set[str] | None = None) -> list[dict[str, Any]]:
    """``readings`` of a state: each device input in place (only those of ``devices`` when
    given), then each shorting path in place, as ``{"between": [T1, T2], "a": amps}``; a
    shorting path in parallel with another also says ``"parallel": true`` (its ``a`` is the
    equal-split estimate; the total over the parallel paths is what is exact)."""
    return readings_of(nl, [ev], devices)[0]
