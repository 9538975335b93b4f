"""Topology and batched nodal solve over a graph made of many disjoint parts.

The same code serves one site in its normal state (its circuits are the disjoint parts) and a
whole procedure (every state is a copy of the netlist; the copies are disjoint parts of one
big graph). Steps:

1. zero-impedance edges merge terminals into nodes (connected components, i.e. a union-find);
2. impedance branches plus CT windings give the *secondary circuits* (components of nodes);
3. the ground terminals of one circuit are one station-ground node (merged per circuit), and
   the number of distinct ground nodes before that merge is the circuit's ground-point count;
4. impedance branches plus the ground merges give the *conduction components*; a CT whose
   terminals in use lie in different conduction components is open.

The solve builds, per circuit, the complex nodal admittance matrix Y (Y V = J, J the injected
currents) and gives every conduction component a 1 S shunt to the datum at one node. Since the
injections into each conduction component sum to zero (open CTs inject nothing), that shunt
carries no current: the voltage differences are exact and a floating part never makes Y
singular. Circuits are padded to a few sizes and solved as stacks with ``numpy.linalg.solve``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

_EMPTY = np.zeros(0, dtype=np.int64)
PAD = 4
MAX_ROUNDS = 12
# Above this many vertices scipy's compiled search is faster than the numpy rounds.
SMALL_GRAPH = 100_000
# Matrix entries per stacked solve: small enough to stay in cache and reuse its memory.
CHUNK_ENTRIES = 1 << 16
# Circuits padded to at least this many nodes are solved once per distinct matrix in a chunk.
DEDUP_NODES = 16


def components(n: int, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Connected-component label (dense, 0..k-1) of each of ``n`` vertices joined by the edges
    (a[k], b[k]).

    Union-find by hooking and pointer jumping in numpy (each round hooks the larger root of
    every edge whose ends differ onto the smaller, then compresses paths); it settles in a few
    rounds on circuit graphs. Graphs that need many rounds go to scipy's breadth-first
    ``connected_components`` instead.
    """
    if n == 0:
        return _EMPTY
    if len(a) == 0:
        return np.arange(n, dtype=np.int64)
    lab = np.arange(n, dtype=np.int64)
    rounds = MAX_ROUNDS if n <= SMALL_GRAPH else 0
    # Each edge hooks the larger of its ends' roots onto the smaller; an edge whose ends share
    # a root keeps sharing it (roots only merge), so each round takes only the edges that
    # still join two roots.
    hi, lo = np.maximum(a, b), np.minimum(a, b)
    join = hi != lo
    hi, lo = hi[join], lo[join]
    for _ in range(rounds):
        if not len(hi):
            roots = lab == np.arange(n)
            return (np.cumsum(roots) - 1)[lab]
        np.minimum.at(lab, hi, lo)
        while True:
            nxt = lab[lab]
            if (nxt == lab).all():
                break
            lab = nxt
        ra, rb = lab[hi], lab[lo]
        join = ra != rb
        ra, rb = ra[join], rb[join]
        hi, lo = np.maximum(ra, rb), np.minimum(ra, rb)
    g = coo_matrix((np.ones(len(a), dtype=np.int8), (a, b)), shape=(n, n))
    _, labels = connected_components(g, directed=False)
    out: np.ndarray = labels.astype(np.int64, copy=False)
    return out


@dataclass(eq=False)
class Topo:
    """Node structure of a (batched) graph; see the module docstring."""

    term_node: np.ndarray  # node of each vertex (terminal)
    term_point: np.ndarray  # node before the ground merge: tells ground points apart
    n_nodes: int
    br_na: np.ndarray  # nodes of the active impedance branches
    br_nb: np.ndarray
    node_circ: np.ndarray  # circuit label of each node
    n_circ: int
    node_imp: np.ndarray  # conduction-component label of each node
    circ_grounds: np.ndarray  # distinct ground points per circuit
    ground_nodes: np.ndarray  # the distinct ground nodes (before the per-circuit merge)


def topology(
    n_vertices: int,
    zero_a: np.ndarray,
    zero_b: np.ndarray,
    br_a: np.ndarray,
    br_b: np.ndarray,
    wind_a: np.ndarray,
    wind_b: np.ndarray,
    grounds: np.ndarray,
) -> Topo:
    """Nodes, circuits, ground points and conduction components (union-find by components)."""
    term_node0 = components(n_vertices, zero_a, zero_b)
    n0 = int(term_node0.max()) + 1 if n_vertices else 0
    na0 = term_node0[br_a]
    nb0 = term_node0[br_b]
    circ0 = components(
        n0, np.concatenate([na0, term_node0[wind_a]]), np.concatenate([nb0, term_node0[wind_b]])
    )
    n_circ = int(circ0.max()) + 1 if n0 else 0
    gnodes0 = np.unique(term_node0[grounds]) if len(grounds) else _EMPTY
    gcirc = circ0[gnodes0]
    circ_grounds = np.bincount(gcirc, minlength=n_circ)
    if len(gnodes0) > 1:
        order = np.argsort(gcirc, kind="stable")
        gs = gnodes0[order]
        cs = gcirc[order]
        same = cs[1:] == cs[:-1]
        ga, gb = gs[:-1][same], gs[1:][same]
    else:
        ga = gb = _EMPTY
    # The ground points of one circuit are one node electrically: the station ground.
    merge = components(n0, ga, gb) if len(ga) else np.arange(n0, dtype=np.int64)
    n_nodes = int(merge.max()) + 1 if n0 else 0
    node_circ = np.empty(n_nodes, dtype=np.int64)
    node_circ[merge] = circ0
    na = merge[na0]
    nb = merge[nb0]
    node_imp = components(n_nodes, na, nb)
    return Topo(
        term_node=merge[term_node0],
        term_point=term_node0,
        n_nodes=n_nodes,
        br_na=na,
        br_nb=nb,
        node_circ=node_circ,
        n_circ=n_circ,
        node_imp=node_imp,
        circ_grounds=circ_grounds,
        ground_nodes=np.unique(merge[gnodes0]) if len(gnodes0) else _EMPTY,
    )


def _assemble(idx: np.ndarray, w: np.ndarray, size: int) -> np.ndarray:
    """Sum complex weights into a flat complex array of ``size`` (duplicates add up)."""
    flat = np.bincount(
        np.concatenate([2 * idx, 2 * idx + 1]), np.concatenate([w.real, w.imag]), 2 * size
    )
    return flat.view(np.complex128)


def _distinct_blocks(sizes: np.ndarray, *groups: tuple[np.ndarray, ...]) -> np.ndarray | None:
    """For a chunk of circuits of ``sizes`` nodes whose matrix and right-hand side entries are
    listed in ``groups`` (each: the circuit of every entry, sorted, then the entry's arrays),
    the first circuit with the very same size and entries in the same order (the same matrix
    and right-hand side, to the last bit) of each circuit, itself if none before; None when
    all differ. The states of a procedure repeat most of their circuits (a step on a trip
    pole, a note, a switch set back leave a circuit as it was)."""
    nblk = len(sizes)
    if nblk < 2:
        return None
    # each array's bytes once, cut per circuit (a few numpy calls per chunk, not per circuit)
    cols: list[tuple[list[int], bytes, int]] = []
    for g in groups:
        cut = np.searchsorted(g[0], np.arange(nblk + 1)).tolist()
        cols += [(cut, a.tobytes(), a.itemsize) for a in g[1:]]
    size_l = sizes.tolist()
    seen: dict[tuple[Any, ...], int] = {}
    block = [
        seen.setdefault((size_l[c], *(raw[cut[c] * w : cut[c + 1] * w] for cut, raw, w in cols)), c)
        for c in range(nblk)
    ]
    return None if len(seen) == nblk else np.asarray(block, dtype=np.int64)


@dataclass(eq=False)
class Solution:
    """Node voltages of every solved circuit, for every one of its right-hand-side columns."""

    vflat: np.ndarray
    node_base: np.ndarray  # index of (node, column 0) in vflat; -1 for nodes not solved

    def dv(self, na: np.ndarray, nb: np.ndarray, col: np.ndarray | int) -> np.ndarray:
        """V[na] - V[nb] in column ``col``; 0 where the nodes were not solved."""
        na = np.asarray(na, dtype=np.int64)
        nb = np.asarray(nb, dtype=np.int64)
        col = np.broadcast_to(np.asarray(col, dtype=np.int64), na.shape)
        out = np.zeros(na.shape, dtype=np.complex128)
        if na.size == 0:
            return out
        ba = self.node_base[na]
        bb = self.node_base[nb]
        ok = (ba >= 0) & (bb >= 0)
        out[ok] = self.vflat[ba[ok] + col[ok]] - self.vflat[bb[ok] + col[ok]]
        return out


def solve(
    topo: Topo,
    br_y: np.ndarray,
    inj_node: np.ndarray,
    inj_col: np.ndarray,
    inj_val: np.ndarray,
    circ_ncols: np.ndarray,
) -> Solution:
    """Solve Y V = J for every circuit with ``circ_ncols[c] > 0`` right-hand sides.

    ``br_y`` are the admittances of the active branches (aligned with ``topo.br_na``);
    injections are (node, column, complex current into the node). Circuits are grouped by size
    (padded up to a multiple of 4 nodes with identity rows) and each group is one stacked
    ``numpy.linalg.solve``.
    """
    n_nodes, n_circ = topo.n_nodes, topo.n_circ
    node_base = np.full(n_nodes, -1, dtype=np.int64)
    if n_nodes == 0:
        return Solution(np.zeros(0, dtype=np.complex128), node_base)
    na, nb = topo.br_na, topo.br_nb
    keep = na != nb
    na, nb, br_y = na[keep], nb[keep], br_y[keep]
    # Only nodes with a branch or an injection enter the matrices: a node with neither (an
    # unused tap terminal, say) is a singleton whose voltage nothing depends on.
    used = np.zeros(n_nodes, dtype=bool)
    used[na] = True
    used[nb] = True
    if len(inj_node):
        used[inj_node] = True
    unodes = np.nonzero(used)[0]
    ucirc = topo.node_circ[unodes]
    csize = np.bincount(ucirc, minlength=n_circ)
    order = np.argsort(ucirc, kind="stable")
    starts = np.concatenate([[0], np.cumsum(csize)[:-1]])
    local = np.zeros(n_nodes, dtype=np.int64)
    local[unodes[order]] = np.arange(len(unodes)) - starts[ucirc[order]]
    npad = np.where(csize <= PAD, csize, -(-csize // PAD) * PAD)

    circs = np.nonzero((circ_ncols > 0) & (csize > 0))[0]
    circs = circs[np.argsort(npad[circs], kind="stable")]
    gpos = np.full(n_circ, -1, dtype=np.int64)
    gpos[circs] = np.arange(len(circs))
    _, first = np.unique(topo.node_imp[unodes], return_index=True)
    ref_nodes = unodes[first]

    def by_block(nodes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        g = gpos[topo.node_circ[nodes]]
        sel = np.nonzero(g >= 0)[0]
        o = sel[np.argsort(g[sel], kind="stable")]
        return o, g[o]

    bo, bg = by_block(na)
    bi, bj, by = local[na[bo]], local[nb[bo]], br_y[bo]
    ro, rg = by_block(ref_nodes)
    rl = local[ref_nodes[ro]]
    io, ig = by_block(inj_node) if len(inj_node) else (_EMPTY, _EMPTY)
    il, icol, ival = local[inj_node[io]], inj_col[io], inj_val[io]
    uo, ug = by_block(unodes)
    un = unodes[uo]

    parts: list[np.ndarray] = []
    offset = 0
    seg_n = npad[circs]
    bounds = np.concatenate([[0], np.nonzero(np.diff(seg_n))[0] + 1, [len(circs)]])
    if not len(circs):
        bounds = bounds[:1]
    for s0, s1 in zip(bounds[:-1].tolist(), bounds[1:].tolist(), strict=True):
        n = int(seg_n[s0])
        step = max(1, CHUNK_ENTRIES // (n * n))
        for g0 in range(s0, s1, step):
            g1 = min(g0 + step, s1)
            k = int(circ_ncols[circs[g0:g1]].max())
            b0, b1 = np.searchsorted(bg, [g0, g1])
            r0, r1 = np.searchsorted(rg, [g0, g1])
            i0, i1 = np.searchsorted(ig, [g0, g1])
            u0, u1 = np.searchsorted(ug, [g0, g1])
            eb, er, ei = bg[b0:b1] - g0, rg[r0:r1] - g0, ig[i0:i1] - g0
            i, j, y = bi[b0:b1], bj[b0:b1], by[b0:b1]
            rl_, il_, icol_, ival_ = rl[r0:r1], il[i0:i1], icol[i0:i1], ival[i0:i1]
            sizes = csize[circs[g0:g1]]
            # a circuit the same as one before it in the chunk (same entries in the same
            # order: the same matrix and right-hand side, to the last bit) is not solved
            # again: its nodes read the solution of the first (only where a solve costs more
            # than telling the circuits apart)
            block = (
                None
                if n < DEDUP_NODES
                else _distinct_blocks(sizes, (eb, i, j, y), (er, rl_), (ei, il_, icol_, ival_))
            )
            if block is not None:
                firsts = np.flatnonzero(block == np.arange(g1 - g0))
                renum = np.full(g1 - g0, -1, dtype=np.int64)
                renum[firsts] = np.arange(len(firsts))
                block = renum[block]
                kb, kr, ki = renum[eb] >= 0, renum[er] >= 0, renum[ei] >= 0
                eb, i, j, y = block[eb[kb]], i[kb], j[kb], y[kb]
                er, rl_ = block[er[kr]], rl_[kr]
                ei, il_, icol_, ival_ = block[ei[ki]], il_[ki], icol_[ki], ival_[ki]
                sizes = sizes[firsts]
                u_blk = block[ug[u0:u1] - g0]
            else:
                u_blk = ug[u0:u1] - g0
            nblk = len(sizes)
            base = eb * (n * n)
            padn = n - sizes
            pb = np.repeat(np.arange(nblk), padn)
            pl = np.arange(len(pb)) - np.repeat(np.cumsum(padn) - padn, padn) + sizes[pb]
            idx = np.concatenate(
                [
                    base + i * n + i,
                    base + j * n + j,
                    base + i * n + j,
                    base + j * n + i,
                    er * (n * n) + rl_ * (n + 1),
                    pb * (n * n) + pl * (n + 1),
                ]
            )
            n_fix = len(er) + len(pb)
            w = np.concatenate([y, y, -y, -y, np.ones(n_fix, dtype=np.complex128)])
            ymat = _assemble(idx, w, nblk * n * n).reshape(nblk, n, n)
            ridx = ei * (n * k) + il_ * k + icol_
            rhs = _assemble(ridx, ival_, nblk * n * k)
            volts = np.linalg.solve(ymat, rhs.reshape(nblk, n, k))
            node_base[un[u0:u1]] = offset + u_blk * (n * k) + local[un[u0:u1]] * k
            parts.append(volts.ravel())
            offset += nblk * n * k
    vflat = np.concatenate(parts) if parts else np.zeros(0, dtype=np.complex128)
    return Solution(vflat, node_base)
