"""Burdens against ngspice, an independent circuit solver (reference.md, "Independent oracles").

240 generated circuits (wye with and without a residual input, delta, paralleled CTs, random
R + jX meshes with 0–2 ground points), both fault cases of every CT: the engine's nodal solve
must agree with ngspice's AC analysis at 60 Hz within 0.1 %.
"""

from __future__ import annotations

import pytest

from analysis.engine import build_netlist, ct_burdens, ct_burdens_many
from tests.analysis.engine.generators import oracle_circuits
from tests.analysis.engine.spice import spice_burdens

TOLERANCE = 1e-3  # 0.1 %, the acceptance figure

pytestmark = pytest.mark.oracle


@pytest.fixture(scope="module")
def solved() -> tuple[list[dict], list[dict]]:
    docs = oracle_circuits()
    return docs, spice_burdens(docs)


def test_oracle_covers_at_least_200_circuits_of_every_kind(solved):
    docs, ref = solved
    kinds = {d["site"]["code"][0] for d in docs}
    assert len(docs) >= 200
    assert kinds == {"W", "D", "P", "M"}
    assert sum(len(r) for r in ref) >= 2 * len(docs)


def test_burdens_agree_with_ngspice_within_0_1_percent(solved):
    docs, ref = solved
    worst = 0.0
    for doc, cases in zip(docs, ref, strict=True):
        burdens = ct_burdens(build_netlist(doc))
        for (ct, case), z_spice in cases.items():
            z = getattr(burdens[ct], case)
            assert z is not None, f"{doc['site']['code']} {ct} {case}: engine says open"
            err = abs(z - z_spice) / abs(z_spice)
            worst = max(worst, err)
            assert err <= TOLERANCE, (doc["site"]["code"], ct, case, z, z_spice)
    assert worst <= TOLERANCE


def test_batched_solve_gives_the_same_burdens_as_ngspice(solved):
    """All 240 sites in one batch (the fleet recompute's way) against the same oracle."""
    docs, ref = solved
    many = ct_burdens_many([build_netlist(d) for d in docs])
    for burdens, cases in zip(many, ref, strict=True):
        for (ct, case), z_spice in cases.items():
            z = getattr(burdens[ct], case)
            assert abs(z - z_spice) <= TOLERANCE * abs(z_spice)
