"""A small site document built in code for the import/export tests: one breaker with a wye
set of multi-ratio CTs into an overcurrent relay with a residual input, through a test switch
with shorting jaws. Invented data."""

from __future__ import annotations

import copy


def small_site(code: str = "TST") -> dict:
    cts, wires, poles, inputs = [], [], [], []
    for n, phase in enumerate("ABC", start=1):
        ct = f"CB-1-{phase}"
        cts.append(
            {
                "code": ct,
                "equipment": "CB-1",
                "phase": phase,
                "set": "CB-1-R",
                "secondary_a": 5,
                "terminals": {"X1": 0, "X2": 100, "X3": 150, "X4": 400, "X5": 600},
                "in_use": ["X1", "X4"],
                "accuracy": "C400",
                "winding_ohm": 0.3,
                "rating_factor": 1.5,
                "excitation": [[0.005, 20], [0.02, 120], [0.06, 300], [0.5, 420]],
            }
        )
        wires.append({"from": f"{ct}:X1", "to": f"TB-1:{n}", "size": "10AWG", "length_m": 80})
        wires.append({"from": f"{ct}:X4", "to": "TB-1:N", "size": "10AWG", "length_m": 80})
        wires.append({"from": f"TB-1:{n}", "to": f"TS-1:{n}L", "size": "10AWG", "length_m": 2})
        poles.append(
            {
                "code": f"TS-1/{n}",
                "kind": "test_switch_pole",
                "positions": ["closed", "open"],
                "normal": "closed",
                "transition": "make_before_break",
                "contacts": [
                    {"between": [f"TS-1:{n}L", f"TS-1:{n}R"], "closed_in": ["closed"]},
                    {"between": [f"TS-1:{n}L", "TS-1:SB"], "closed_in": ["open"]},
                ],
            }
        )
        inputs.append(
            {
                "name": f"I{phase}",
                "from": f"R-1:I{phase}1",
                "to": f"R-1:I{phase}2",
                "rated_a": 5,
                "burden_va": 0.2,
                "pf": 1.0,
            }
        )
    inputs.append(
        {"name": "IN", "from": "R-1:IN1", "to": "R-1:IN2", "rated_a": 5, "burden_ohm": [0.05, 0.01]}
    )
    links = [[f"TS-1:{n}R", f"R-1:I{p}1"] for n, p in enumerate("ABC", start=1)]
    links += [[f"R-1:I{p}2", "R-1:IN1"] for p in "ABC"]
    wires.append({"from": "R-1:IN2", "to": "TB-1:N", "size": "12AWG", "length_ft": 6.5})
    links.append(["TS-1:SB", "TB-1:N"])
    links.append(["R-1:T1", "TS-1:T1L"])
    wires.append({"from": "TS-1:T1R", "to": "CB-1:TC", "size": "12AWG", "length_m": 60})
    return copy.deepcopy(
        {
            "format": "loopkeep.site/1",
            "site": {"code": code, "name": "Test Yard 69 kV", "design_temp_c": 75},
            "buses": [
                {
                    "code": "B69",
                    "kv": 69,
                    "three_phase_fault_ka": 12.0,
                    "ground_fault_ka": 9.5,
                    "x_over_r": 10,
                }
            ],
            "equipment": [
                {
                    "code": "CB-1",
                    "kind": "breaker",
                    "bus": "B69",
                    "in_service": True,
                    "max_load_a": 320,
                }
            ],
            "terminal_blocks": [{"code": "TB-1", "description": "CT shorting block"}],
            "cts": cts,
            "devices": [
                {
                    "code": "R-1",
                    "kind": "relay",
                    "functions": ["50", "51", "50N", "51N"],
                    "ratio_setting": "400:5",
                    "inputs": inputs,
                    "outputs": [{"name": "TRIP", "terminal": "R-1:T1", "target": "CB-1:TC"}],
                }
            ],
            "wires": wires,
            "links": links,
            "grounds": ["TB-1:N"],
            "switches": [
                *poles,
                {
                    "code": "TS-1/T1",
                    "kind": "test_switch_pole",
                    "positions": ["closed", "open"],
                    "normal": "closed",
                    "transition": "break_before_make",
                    "contacts": [{"between": ["TS-1:T1L", "TS-1:T1R"], "closed_in": ["closed"]}],
                },
            ],
            "procedures": [
                {
                    "code": "P-1",
                    "title": "Remove R-1",
                    "author": "planner",
                    "devices": ["R-1"],
                    "steps": [
                        {"set": "TS-1/T1", "to": "open"},
                        {"set": "TS-1/1", "to": "open"},
                        {"set": "TS-1/2", "to": "open"},
                        {"set": "TS-1/3", "to": "open"},
                        {"remove_device": "R-1"},
                    ],
                }
            ],
        }
    )
