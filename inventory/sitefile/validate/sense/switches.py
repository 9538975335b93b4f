"""Sense checks of the switches: positions, the normal one, and the contacts' ends and positions."""

from __future__ import annotations

from inventory.sitefile.validate.sense.base import SenseBase, items_of
from inventory.sitefile.validate.words import listing


class SwitchChecks(SenseBase):
    def check_switches(self) -> None:
        for index, switch in items_of(self.doc, "switches"):
            here = ("switches", index)
            positions = switch.get("positions")
            known: list[str] = []
            for number, position in enumerate(positions if isinstance(positions, list) else ()):
                if not isinstance(position, str):
                    continue
                if position in known:
                    self.add(f"duplicate position {position!r}", *here, "positions", number)
                else:
                    known.append(position)
            normal = switch.get("normal")
            if isinstance(normal, str) and isinstance(positions, list) and normal not in known:
                self.add(
                    f"{normal!r} is not one of the positions ({listing(known)})", *here, "normal"
                )
            contacts = switch.get("contacts")
            for number, contact in enumerate(contacts if isinstance(contacts, list) else ()):
                if not isinstance(contact, dict):
                    continue
                self.two_ends(
                    contact.get("between"), "a contact", *here, "contacts", number, "between"
                )
                closed_in = contact.get("closed_in")
                listed: set[str] = set()
                for k, position in enumerate(closed_in if isinstance(closed_in, list) else ()):
                    if not isinstance(position, str) or not isinstance(positions, list):
                        continue
                    ptr = (*here, "contacts", number, "closed_in", k)
                    if position not in known:
                        self.add(
                            f"{position!r} is not one of the positions ({listing(known)})", *ptr
                        )
                    elif position in listed:
                        self.add(f"position {position!r} is listed twice", *ptr)
                    listed.add(position)
