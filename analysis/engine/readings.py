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


def _kept_inputs(
    nl: Netlist, removed: frozenset[str], devices: set[str] | None
) -> list[tuple[int, str, str]]:
    """(input index, terminal a, terminal b) of the inputs of the devices in place (of
    ``devices`` only, when given): the same for every state with the same devices removed
    (cached)."""
    key = ("readings_kept", removed, None if devices is None else frozenset(devices))
    hit = nl.cache.get(key)
    if hit is None:
        hit = nl.cache[key] = [
            (k, a, b)
            for k, dev, a, b in _input_items(nl)
            if dev not in removed and (devices is None or dev in devices)
        ]
    return hit


def input_readings(nl: Netlist, ev: Any, devices: set[str] | None = None) -> list[dict[str, Any]]:
    """The current in each input of the devices in place (``devices``: only theirs)."""
    amps = _amps(ev)
    return [
        {"between": [a, b], "a": amps[k]} for k, a, b in _kept_inputs(nl, ev.state.removed, devices)
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
    general constructor's conversions (which win above a few hundred entries)."""
    if len(vals) > 700:
        return csc_matrix((vals, (rows, cols)), shape=(n, n))
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


Slot = tuple[int, int, Any]  # (slot, row of the batch, state)


def _by_row(rows_of: np.ndarray, n_rows: int, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Indices of the entries of each of ``rows`` (entries listed with their row in
    ``rows_of``), in their order, one copy per time a row is asked; and how many each has."""
    order = np.argsort(rows_of, kind="stable")
    count = np.bincount(rows_of, minlength=n_rows)
    start = np.cumsum(count) - count
    n = count[rows]
    first = np.repeat(start[rows], n)
    within = np.arange(int(n.sum())) - np.repeat(np.cumsum(n) - n, n)
    return order[first + within], n


def _batch_shorting(
    nl: Netlist, b: Any, slots: list[Slot]
) -> dict[int, list[tuple[str, tuple[str, str], float, bool]]]:
    """``shorting_currents`` of states of one solved batch, all in one sparse solve.

    ``slots``: (slot, row, state) in slot order. A state's terminals are numbered from its
    slot (its place in the list of states its batch was asked to solve), so a state that
    the batch solved once for two steps still has a part of the Laplacian of its own, as it
    had when each state had its row: the same matrix, the same figures."""
    out: dict[int, list[tuple[str, tuple[str, str], float, bool]]] = {s[0]: [] for s in slots}
    z = b.zero
    if z is None or not len(z["row"]):
        return out
    n_t = b.n_terminals
    n_rows = b.gnode.shape[0]
    normal, owner = _contact_info(nl)
    kind, elem, zrow = z["kind"], z["elem"], z["row"]
    slot_of = np.asarray([sl[0] for sl in slots], dtype=np.int64)
    row_of = np.asarray([sl[1] for sl in slots], dtype=np.int64)
    # every zero-impedance edge of the states, ordered as one batch of them listed them:
    # by kind, then state, then element
    e_idx, n_e = _by_row(zrow, n_rows, row_of)
    e_slot = np.repeat(slot_of, n_e)
    o = np.lexsort((e_idx, e_slot, kind[e_idx]))
    e_idx, e_slot = e_idx[o], e_slot[o]
    shift = (e_slot - zrow[e_idx]) * n_t
    za, zb = z["a"][e_idx] + shift, z["b"][e_idx] + shift
    ekind, eelem = kind[e_idx], elem[e_idx]
    made = np.zeros(len(ekind), dtype=bool)
    is_c = ekind == 0
    made[is_c] = ~normal[eelem[is_c]]
    made |= ekind == 3
    wanted = np.nonzero(made)[0]
    if not len(wanted):
        return out

    # the zero-impedance graph of those states, with each circuit's ground points joined
    ga: list[int] = []
    gb: list[int] = []
    grounds = list(nl.grounds)
    for slot, nodes in zip(slot_of.tolist(), b.gnode[row_of].tolist(), strict=True):
        first_of: dict[int, int] = {}
        for g, node in zip(grounds, nodes, strict=True):
            v = slot * n_t + g
            if node in first_of:
                ga.append(first_of[node])
                gb.append(v)
            else:
                first_of[node] = v
    ea = np.concatenate([za, np.asarray(ga, dtype=np.int64)])
    eb = np.concatenate([zb, np.asarray(gb, dtype=np.int64)])
    n_v = (int(slot_of.max()) + 1) * n_t
    lab = components(n_v, ea, eb)
    in_part = np.zeros(int(lab.max()) + 1, dtype=bool)
    in_part[lab[za[wanted]]] = True
    member = in_part[lab]
    members = np.nonzero(member)[0]
    local = np.full(n_v, -1, dtype=np.int64)
    local[members] = np.arange(len(members))

    # s: the current each terminal receives from impedance branches and CT windings
    s = np.zeros(n_v, dtype=np.complex128)
    br = b.branches
    b_idx, n_b = _by_row(br["row"], n_rows, row_of)
    b_shift = (np.repeat(slot_of, n_b) - br["row"][b_idx]) * n_t
    b_a, b_b = br["a"][b_idx] + b_shift, br["b"][b_idx] + b_shift
    bsel = np.nonzero(member[b_a] | member[b_b])[0]
    if len(bsel):
        sel = b_idx[bsel]
        i_br = b.solution.dv(br["na"][sel], br["nb"][sel], 0) * b.branch_y[sel]
        np.add.at(s, b_a[bsel], -i_br)
        np.add.at(s, b_b[bsel], i_br)
    inj = b.injections
    i_idx, n_i = _by_row(inj["row"], n_rows, row_of)
    i_term = inj["term"][i_idx] + (np.repeat(slot_of, n_i) - inj["row"][i_idx]) * n_t
    isel = np.nonzero(member[i_term])[0]
    if len(isel):
        np.add.at(s, i_term[isel], inj["cur"][i_idx[isel]])
    wa = b.windings
    if wa is not None and wa.n:
        # each section's current leaves the winding at its lower-position end (windings.py)
        j = b.sections_all(False)[0][row_of]
        base = slot_of[:, None] * n_t
        np.add.at(s, (wa.sec_a[None, :] + base).ravel(), j.ravel())
        np.add.at(s, (wa.sec_b[None, :] + base).ravel(), -j.ravel())

    # Laplacian of the parts' elements (unit conductances), one datum terminal per part
    keep = member[ea] & (ea != eb)
    li, lj = local[ea[keep]], local[eb[keep]]
    n = len(members)
    # the datum of each part is its first terminal: labels count the parts in the order of
    # their first terminals, so a part's first member is where the label exceeds all before
    plab = lab[members]
    datum = np.ones(n, dtype=bool)
    if n > 1:
        np.greater(plab[1:], np.maximum.accumulate(plab[:-1]), out=datum[1:])
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
    wa_, wb_ = local[za[wanted]], local[zb[wanted]]
    lu = splu(lap)
    phi = lu.solve(np.ascontiguousarray(rhs.real)) + 1j * lu.solve(np.ascontiguousarray(rhs.imag))
    cur = np.abs(phi[wa_] - phi[wb_]).tolist()
    # Effective resistance of each wanted element (e_a - e_b, datum rows 0), one column each.
    # In a part whose elements form a tree every element is a bridge (exactly 1); only the
    # parts with a loop, and an element from a terminal to itself, need the solve.
    n_vert = np.bincount(plab, minlength=n_v)
    n_edge = np.bincount(lab[ea[keep]], minlength=n_v)
    wlab = lab[za[wanted]]
    need = np.flatnonzero((n_edge[wlab] != n_vert[wlab] - 1) | (wa_ == wb_))
    r_eff = [1.0] * len(wanted)
    if len(need):
        probe = np.zeros((n, len(need)))
        cols = np.arange(len(need))
        probe[wa_[need], cols] += 1.0
        probe[wb_[need], cols] -= 1.0
        probe[datum, :] = 0.0
        pot = lu.solve(probe)
        pot[datum, :] = 0.0
        for k, r in zip(
            need.tolist(), (pot[wa_[need], cols] - pot[wb_[need], cols]).tolist(), strict=True
        ):
            r_eff[k] = r
    state_of = {sl[0]: sl[2] for sl in slots}
    terminals = nl.terminals
    for k, (slot, knd, el) in enumerate(
        zip(e_slot[wanted].tolist(), ekind[wanted].tolist(), eelem[wanted].tolist(), strict=True)
    ):
        if knd == 0:
            c = nl.contacts[el]
            name, ends = owner[c.index], (terminals[c.a], terminals[c.b])
        else:
            jid, ja, jb = state_of[slot].jumpers[el]
            name, ends = jid, (terminals[ja], terminals[jb])
        out[slot].append((name, ends, cur[k], r_eff[k] < 1.0 - 1e-9))
    return out


def shorting_currents(nl: Netlist, ev: Any) -> list[tuple[str, tuple[str, str], float, bool]]:
    """(element, its two terminals, current magnitude in A, whether it is in parallel) of
    every shorting path in place: contacts closed now that are open in their switch's normal
    position (element: the switch code), and temporary jumpers (element: the jumper id).

    An element is *in parallel* when it lies on a loop of zero-impedance elements (it is no
    bridge of its node's element graph: the effective resistance between its ends, with unit
    conductances, is below 1); its share of the current is then the equal-split estimate."""
    return _batch_shorting(nl, ev._b, [(ev._slot, ev._row, ev.state)])[ev._slot]


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
        slots = {evs[k]._slot: (evs[k]._slot, evs[k]._row, evs[k].state) for k in ks}
        got = _batch_shorting(nl, b, [slots[x] for x in sorted(slots)])
        for k in ks:
            shorts[k] = got[evs[k]._slot]
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
