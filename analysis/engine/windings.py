"""A tapped CT winding as coupled sections of one core.

A multi-ratio CT is one secondary winding on one core, with terminals X1..Xn at cumulative
primary-ampere positions (design.md, "Terminal positions"). Section k, between two consecutive
positions, has N_k = Δposition / secondary rating turns (the primary is one turn), so the full
winding has N = (highest − lowest position) / secondary rating turns.

Model (an ideal core with resistive windings; what coupled inductors give with a coupling
factor → 1 and a magnetizing inductance → ∞):

- every section has the same EMF per turn e: its terminal voltage is V_k = N_k·e − R_k·j_k, with
  j_k the current that leaves the winding at the section's lower-position end;
- the secondary ampere-turns balance the primary's: Σ N_k·j_k = ±I_p (the sign is the
  winding's polarity: current leaves the first terminal in use);
- R_k = R·N_k / N, the full-winding resistance ``winding_ohm`` shared by turns (an even mean
  turn length, as ``ratings.taps.winding_ohm_at_tap`` assumes; common practice, no source).
  Where the record has no winding resistance, 2.5 mΩ per turn is used (a typical figure for
  relaying CTs, from memory); it only matters once part of the winding is shorted.

Eliminating e gives an exact nodal stamp that the existing solver takes as plain branches and
injections. With v_k = V(a_k) − V(b_k) across section k (a_k its lower end, b_k its upper),
j_k = (N_k·e − v_k) / R_k; put in the balance with R_k = ρ·N_k (I = ±I_p):
Σ (N_k·e − v_k) / ρ = I, and Σ v_k = V_lo − V_hi telescopes, so e = (ρ·I + V_lo − V_hi) / N and

    j_k = I / N + (V_lo − V_hi) / R − v_k / R_k.

The last term is a resistor R_k across the section; the first two are the same in every section
of the series chain, so at the inner terminals they cancel and only the two ends of the winding
see them:

- a resistor R_k across every section (between consecutive terminal positions);
- a *negative* resistor −R between the two ends of the whole winding;
- a current source I_p / N from the far end of the winding into the end on the side of the first
  terminal in use (for the tap current I_tap that is I_tap · N_tap / N).

With only the terminals in use joined by the external circuit the section resistors and the
negative resistor cancel (R_tap ∥ −R_tap seen from the tap) and the tap delivers exactly
I_p / N_tap: the ideal current source of the single-source model. So the engine keeps that model
(and its exact figures) for every CT whose winding no other pair of terminals is joined across,
and stamps the sections only for a *coupled* CT: one where an external conducting path joins two
terminals other than the pair in use (a jumper across a section inside the tap, or across an
unused section outside it). A section shorted with no impedance has v_k = 0, so it carries
j_k = e / ρ: every such section the same current, i.e. ampere-turns in proportion to its turns.
Those ampere-turns are taken from the tap's, so the flux and the devices' currents drop; with no
winding resistance at all (ρ → 0) the shorted turns would take them all and the tap deliver
nothing. The oracle: ngspice with coupled inductors (tests/reference/test_windings_reference.py).

Everything here is numpy over the batched states of ``state.evaluate_states``.
"""

from __future__ import annotations

import functools
import itertools
from dataclasses import dataclass
from typing import Any

import numpy as np

from analysis.engine.netlist import Netlist

# Winding resistance per turn where the record gives none (from memory: relaying CTs run about
# 2 to 3 mΩ per turn at 75 °C).
DEFAULT_OHM_PER_TURN = 0.0025
# Floor of the resistance per turn, so that a recorded 0 Ω still gives a finite solve.
MIN_OHM_PER_TURN = 1e-6


@dataclass(frozen=True, eq=False)
class WindingArrays:
    """The tapped CTs (more than two terminals) of a netlist as flat arrays.

    ``m`` indexes the tapped CTs; terminals and sections are grouped per CT in position order.
    """

    ct: np.ndarray  # CT index (in ``Netlist.ct_list``) of each tapped CT
    names: list[list[str]]  # terminal names in position order, per tapped CT
    term: np.ndarray  # terminal index of each winding terminal
    term_m: np.ndarray  # tapped CT of each winding terminal
    pair_i: np.ndarray  # every pair of winding terminals (positions in ``term``) but the
    pair_j: np.ndarray  # pair in use, and its tapped CT
    pair_m: np.ndarray
    sec_m: np.ndarray  # tapped CT of each section
    sec_a: np.ndarray  # terminal index of the lower-position end of each section
    sec_b: np.ndarray  # terminal index of the higher-position end
    sec_k: np.ndarray  # position of the section within its CT (0 = lowest)
    sec_turns: np.ndarray
    sec_r: np.ndarray  # ohms
    sec_tap: np.ndarray  # True for a section inside the tap in use
    src: np.ndarray  # terminal index of the winding end on the first terminal's side
    snk: np.ndarray  # the other end
    r_full: np.ndarray  # ohms, whole winding
    scale: np.ndarray  # N_tap / N: the full-winding current per ampere of tap current
    sign: np.ndarray  # +1 when the first terminal in use is the lower position, else −1
    first: np.ndarray  # terminal index of the first terminal in use

    @property
    def n(self) -> int:
        return len(self.ct)


@dataclass(frozen=True, eq=False)
class _Shape:
    """What tapped CTs of one nameplate and tap share; indices are positions in ``order``."""

    order: list[str]
    pair_i: np.ndarray
    pair_j: np.ndarray
    sec_turns: np.ndarray
    sec_r: np.ndarray
    sec_tap: np.ndarray
    src: int
    snk: int
    r_full: float
    scale: float
    sign: float


@functools.lru_cache(maxsize=8192)
def _shape_of(
    items: tuple[tuple[str, float], ...],
    in_use: tuple[str, str],
    secondary_a: float,
    winding_ohm: float | None,
) -> _Shape | None:
    """``_shape`` of a nameplate and tap (cached: like CTs share it across sites)."""
    positions = dict(items)
    if len(positions) < 3 or secondary_a <= 0:
        return None
    order = sorted(positions, key=lambda n: (positions[n], n))
    pos = np.asarray([positions[n] for n in order], dtype=np.float64)
    lo_use, hi_use = sorted((positions[in_use[0]], positions[in_use[1]]))
    if (np.diff(pos) <= 0).any() or hi_use <= lo_use:
        return None
    turns = np.diff(pos) / secondary_a
    turns_full = float(turns.sum())
    per_turn = DEFAULT_OHM_PER_TURN if winding_ohm is None else float(winding_ohm) / turns_full
    per_turn = max(per_turn, MIN_OHM_PER_TURN)
    use = {order.index(in_use[0]), order.index(in_use[1])}
    pairs = [(i, j) for i, j in itertools.combinations(range(len(order)), 2) if {i, j} != use]
    first_low = positions[in_use[0]] < positions[in_use[1]]
    last = len(order) - 1
    return _Shape(
        order=order,
        pair_i=np.asarray([i for i, _ in pairs], dtype=np.int64),
        pair_j=np.asarray([j for _, j in pairs], dtype=np.int64),
        sec_turns=turns,
        sec_r=per_turn * turns,
        sec_tap=(pos[:-1] >= lo_use) & (pos[1:] <= hi_use),
        src=0 if first_low else last,
        snk=last if first_low else 0,
        r_full=per_turn * turns_full,
        scale=(hi_use - lo_use) / (pos[-1] - pos[0]),
        sign=1.0 if first_low else -1.0,
    )


def winding_arrays(nl: Netlist) -> WindingArrays:
    """The ``WindingArrays`` of a netlist (cached on it).

    A CT with two terminals, with two terminals at one position, or with a tap of no turns
    keeps the single-source model only (the site-file validator refuses equal positions).
    The per-nameplate part is worked out once per distinct (positions, tap, secondary rating,
    winding resistance), so a fleet of like CTs costs one list of terminal indices each.
    """
    hit: WindingArrays | None = nl.cache.get("windings")
    if hit is not None:
        return hit
    shapes: dict[Any, _Shape | None] = {}
    shape_list: list[_Shape] = []
    shape_id: dict[int, int] = {}
    cts: list[int] = []
    of: list[int] = []
    names: list[list[str]] = []
    term: list[int] = []
    first: list[int] = []
    for ct in nl.ct_list:
        if len(ct.terminals) < 3:
            continue
        key = (
            tuple(ct.positions.items()),
            ct.in_use,
            ct.secondary_a,
            getattr(ct, "winding_ohm", None),
        )
        if key not in shapes:
            shapes[key] = _shape_of(*key)
        sh = shapes[key]
        if sh is None:
            continue
        sid = shape_id.setdefault(id(sh), len(shape_list))
        if sid == len(shape_list):
            shape_list.append(sh)
        cts.append(ct.index)
        of.append(sid)
        names.append(sh.order)
        t = ct.terminals
        term += [t[n] for n in sh.order]
        first.append(ct.first)
    n = len(cts)
    term_a = np.asarray(term, dtype=np.int64)
    of_a = np.asarray(of, dtype=np.int64)
    width = np.asarray([len(sh.order) for sh in shape_list], dtype=np.int64)
    n_terms = width[of_a] if n else np.zeros(0, dtype=np.int64)
    base = np.concatenate([[0], np.cumsum(n_terms)[:-1]]).astype(np.int64) if n else n_terms

    def spread(local: list[np.ndarray]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Per-shape local arrays laid out for every CT: (CT m, index of the entry within its
        shape array, position in ``term`` of ``local``'s value), grouped by m. Shapes with
        equal arrays are laid out together (a fleet has many nameplates, few patterns)."""
        pattern: dict[bytes, int] = {}
        arrays: list[np.ndarray] = []
        of_shape = np.empty(len(local), dtype=np.int64)
        for sid, arr in enumerate(local):
            key = arr.tobytes() + bytes([len(arr) % 256])
            pid = pattern.setdefault(key, len(arrays))
            if pid == len(arrays):
                arrays.append(arr)
            of_shape[sid] = pid
        of_p = of_shape[of_a] if n else of_a
        ms_parts, k_parts, at_parts = [], [], []
        for sid, arr in enumerate(arrays):
            ms = np.flatnonzero(of_p == sid)
            if not len(ms) or not len(arr):
                continue
            ms_parts.append(np.repeat(ms, len(arr)))
            k_parts.append(np.tile(np.arange(len(arr)), len(ms)))
            at_parts.append((base[ms][:, None] + arr[None, :]).ravel())
        if not ms_parts:
            empty = np.zeros(0, dtype=np.int64)
            return empty, empty, empty
        m_all = np.concatenate(ms_parts)
        o = np.argsort(m_all, kind="stable")
        return m_all[o], np.concatenate(k_parts)[o], np.concatenate(at_parts)[o]

    pair_m, _, pair_i = spread([sh.pair_i for sh in shape_list])
    _, _, pair_j = spread([sh.pair_j for sh in shape_list])
    sec_m, sec_k, sec_lo = spread([np.arange(len(sh.order) - 1) for sh in shape_list])

    def per_sec(attr: str) -> np.ndarray:
        flat = [getattr(sh, attr) for sh in shape_list]
        offs = np.concatenate([[0], np.cumsum([len(f) for f in flat])[:-1]]).astype(np.int64)
        cat = np.concatenate(flat) if flat else np.zeros(0)
        return cat[offs[of_a[sec_m]] + sec_k] if len(sec_m) else cat[:0]

    def per_ct(values: list[float]) -> np.ndarray:
        return np.asarray(values, dtype=np.float64)[of_a] if n else np.zeros(0)

    src_l = np.asarray([sh.src for sh in shape_list], dtype=np.int64)
    snk_l = np.asarray([sh.snk for sh in shape_list], dtype=np.int64)
    hit = WindingArrays(
        ct=np.asarray(cts, dtype=np.int64),
        names=names,
        term=term_a,
        term_m=np.repeat(np.arange(n), n_terms),
        pair_i=pair_i,
        pair_j=pair_j,
        pair_m=pair_m,
        sec_m=sec_m,
        sec_a=term_a[sec_lo],
        sec_b=term_a[sec_lo + 1],
        sec_k=sec_k,
        sec_turns=per_sec("sec_turns"),
        sec_r=per_sec("sec_r"),
        sec_tap=per_sec("sec_tap").astype(bool),
        src=term_a[base + src_l[of_a]] if n else term_a,
        snk=term_a[base + snk_l[of_a]] if n else term_a,
        r_full=per_ct([sh.r_full for sh in shape_list]),
        scale=per_ct([sh.scale for sh in shape_list]),
        sign=per_ct([sh.sign for sh in shape_list]),
        first=np.asarray(first, dtype=np.int64),
    )
    nl.cache["windings"] = hit
    return hit


def winding_subset(wa: WindingArrays, ct_map: np.ndarray, term_map: np.ndarray) -> WindingArrays:
    """The ``WindingArrays`` of a region of a netlist cut from the netlist's own: ``ct_map``
    gives the region's index of each CT (−1: not in the region), ``term_map`` the region's
    index of each terminal. The region keeps its CTs in the netlist's order, so this is
    exactly what ``winding_arrays`` of the region gives, without working the shapes again."""
    ms = np.flatnonzero(ct_map[wa.ct] >= 0)
    n = len(ms)
    m_map = np.full(wa.n, -1, dtype=np.int64)
    m_map[ms] = np.arange(n)
    t_keep = m_map[wa.term_m] >= 0
    pos_map = np.cumsum(t_keep) - 1
    p_keep = m_map[wa.pair_m] >= 0
    s_keep = m_map[wa.sec_m] >= 0
    return WindingArrays(
        ct=ct_map[wa.ct[ms]],
        names=[wa.names[m] for m in ms.tolist()],
        term=term_map[wa.term[t_keep]],
        term_m=m_map[wa.term_m[t_keep]],
        pair_i=pos_map[wa.pair_i[p_keep]],
        pair_j=pos_map[wa.pair_j[p_keep]],
        pair_m=m_map[wa.pair_m[p_keep]],
        sec_m=m_map[wa.sec_m[s_keep]],
        sec_a=term_map[wa.sec_a[s_keep]],
        sec_b=term_map[wa.sec_b[s_keep]],
        sec_k=wa.sec_k[s_keep],
        sec_turns=wa.sec_turns[s_keep],
        sec_r=wa.sec_r[s_keep],
        sec_tap=wa.sec_tap[s_keep],
        src=term_map[wa.src[ms]],
        snk=term_map[wa.snk[ms]],
        r_full=wa.r_full[ms],
        scale=wa.scale[ms],
        sign=wa.sign[ms],
        first=term_map[wa.first[ms]],
    )


def coupled_mask(wa: WindingArrays, labels: np.ndarray) -> np.ndarray:
    """(states × tapped CTs): True where a pair of winding terminals other than the pair in use
    shares a conduction label (``labels``: states × winding terminals)."""
    out = np.zeros((labels.shape[0], wa.n), dtype=bool)
    if wa.n and labels.shape[0]:
        rows, pairs = np.nonzero(labels[:, wa.pair_i] == labels[:, wa.pair_j])
        out[rows, wa.pair_m[pairs]] = True
    return out


@dataclass(eq=False)
class Stamp:
    """Extra branches (node pairs and admittances) of the coupled windings of a batch."""

    na: np.ndarray
    nb: np.ndarray
    y: np.ndarray


def stamp(wa: WindingArrays, coupled: np.ndarray, node_of: Any) -> Stamp:
    """Section resistors and the negative whole-winding resistor of every coupled winding.

    ``node_of(rows, terminals)`` maps terminal indices of the given states to solver nodes."""
    rows, ms = np.nonzero(coupled)
    # sections of each coupled pair: repeat the pair once per section of its CT
    counts = np.bincount(wa.sec_m, minlength=wa.n)
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
    per = counts[ms]
    pair = np.repeat(np.arange(len(ms)), per)
    sec = starts[ms][pair] + (np.arange(per.sum()) - np.repeat(np.cumsum(per) - per, per))
    srow = rows[pair]
    na = np.concatenate([node_of(srow, wa.sec_a[sec]), node_of(rows, wa.src[ms])])
    nb = np.concatenate([node_of(srow, wa.sec_b[sec]), node_of(rows, wa.snk[ms])])
    y = np.concatenate([1.0 / wa.sec_r[sec], -1.0 / wa.r_full[ms]]).astype(np.complex128)
    return Stamp(na=na, nb=nb, y=y)


def section_currents(
    wa: WindingArrays,
    coupled: np.ndarray,
    i_src: np.ndarray,
    dv: Any,
    node_of: Any,
    ideal: np.ndarray,
    delivered_too: bool = True,
) -> tuple[np.ndarray, np.ndarray]:
    """(states × sections) current of every section, leaving the winding at the section's
    lower-position end, and (states × tapped CTs) current the winding delivers into the node of
    its first terminal in use.

    For a coupled winding (the module docstring's algebra, R_k = ρ·N_k):
    j_k = I_lo + (V_lo − V_hi) / R − (V_a,k − V_b,k) / R_k, with I_lo the full-winding current
    injected into the lower end (``i_src``, states × tapped CTs, is the current injected into
    the end on the first terminal's side; ``sign`` turns it into I_lo).
    Elsewhere the single-source values: ``ideal`` (states × tapped CTs: the signed tap current)
    in the sections of the tap, 0 outside it.
    ``dv(node_a, node_b)`` gives solved voltage differences of the load column."""
    n_states = coupled.shape[0]
    cur = np.where(wa.sec_tap[None, :], ideal[:, wa.sec_m], 0.0).astype(np.complex128)
    if coupled.any():
        sel = np.nonzero(coupled[:, wa.sec_m])
        srow, sec = sel
        m = wa.sec_m[sec]
        lo = np.where(wa.sign[m] > 0, wa.src[m], wa.snk[m])
        hi = np.where(wa.sign[m] > 0, wa.snk[m], wa.src[m])
        i_lo = i_src[srow, m] * wa.sign[m]
        v_ends = dv(node_of(srow, lo), node_of(srow, hi))
        v_sec = dv(node_of(srow, wa.sec_a[sec]), node_of(srow, wa.sec_b[sec]))
        cur[srow, sec] = i_lo + v_ends / wa.r_full[m] - v_sec / wa.sec_r[sec]
    # current into the first terminal's node: sections leaving there minus those entering
    # (``delivered_too`` False: left at 0, for a caller that needs the sections only)
    delivered = np.zeros((n_states, wa.n), dtype=np.complex128)
    if wa.n and n_states and delivered_too:
        s_idx = np.arange(n_states)[:, None]
        nf = node_of(s_idx, wa.first[wa.sec_m][None, :])
        out_a = node_of(s_idx, wa.sec_a[None, :]) == nf
        in_b = node_of(s_idx, wa.sec_b[None, :]) == nf
        contrib = cur * (out_a.astype(np.float64) - in_b.astype(np.float64))
        np.add.at(
            delivered,
            (np.broadcast_to(s_idx, contrib.shape), np.broadcast_to(wa.sec_m, contrib.shape)),
            contrib,
        )
    return cur, delivered


def shorted_sections(
    order: list[str], positions: dict[str, float], in_use: tuple[str, str], labels: list[int]
) -> list[tuple[str, str, bool]]:
    """Winding sections joined end to end by an external conducting path: (lower terminal,
    higher terminal, inside the tap in use).

    Every pair of terminals p < q other than the pair in use that one conducting part joins
    shorts the sections between them; where the pair spans the whole tap in use (the tap's own
    loop joined to an unused end, say X1 joined to X5 with X1-X4 in use) the sections outside
    the tap are the shorted ones (the tap in use is what the devices are across)."""
    lo, hi = sorted((positions[in_use[0]], positions[in_use[1]]))
    use = set(in_use)
    shorted: set[int] = set()
    for i, p in enumerate(order):
        for j in range(i + 1, len(order)):
            q = order[j]
            if labels[i] != labels[j] or {p, q} == use:
                continue
            whole_tap = positions[p] <= lo and positions[q] >= hi
            for k in range(i, j):
                a, b = positions[order[k]], positions[order[k + 1]]
                outside = a < lo or b > hi
                if outside or not whole_tap:
                    shorted.add(k)
    return [
        (
            order[k],
            order[k + 1],
            positions[order[k]] >= lo and positions[order[k + 1]] <= hi,
        )
        for k in sorted(shorted)
    ]
