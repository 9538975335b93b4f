"""Nodal analysis of CT secondary circuits in the normal state.

Method: complex nodal admittance analysis at power frequency (Y V = J) with each CT an ideal
current source between its first and second terminal in use (current leaves the first
terminal). The burden a CT sees is Z = (V_first − V_second) / I_ct, the external burden at its
terminals (leads and device inputs, without its own winding).

Cases (the design's engine section):

- *ground fault*: the CT alone, I = 1 A;
- *phase fault*: every CT of its three-phase set injects a balanced phasor (A 0°, B −120°,
  C +120°), and the CT sees V / I_own.

Wye, delta, residual and paralleled circuits come out of the solve: nothing in this module
knows the connection. A CT whose terminals are not joined by a conducting path is open and gets
no burden (``None``); the rest of its circuit still solves.

The burden by element uses Tellegen's theorem: with the CT alone, V·I* = Σ Z_b·|I_b|², so each
branch's share of the burden is Z_b·|I_b|² / |I|² and the shares add up to the burden.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from analysis.engine.netlist import Netlist
from analysis.engine.topology import Solution, Topo, solve, topology

# A CT "reaches" an input when, alone at 1 A, it drives more than this through it.
FEED_THRESHOLD_A = 1e-3


@dataclass(frozen=True, slots=True)
class BurdenElement:
    """One element's share of a CT's ground-fault burden (complex ohms)."""

    label: str
    kind: str  # "lead" or "device_input"
    z_ohm: complex


@dataclass(slots=True, eq=False)
class CTBurden:
    """The external burden one CT sees, per fault case; ``None`` when its loop is open."""

    ct: str
    circuit: str | None
    ground_fault: complex | None
    phase_fault: complex | None
    _analysis: NormalAnalysis | None = field(default=None, repr=False, compare=False)

    @property
    def open(self) -> bool:
        return self.ground_fault is None

    @property
    def elements(self) -> tuple[BurdenElement, ...]:
        """Burden by element in the ground-fault case (the shares add up to the burden)."""
        if self._analysis is None or self.ground_fault is None:
            return ()
        return self._analysis.elements(self.ct)

    @property
    def input_currents(self) -> dict[tuple[str, str], complex]:
        """Current (A) in each device input of the circuit, the CT alone at 1 A."""
        if self._analysis is None or self.ground_fault is None:
            return {}
        return self._analysis.input_currents(self.ct)


@dataclass(slots=True, eq=False)
class Circuit:
    """A secondary circuit: the CTs, device inputs and ground points of one component."""

    id: str
    cts: tuple[str, ...]
    device_inputs: tuple[tuple[str, str], ...]
    ground_points: tuple[str, ...]
    open_cts: tuple[str, ...] = ()
    n_nodes: int = 0


def circuit_id(ct_codes: list[str] | tuple[str, ...]) -> str:
    """Stable circuit id: named after its first CT code (sorted)."""
    return f"CKT-{min(ct_codes)}"


def normal_zero_edges(nl: Netlist) -> tuple[np.ndarray, np.ndarray]:
    """Zero-impedance edges of the normal state: links, contacts closed in the normal
    positions, and branches with no impedance."""
    ar = nl.arrays
    closed = nl.cache.get("normal_closed")
    if closed is None:
        closed = np.zeros(len(nl.contacts), dtype=bool)
        for sw in nl.switches.values():
            for c in sw.contacts:
                closed[c.index] = sw.normal in c.closed_in
        nl.cache["normal_closed"] = closed
    za = np.concatenate([ar.link_a, ar.contact_a[closed], ar.br_a[ar.br_zero]])
    zb = np.concatenate([ar.link_b, ar.contact_b[closed], ar.br_b[ar.br_zero]])
    return za, zb


@dataclass(eq=False)
class _Batch:
    """Topology and solution shared by the netlists solved together."""

    topo: Topo
    sol: Solution
    br_index: np.ndarray  # global branch index of each active branch (sorted)
    br_y: np.ndarray
    br_z: np.ndarray  # impedance of each active branch
    _br_order: np.ndarray | None = None
    _br_starts: np.ndarray | None = None

    def circuit_branches(self, label: int) -> np.ndarray:
        if self._br_order is None:
            bc = self.topo.node_circ[self.topo.br_na]
            self._br_order = np.argsort(bc, kind="stable")
            self._br_starts = np.searchsorted(bc[self._br_order], np.arange(self.topo.n_circ + 1))
        assert self._br_starts is not None
        return self._br_order[self._br_starts[label] : self._br_starts[label + 1]]


@dataclass(eq=False)
class NormalAnalysis:
    """The solved normal state of one netlist (shared by burdens, circuits and feeds)."""

    netlist: Netlist
    batch: _Batch
    br_off: int  # offset of this netlist's branches in the batch
    ct_open: np.ndarray
    ct_circ: np.ndarray  # circuit label (in the batch) of each CT
    ct_col: np.ndarray  # ground-fault column of each CT
    circuits: list[Circuit]
    circ_label_id: dict[int, str]
    burdens: dict[str, CTBurden]

    def _branch_currents(self, ct_code: str) -> tuple[list[int], np.ndarray, np.ndarray]:
        k = self.netlist.cts[ct_code].index
        b = self.batch
        sel = b.circuit_branches(int(self.ct_circ[k]))
        dv = b.sol.dv(b.topo.br_na[sel], b.topo.br_nb[sel], int(self.ct_col[k]))
        return (b.br_index[sel] - self.br_off).tolist(), b.br_y[sel] * dv, b.br_z[sel]

    def elements(self, ct_code: str) -> tuple[BurdenElement, ...]:
        nl = self.netlist
        local, cur, z = self._branch_currents(ct_code)
        share = z * np.abs(cur) ** 2
        out = []
        n_wires = nl.arrays.n_wires
        for b, s in zip(local, share.tolist(), strict=True):
            if abs(s) < 1e-12:
                continue
            if b < n_wires:
                out.append(BurdenElement(nl.wires[b].label, "lead", s))
            else:
                out.append(BurdenElement(nl.inputs[b - n_wires].label, "device_input", s))
        return tuple(out)

    def input_currents(self, ct_code: str) -> dict[tuple[str, str], complex]:
        nl = self.netlist
        local, cur, _ = self._branch_currents(ct_code)
        n_wires = nl.arrays.n_wires
        out: dict[tuple[str, str], complex] = {}
        for b, i in zip(local, cur.tolist(), strict=True):
            if b >= n_wires:
                di = nl.inputs[b - n_wires]
                out[(di.device, di.name)] = i
        return out

    def feeds(self) -> dict[str, set[str]]:
        """Device code -> codes of the CTs whose current (alone, 1 A) reaches one of its
        inputs."""
        nl = self.netlist
        b = self.batch
        n_wires = nl.arrays.n_wires
        out: dict[str, set[str]] = {d: set() for d in nl.devices}
        lo, hi = np.searchsorted(
            b.br_index, [self.br_off + n_wires, self.br_off + len(nl.arrays.br_z)]
        )
        if hi <= lo:
            return out
        bsel = np.arange(lo, hi)
        bcirc = b.topo.node_circ[b.topo.br_na[bsel]].tolist()
        cts = nl.ct_list
        by_circ: dict[int, list[int]] = {}
        for k, (lab, is_open) in enumerate(
            zip(self.ct_circ.tolist(), self.ct_open.tolist(), strict=True)
        ):
            if not is_open:
                by_circ.setdefault(lab, []).append(k)
        pa: list[int] = []
        pk: list[int] = []
        for bi, c in zip(bsel.tolist(), bcirc, strict=True):
            for k in by_circ.get(c, ()):
                pa.append(bi)
                pk.append(k)
        if not pa:
            return out
        pa_arr = np.asarray(pa, dtype=np.int64)
        pk_arr = np.asarray(pk, dtype=np.int64)
        dv = b.sol.dv(b.topo.br_na[pa_arr], b.topo.br_nb[pa_arr], self.ct_col[pk_arr])
        hit = np.abs(b.br_y[pa_arr] * dv) > FEED_THRESHOLD_A
        local = b.br_index[pa_arr[hit]] - self.br_off - n_wires
        for i, k in zip(local.tolist(), pk_arr[hit].tolist(), strict=True):
            out[nl.inputs[i].device].add(cts[k].code)
        return out


def _group(labels: np.ndarray, items: list[Any]) -> dict[int, list[Any]]:
    """Items grouped by label (labels in first-seen order is not needed; sorted is fine)."""
    if not items:
        return {}
    order = np.argsort(labels, kind="stable")
    sl = labels[order]
    cut = np.flatnonzero(np.diff(sl)) + 1
    starts = [0, *cut.tolist()]
    ends = [*cut.tolist(), len(items)]
    o = order.tolist()
    keys = sl[starts].tolist()
    return {k: [items[i] for i in o[a:b]] for k, a, b in zip(keys, starts, ends, strict=True)}


def normal_analysis(nl: Netlist) -> NormalAnalysis:
    """Solve the netlist's normal state for every CT, both fault cases (cached on the
    netlist)."""
    return normal_analysis_many([nl])[0]


def normal_analysis_many(nets: list[Netlist]) -> list[NormalAnalysis]:
    """Solve the normal state of several netlists in one batch (one topology pass and one set
    of stacked solves for all their circuits); each result is cached on its netlist."""
    todo = [nl for nl in dict.fromkeys(nets) if "normal" not in nl.cache]
    if todo:
        _solve_normal(todo)
    return [nl.cache["normal"] for nl in nets]


def _solve_normal(nets: list[Netlist]) -> None:
    arrs = [nl.arrays for nl in nets]
    t_off = np.cumsum([0] + [nl.n_terminals for nl in nets])
    b_off = np.cumsum([0] + [len(a.br_z) for a in arrs])
    c_off = np.cumsum([0] + [len(nl.ct_list) for nl in nets])

    def cat(parts: list[np.ndarray], offs: np.ndarray | None = None) -> np.ndarray:
        if offs is not None:
            parts = [p + int(o) for p, o in zip(parts, offs, strict=False)]
        return np.concatenate(parts) if parts else np.zeros(0, dtype=np.int64)

    zab = [normal_zero_edges(nl) for nl in nets]
    za = cat([z[0] for z in zab], t_off)
    zb = cat([z[1] for z in zab], t_off)
    br_a = cat([a.br_a for a in arrs], t_off)
    br_b = cat([a.br_b for a in arrs], t_off)
    br_z = np.concatenate([a.br_z for a in arrs])
    br_zero = np.concatenate([a.br_zero for a in arrs])
    active = np.nonzero(~br_zero)[0]
    br_y = 1.0 / br_z[active]
    topo = topology(
        int(t_off[-1]),
        za,
        zb,
        br_a[active],
        br_b[active],
        cat([a.wind_a for a in arrs], t_off),
        cat([a.wind_b for a in arrs], t_off),
        cat([a.grounds for a in arrs], t_off),
    )
    f = topo.term_node[cat([a.ct_first for a in arrs], t_off)]
    s = topo.term_node[cat([a.ct_second for a in arrs], t_off)]
    phasor = np.concatenate([a.ct_phasor for a in arrs]) if arrs else np.zeros(0, complex)
    n_ct = len(f)
    ct_open = topo.node_imp[f] != topo.node_imp[s]
    ct_circ = topo.node_circ[f]

    # Columns: one ground-fault column per CT, then one phase-fault column per set present.
    order = np.argsort(ct_circ, kind="stable")
    counts = np.bincount(ct_circ, minlength=topo.n_circ)
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
    ct_col = np.empty(n_ct, dtype=np.int64)
    ct_col[order] = np.arange(n_ct) - starts[ct_circ[order]]
    set_off = np.cumsum([0] + [a.n_sets for a in arrs])
    ct_set = (
        np.concatenate(
            [
                np.where(a.ct_set >= 0, a.ct_set + int(o), -1)
                for a, o in zip(arrs, set_off, strict=False)
            ]
        )
        if arrs
        else np.zeros(0, dtype=np.int64)
    )
    has_set = ct_set >= 0
    set_col = np.full(n_ct, -1, dtype=np.int64)
    ncols = counts.astype(np.int64).copy()
    if has_set.any():
        width = int(set_off[-1]) + 1
        pairs = ct_circ[has_set] * width + ct_set[has_set]
        upairs, inv = np.unique(pairs, return_inverse=True)
        ucirc = upairs // width
        urank = np.arange(len(upairs)) - np.searchsorted(ucirc, ucirc)
        set_col[has_set] = counts[ct_circ[has_set]] + urank[inv]
        ncols += np.bincount(ucirc, minlength=topo.n_circ)

    gk = np.nonzero(~ct_open)[0]
    pk = np.nonzero(~ct_open & has_set)[0]
    inj_node = np.concatenate([f[gk], s[gk], f[pk], s[pk]])
    inj_col = np.concatenate([ct_col[gk], ct_col[gk], set_col[pk], set_col[pk]])
    ph = phasor[pk]
    ones = np.ones(len(gk), dtype=np.complex128)
    inj_val = np.concatenate([ones, -ones, ph, -ph])
    solve_cols = np.zeros(topo.n_circ, dtype=np.int64)
    solve_cols[ct_circ[gk]] = ncols[ct_circ[gk]]
    sol = solve(topo, br_y, inj_node, inj_col, inj_val, solve_cols)

    zg = sol.dv(f, s, ct_col)
    zp = zg.copy()
    if pk.size:
        zp[pk] = sol.dv(f[pk], s[pk], set_col[pk]) / phasor[pk]
    batch = _Batch(topo=topo, sol=sol, br_index=active, br_y=br_y, br_z=br_z[active])

    node_counts = np.bincount(topo.node_circ, minlength=topo.n_circ).tolist()
    zg_l, zp_l = zg.tolist(), zp.tolist()
    open_all, circ_all = ct_open.tolist(), ct_circ.tolist()
    for j, nl in enumerate(nets):
        c0, c1 = int(c_off[j]), int(c_off[j + 1])
        cts = nl.ct_list
        circ_l = circ_all[c0:c1]
        open_l = open_all[c0:c1]
        any_open = any(open_l)
        members = _group(ct_circ[c0:c1], [c.code for c in cts])
        label_id = {lab: circuit_id(codes) for lab, codes in members.items()}
        inputs_by: dict[int, list[tuple[str, str]]] = {}
        if nl.inputs:
            labs = topo.node_circ[topo.term_node[arrs[j].input_a + int(t_off[j])]]
            inputs_by = _group(labs, nl.input_keys)
        grounds_by: dict[int, list[str]] = {}
        seen_nodes: set[int] = set()
        if nl.grounds:
            gv = arrs[j].grounds + int(t_off[j])
            glab = topo.node_circ[topo.term_node[gv]].tolist()
            for t, node, lab in zip(nl.grounds, topo.term_point[gv].tolist(), glab, strict=True):
                if lab in label_id and node not in seen_nodes:
                    seen_nodes.add(node)
                    grounds_by.setdefault(lab, []).append(nl.terminals[t])
        circuits = []
        for lab, codes in members.items():
            opens = [c for c in codes if open_l[nl.cts[c].index]] if any_open else []
            circuits.append(
                Circuit(
                    id=label_id[lab],
                    cts=tuple(codes),
                    device_inputs=tuple(inputs_by.get(lab, ())),
                    ground_points=tuple(grounds_by.get(lab, ())),
                    open_cts=tuple(opens),
                    n_nodes=node_counts[lab],
                )
            )
        analysis = NormalAnalysis(
            netlist=nl,
            batch=batch,
            br_off=int(b_off[j]),
            ct_open=ct_open[c0:c1],
            ct_circ=ct_circ[c0:c1],
            ct_col=ct_col[c0:c1],
            circuits=circuits,
            circ_label_id=label_id,
            burdens={},
        )
        # (ct, circuit, ground_fault, phase_fault, analysis), positional: a CT each
        circuit_of = label_id.get
        if any_open:
            analysis.burdens = {
                c.code: CTBurden(
                    c.code,
                    circuit_of(circ_l[k]),
                    None if open_l[k] else zg_l[c0 + k],
                    None if open_l[k] else zp_l[c0 + k],
                    analysis,
                )
                for k, c in enumerate(cts)
            }
        else:
            analysis.burdens = {
                c.code: CTBurden(c.code, circuit_of(lab), zg, zp, analysis)
                for c, lab, zg, zp in zip(cts, circ_l, zg_l[c0:c1], zp_l[c0:c1], strict=True)
            }
        nl.cache["normal"] = analysis


def ct_burdens(netlist: Netlist) -> dict[str, CTBurden]:
    """Burden each CT sees in the normal state, ground-fault and phase-fault cases.

    Nodal analysis with ideal CT current sources (see the module docstring); ``None`` for a CT
    whose loop is open.
    """
    return normal_analysis(netlist).burdens


def find_circuits(netlist: Netlist) -> list[Circuit]:
    """The secondary circuits of the normal state (connected components holding a CT)."""
    return normal_analysis(netlist).circuits


def ct_burdens_many(netlists: list[Netlist]) -> list[dict[str, CTBurden]]:
    """``ct_burdens`` of several netlists solved in one batch (the fleet recompute's way)."""
    return [a.burdens for a in normal_analysis_many(netlists)]


def input_feeds(netlist: Netlist) -> dict[str, set[str]]:
    """Device code -> the CTs whose current reaches one of its inputs in the normal state."""
    return normal_analysis(netlist).feeds()


def burden_map(netlist: Netlist) -> dict[str, dict[str, Any]]:
    """``{ct: {"ground_fault": z, "phase_fault": z}}`` as the ratings engine takes it."""
    return {
        code: {"ground_fault": b.ground_fault, "phase_fault": b.phase_fault}
        for code, b in ct_burdens(netlist).items()
    }
