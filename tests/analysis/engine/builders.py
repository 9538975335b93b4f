"""Site dicts for the engine tests, built in code (format ``loopkeep.site/1``) with the shared
document builder (``fixtures.documents``).

``SiteBuilder`` adds elements one by one; ``wye_panel`` and ``delta_panel`` build the usual
three-phase relay panels (CT set, leads, test switch, optional draw-out case and trip pole).
"""

from __future__ import annotations

from typing import Any

from fixtures.documents import DocumentBuilder


class SiteBuilder(DocumentBuilder):
    """``fixtures.documents.DocumentBuilder`` with the engine tests' defaults (a C400 CT of
    0.3 Ω on X1-X2 at 400 A, 5 A inputs given as complex ohms); every method returns ``self``
    so that calls chain."""

    def __init__(self, code: str = "TST", design_temp_c: float = 75.0) -> None:
        super().__init__(
            {"code": code, "name": f"Test site {code}", "design_temp_c": design_temp_c}
        )

    def equipment(  # type: ignore[override]
        self, code: str, *, in_service: bool = True, max_load_a: float | None = None
    ) -> SiteBuilder:
        super().equipment(code, in_service=in_service, max_load_a=max_load_a)
        return self

    def ct(  # type: ignore[override]
        self,
        code: str,
        *,
        equipment: str | None = None,
        phase: str = "A",
        set_name: str | None = None,
        terminals: dict[str, float] | None = None,
        in_use: tuple[str, str] = ("X1", "X2"),
        secondary_a: float = 5,
    ) -> SiteBuilder:
        super().ct(
            code,
            terminals=terminals or {"X1": 0, "X2": 400},
            in_use=in_use,
            secondary_a=secondary_a,
            phase=phase,
            accuracy="C400",
            winding_ohm=0.3,
            equipment=equipment or None,
            set=set_name or None,
        )
        return self

    def device(  # type: ignore[override]
        self,
        code: str,
        *,
        kind: str = "relay",
        functions: tuple[str, ...] = ("51",),
        inputs: list[tuple[str, str, str, complex]] = (),  # type: ignore[assignment]
        outputs: list[tuple[str, str, str]] = (),  # type: ignore[assignment]
    ) -> SiteBuilder:
        super().device(
            code,
            kind=kind,
            functions=functions,
            inputs=[self.device_input(n, a, b, burden_ohm=z) for n, a, b, z in inputs],
            outputs=outputs,
        )
        return self

    def wire(self, a: str, b: str, r_ohm: float) -> SiteBuilder:  # type: ignore[override]
        super().wire(a, b, r_ohm=r_ohm)
        return self

    def link(self, a: str, b: str) -> SiteBuilder:  # type: ignore[override]
        super().link(a, b)
        return self

    def ground(self, t: str) -> SiteBuilder:  # type: ignore[override]
        super().ground(t)
        return self

    def block(self, code: str) -> SiteBuilder:  # type: ignore[override]
        super().block(code)
        return self

    def switch(  # type: ignore[override]
        self,
        code: str,
        contacts: list[tuple[str, str, tuple[str, ...]]],
        *,
        kind: str = "test_switch_pole",
        positions: tuple[str, ...] = ("closed", "open"),
        normal: str = "closed",
        transition: str = "make_before_break",
    ) -> SiteBuilder:
        super().switch(
            code, contacts, kind=kind, positions=positions, normal=normal, transition=transition
        )
        return self

    def ct_pole(  # type: ignore[override]
        self,
        code: str,
        line: str,
        load: str,
        short: str | None,
        *,
        transition: str = "make_before_break",
    ) -> SiteBuilder:
        super().ct_pole(code, line, load, short, transition=transition)
        return self

    def trip_pole(self, code: str, a: str, b: str) -> SiteBuilder:  # type: ignore[override]
        super().trip_pole(code, a, b)
        return self

    def procedure(  # type: ignore[override]
        self, code: str, steps: list[dict[str, Any]], devices: tuple[str, ...] = ()
    ) -> SiteBuilder:
        super().procedure(code, steps, devices)
        return self


PHASES = ("A", "B", "C")


def wye_panel(
    *,
    r_lead_ohm: float = 0.5,
    z_relay_ohm: complex = 0.1,
    r_neutral_ohm: float | None = 0.5,
    z_residual_ohm: complex | None = None,
    test_switch: bool = False,
    draw_out: bool = False,
    trip: bool = False,
    transition: str = "make_before_break",
    max_load_a: float | None = 320,
    ground: bool = True,
    code: str = "WYE",
) -> SiteBuilder:
    """A wye-connected CT set CB-1-A/B/C into relay R-1 (phase inputs IA/IB/IC and, if
    ``z_residual_ohm`` is given, a residual input IN in the common return).

    CT X1 → lead (R_L) → TB-1:{p} → [TS-1/{p} knife] → R-1:I{p}1 → input → R-1:I{p}2 → star
    R-1:N; star → [IN] → R-1:NR → [TS-1/N] → TB-1:N → neutral lead → CT star CB-1:STAR, which
    joins the three X2. With ``r_neutral_ohm=None`` the neutral lead has no resistance.
    """
    b = SiteBuilder(code)
    b.equipment("CB-1", max_load_a=max_load_a)
    b.block("TB-1")
    for p in PHASES:
        b.ct(f"CB-1-{p}", equipment="CB-1", phase=p, set_name="CB-1-R")
        b.link(f"CB-1-{p}:X2", "CB-1:STAR")
    outputs = [("TRIP", "R-1:T1", "CB-1:TC")] if trip else []
    inputs = [(f"I{p}", f"R-1:I{p}1", f"R-1:I{p}2", z_relay_ohm) for p in PHASES]
    if z_residual_ohm is not None:
        inputs.append(("IN", "R-1:N", "R-1:NR", z_residual_ohm))
    b.device("R-1", functions=("50", "51", "50N", "51N"), inputs=inputs, outputs=outputs)
    for p in PHASES:
        b.link(f"R-1:I{p}2", "R-1:N")
    if z_residual_ohm is None:
        b.link("R-1:N", "R-1:NR")
    for p in PHASES:
        b.wire(f"CB-1-{p}:X1", f"TB-1:{p}", r_lead_ohm)
    if r_neutral_ohm is None:
        b.link("CB-1:STAR", "TB-1:N")
    else:
        b.wire("CB-1:STAR", "TB-1:N", r_neutral_ohm)
    if ground:
        b.ground("TB-1:N")
    # relay-side terminals of the panel: through the test switch, the draw-out case, or both
    for p in PHASES:
        line = f"TB-1:{p}"
        relay = f"R-1:I{p}1"
        if test_switch:
            b.ct_pole(f"TS-1/{p}", line, f"TS-1:{p}R", "TS-1:SB", transition=transition)
            line = f"TS-1:{p}R"
        if draw_out:
            b.link(line, f"DC-1:{p}L")
            line = f"DC-1:{p}L"
        else:
            b.link(line, relay)
    neutral_line = "TB-1:N"
    if test_switch:
        b.link("TS-1:SB", "TB-1:N")
    if draw_out:
        b.link(neutral_line, "DC-1:NL")
        contacts: list[tuple[str, str, tuple[str, ...]]] = []
        for p in PHASES:
            contacts.append((f"DC-1:{p}L", f"R-1:I{p}1", ("inserted",)))
            contacts.append((f"DC-1:{p}L", "DC-1:NL", ("withdrawn",)))
        contacts.append(("DC-1:NL", "R-1:NR", ("inserted",)))
        if trip:
            contacts.append(("DC-1:T1L", "R-1:T1", ("inserted",)))
        b.switch(
            "DC-1",
            contacts,
            kind="draw_out_case",
            positions=("inserted", "withdrawn"),
            normal="inserted",
            transition="make_before_break",
        )
    else:
        b.link(neutral_line, "R-1:NR")
    if trip:
        relay_trip = "DC-1:T1L" if draw_out else "R-1:T1"
        if test_switch:
            b.trip_pole("TS-1/T1", relay_trip, "TS-1:T1R")
            b.wire("TS-1:T1R", "CB-1:TC", 1.0)
        else:
            b.wire(relay_trip, "CB-1:TC", 1.0)
    return b


def delta_panel(
    *, r_lead_ohm: float = 0.5, z_relay_ohm: complex = 0.1, code: str = "DLT"
) -> SiteBuilder:
    """Delta-connected CT set at the CTs (X1 of A to X2 of B, etc.), three leads, relay
    inputs in wye at the panel, no neutral lead (the classic case of reference.md)."""
    b = SiteBuilder(code)
    b.equipment("CB-2", max_load_a=320)
    for p in PHASES:
        b.ct(f"CB-2-{p}", equipment="CB-2", phase=p, set_name="CB-2-D")
    # delta: the line of phase p is X1 of p joined with X2 of the previous phase (A-B, B-C, C-A)
    prev = {"A": "C", "B": "A", "C": "B"}
    for p in PHASES:
        b.link(f"CB-2-{p}:X1", f"CB-2-{prev[p]}:X2")
        b.wire(f"CB-2-{p}:X1", f"TB-2:{p}", r_lead_ohm)
    inputs = [(f"I{p}", f"TB-2:{p}", "R-2:N", z_relay_ohm) for p in PHASES]
    b.device("R-2", functions=("51",), inputs=inputs)
    b.ground("R-2:N")
    return b
