"""Sense checks of the CTs: terminal positions, the tap in use, the set's phases, the accuracy
class, the excitation curve and the tap history (in order, within its time range, zoned)."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from inventory.sitefile.validate.sense.base import (
    SenseBase,
    is_num,
    is_pair,
    items_of,
    parse_time,
    positive,
)
from inventory.sitefile.validate.words import listing, pair_text, pointer, show


class CTChecks(SenseBase):
    def check_cts(self) -> None:
        set_phases: dict[tuple[str, str], tuple[str, int]] = {}
        for index, ct in items_of(self.doc, "cts"):
            code = ct.get("code")
            where = ("cts", index)
            equipment = ct.get("equipment")
            if isinstance(equipment, str) and equipment not in self.equipment:
                self.add(f"unknown equipment {equipment!r}", *where, "equipment")

            terminals = ct.get("terminals")
            if isinstance(terminals, dict):
                self.winding(ct, terminals, where)

            phase, group = ct.get("phase"), ct.get("set")
            if isinstance(phase, str) and isinstance(group, str) and phase != "N":
                key = (group, phase)
                if key in set_phases:
                    other, other_index = set_phases[key]
                    self.add(
                        f"set {group!r} already has a phase {phase} CT ({other} at "
                        f"{pointer('cts', other_index)})",
                        *where,
                        "phase",
                    )
                else:
                    set_phases[key] = (str(code), index)

            accuracy = ct.get("accuracy")
            if isinstance(accuracy, str) and accuracy:
                problem = self.accuracy_check(
                    accuracy, positive(ct.get("rated_burden_va")), positive(ct.get("knee_v"))
                )
                if problem:
                    self.add(problem, *where, "accuracy")

            self.excitation(ct.get("excitation"), *where, "excitation")

    def winding(self, ct: dict, terminals: dict[str, Any], where: tuple[Any, ...]) -> None:
        """Terminal positions, the tap in use and the tap history of one CT."""
        at_position: dict[float, str] = {}
        for name, position in terminals.items():
            if not is_num(position):
                continue
            if position in at_position:
                self.add(
                    f"position {show(position)} is also that of {at_position[position]}; "
                    "two terminals cannot sit at the same point of the winding",
                    *where,
                    "terminals",
                    name,
                )
            else:
                at_position[position] = name
        self.tap(ct.get("in_use"), terminals, *where, "in_use")
        self.tap_changes(ct.get("tap_changes"), terminals, *where)

    def tap(self, tap: Any, terminals: dict[str, Any], *tokens: Any) -> bool:
        """Check a pair of CT terminal names; True when it is a usable tap."""
        if not is_pair(tap):
            return False
        good = True
        for end, name in enumerate(tap):
            if name not in terminals:
                self.add(
                    f"the CT has no terminal {name!r} (it has {listing(terminals) or 'none'})",
                    *tokens,
                    end,
                )
                good = False
        if tap[0] == tap[1]:
            self.add(
                f"both terminals are {tap[0]!r}; a tap needs two different terminals",
                *tokens,
                1,
            )
            good = False
        return good

    def excitation(self, points: Any, *tokens: Any) -> None:
        if not isinstance(points, list):
            return
        previous: tuple[int, Any, Any] | None = None
        for index, point in enumerate(points):
            if not (isinstance(point, list) and len(point) == 2 and all(map(is_num, point))):
                previous = None
                continue
            current_a, volts = point
            if previous is not None:
                last, last_a, last_v = previous
                if current_a <= last_a:
                    self.add(
                        f"exciting current must rise from point to point: {show(current_a)} "
                        f"is not above {show(last_a)} of point {last}",
                        *tokens,
                        index,
                        0,
                    )
                if volts <= last_v:
                    self.add(
                        f"secondary voltage must rise from point to point: {show(volts)} "
                        f"is not above {show(last_v)} of point {last}",
                        *tokens,
                        index,
                        1,
                    )
            previous = (index, current_a, volts)

    def tap_changes(self, changes: Any, terminals: dict[str, Any], *where: Any) -> None:
        # An in_use that differs from the last change's "to" is not an error: it is a tap
        # change made now, and the importer records it as an event. Taps are ordered pairs
        # (the first terminal is where the current leaves), so a swap is a change too.
        if not isinstance(changes, list):
            return
        last_to: tuple[int, list[str]] | None = None
        last_at: tuple[int, datetime] | None = None
        for index, change in enumerate(changes):
            if not isinstance(change, dict):
                last_to = None
                continue
            here = (*where, "tap_changes", index)
            before, after = change.get("from"), change.get("to")
            good_from = self.tap(before, terminals, *here, "from")
            good_to = self.tap(after, terminals, *here, "to")
            if good_from and good_to and list(before) == list(after):
                self.add(f"the same tap as from ({pair_text(before)}); not a change", *here, "to")
            if good_from and last_to is not None and list(before) != list(last_to[1]):
                self.add(
                    f"{pair_text(before)} does not follow the previous change, which left "
                    f"{pair_text(last_to[1])}",
                    *here,
                    "from",
                )
            last_to = (index, after) if good_to else None

            at = change.get("at")
            if isinstance(at, str) and at:
                moment = parse_time(at)
                if isinstance(moment, str):
                    self.add(moment, *here, "at")
                elif last_at is not None and moment < last_at[1]:
                    self.add(
                        f"earlier than change {last_at[0]}; list tap changes oldest first",
                        *here,
                        "at",
                    )
                    last_at = (index, moment)
                else:
                    last_at = (index, moment)
