"""A procedure's region is a view over the site's netlist (``netlist.region``), not a second
build: it must be the netlist that ``build_netlist`` makes of the record cut to the region,
terminal for terminal and array for array (issue 15, scope 2)."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

import record as rec
from analysis.engine.netlist import build_netlist, region
from analysis.engine.procedure import region_mask, touched_terminals
from fixtures.fleet import generate_site


def _cut_record(nl, mask):
    """The record with only the elements of the region (the build the view replaces)."""
    record = nl.record

    def inside(name):
        i = nl.index.get(name)
        return i is not None and bool(mask[i])

    devices = []
    for d in record.devices:
        ins = tuple(i for i in d.inputs if inside(i.from_terminal))
        outs = tuple(o for o in d.outputs if inside(o.terminal))
        if ins or outs:
            devices.append(replace(d, inputs=ins, outputs=outs))
    switches = []
    for s in record.switches:
        contacts = tuple(c for c in s.contacts if inside(c.between[0]))
        if contacts:
            switches.append(replace(s, contacts=contacts))
    return replace(
        record,
        cts=tuple(c for c in record.cts if mask[nl.cts[c.code].first]),
        devices=tuple(devices),
        wires=tuple(w for w in record.wires if inside(w.from_terminal)),
        links=tuple(k for k in record.links if inside(k.a)),
        grounds=tuple(g for g in record.grounds if inside(g)),
        switches=tuple(switches),
    )


@pytest.mark.parametrize("index", [0, 1, 2])
def test_region_is_the_build_of_the_cut_record(index):
    nl = build_netlist(rec.as_record(generate_site(index, seed=3)))
    assert nl.procedures
    for proc in nl.procedures.values():
        seeds, jumps = touched_terminals(nl, list(proc.steps), proc.devices)
        mask = region_mask(nl, seeds, jumps)
        assert not mask.all()
        view = region(nl, mask)
        built = build_netlist(_cut_record(nl, mask))
        assert view.terminals == built.terminals
        assert list(view.cts) == list(built.cts)
        assert list(view.devices) == list(built.devices)
        assert list(view.switches) == list(built.switches)
        assert view.grounds == built.grounds
        for name in view.arrays.__dataclass_fields__:
            a, b = getattr(view.arrays, name), getattr(built.arrays, name)
            if isinstance(a, np.ndarray):
                assert a.dtype == b.dtype and np.array_equal(a, b), name
            else:
                assert a == b, name
