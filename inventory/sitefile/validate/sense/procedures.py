"""Sense checks of the procedures: every step against the one rule of what a step may name
(``siterules.procedure_refs``), over the names the record declares."""

from __future__ import annotations

from inventory.sitefile.validate.sense.base import SenseBase, is_pair, items_of
from siterules.procedure_refs import RecordNames, procedure_problems


class ProcedureChecks(SenseBase):
    def check_procedures(self) -> None:
        """Every procedure against the one rule of what a step may name
        (``siterules.procedure_refs``, which the engine applies too)."""
        known = record_names(self.doc)
        for index, procedure in items_of(self.doc, "procedures"):
            here = ("procedures", index)
            devices = procedure.get("devices")
            steps = procedure.get("steps")
            for problem in procedure_problems(
                known,
                steps if isinstance(steps, list) else [],
                devices if isinstance(devices, list) else [],
                prefix=here,
                check_shape=False,
            ):
                self.add(problem.message, *here, *problem.at)


def record_names(doc: dict) -> RecordNames:
    """The names a procedure of ``doc`` may refer to: every terminal an element of the record
    touches (as the engine's netlist indexes them), switches with their positions, devices,
    equipment, and the ends of every wire and link (two different terminals)."""
    # Written out flat: it reads every reference of the file (a fleet site has ~10^4).
    terminals: set[str] = set()
    add = terminals.add

    for _, ct in items_of(doc, "cts"):
        code, positions = ct.get("code"), ct.get("terminals")
        if isinstance(code, str) and isinstance(positions, dict):
            terminals.update(f"{code}:{name}" for name in positions)
    for _, device in items_of(doc, "devices"):
        for key, fields in (("inputs", ("from", "to")), ("outputs", ("terminal", "target"))):
            items = device.get(key)
            for item in items if isinstance(items, list) else ():
                if isinstance(item, dict):
                    for field in fields:
                        value = item.get(field)
                        if isinstance(value, str):
                            add(value)
    wires: set[frozenset[str]] = set()
    for _, wire in items_of(doc, "wires"):
        a, b = wire.get("from"), wire.get("to")
        if isinstance(a, str):
            add(a)
        if isinstance(b, str):
            add(b)
            if isinstance(a, str) and a != b:
                wires.add(frozenset((a, b)))
    links: set[frozenset[str]] = set()
    raw_links = doc.get("links")
    for link in raw_links if isinstance(raw_links, list) else ():
        if isinstance(link, list):
            for value in link:
                if isinstance(value, str):
                    add(value)
            if is_pair(link) and link[0] != link[1]:
                links.add(frozenset(link))
    grounds = doc.get("grounds")
    for ground in grounds if isinstance(grounds, list) else ():
        if isinstance(ground, str):
            add(ground)
    switches: dict[str, tuple[str, ...]] = {}
    for _, switch in items_of(doc, "switches"):
        code, positions = switch.get("code"), switch.get("positions")
        if isinstance(code, str) and code not in switches:
            switches[code] = tuple(
                p for p in (positions if isinstance(positions, list) else ()) if isinstance(p, str)
            )
        contacts = switch.get("contacts")
        for contact in contacts if isinstance(contacts, list) else ():
            between = contact.get("between") if isinstance(contact, dict) else None
            for value in between if isinstance(between, list) else ():
                if isinstance(value, str):
                    add(value)
    codes = {
        section: frozenset(
            item["code"] for _, item in items_of(doc, section) if isinstance(item.get("code"), str)
        )
        for section in ("devices", "equipment")
    }
    return RecordNames(
        terminals=frozenset(terminals),
        switches=switches,
        devices=codes["devices"],
        equipment=codes["equipment"],
        wires=frozenset(wires),
        links=frozenset(links),
    )
