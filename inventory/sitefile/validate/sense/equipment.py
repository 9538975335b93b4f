"""Sense checks of the equipment section: each names a bus the file declares."""

from __future__ import annotations

from inventory.sitefile.validate.sense.base import SenseBase, items_of


class EquipmentChecks(SenseBase):
    def check_equipment(self) -> None:
        for index, item in items_of(self.doc, "equipment"):
            bus = item.get("bus")
            if isinstance(bus, str) and bus not in self.buses:
                self.add(f"unknown bus {bus!r}", "equipment", index, "bus")
