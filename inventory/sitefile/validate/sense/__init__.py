"""The sense layer: references between the parts of a site file and values that cannot be
physically right, one module per section. Tolerant of a structurally broken document (anything
of the wrong type is skipped here because the schema layer reports it); one pass per section
with dictionaries and sets, so the cost grows linearly with the file."""

from __future__ import annotations

from inventory.sitefile.validate.sense.base import EnoughErrors
from inventory.sitefile.validate.sense.cts import CTChecks
from inventory.sitefile.validate.sense.devices import DeviceChecks
from inventory.sitefile.validate.sense.equipment import EquipmentChecks
from inventory.sitefile.validate.sense.procedures import ProcedureChecks, record_names
from inventory.sitefile.validate.sense.switches import SwitchChecks
from inventory.sitefile.validate.sense.wiring import WiringChecks
from inventory.sitefile.validate.words import SiteFileError

__all__ = ["SenseChecker", "record_names"]


class SenseChecker(
    EquipmentChecks, CTChecks, DeviceChecks, WiringChecks, SwitchChecks, ProcedureChecks
):
    """Every section's sense checks over one document."""

    def run(self) -> list[SiteFileError]:
        """The errors of every section, or the first ``max_errors`` of them."""
        try:
            self.index()
            self.check_equipment()
            self.check_cts()
            self.check_devices()
            self.check_wires()
            self.check_links_and_grounds()
            self.check_switches()
            self.check_procedures()
        except EnoughErrors:
            pass
        return self.errors
