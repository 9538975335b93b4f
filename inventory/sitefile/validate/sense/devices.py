"""Sense checks of the devices: ratio setting, inputs (terminals, one kind of burden) and
outputs."""

from __future__ import annotations

from inventory.sitefile.validate.sense.base import SenseBase, is_num, items_of


class DeviceChecks(SenseBase):
    def check_devices(self) -> None:
        for index, device in items_of(self.doc, "devices"):
            where = ("devices", index)
            ratio = device.get("ratio_setting")
            if isinstance(ratio, str) and ratio:
                problem = self.ratio_check(ratio)
                if problem:
                    self.add(problem, *where, "ratio_setting")
            self.unique_names(device.get("inputs"), "input", *where, "inputs")
            self.unique_names(device.get("outputs"), "output", *where, "outputs")

            inputs = device.get("inputs")
            for number, item in enumerate(inputs if isinstance(inputs, list) else ()):
                if not isinstance(item, dict):
                    continue
                here = (*where, "inputs", number)
                self.terminal(item.get("from"), *here, "from")
                self.terminal(item.get("to"), *here, "to")
                if isinstance(item.get("from"), str) and item.get("from") == item.get("to"):
                    self.add(f"an input from a terminal to itself ({item['to']!r})", *here, "to")
                has_va, has_ohm = "burden_va" in item, "burden_ohm" in item
                if has_va and has_ohm:
                    self.add("give burden_va (with pf) or burden_ohm, not both", *here)
                elif not has_va and not has_ohm:
                    self.add(
                        "no burden: give burden_va (VA at rated current, with pf) or "
                        "burden_ohm [R, X]",
                        *here,
                    )
                if has_ohm and "pf" in item and not has_va:
                    self.add(
                        "pf goes with burden_va; burden_ohm already gives R and X", *here, "pf"
                    )
                ohm = item.get("burden_ohm")
                if (
                    isinstance(ohm, list)
                    and len(ohm) == 2
                    and all(map(is_num, ohm))
                    and ohm[0] == 0
                    and ohm[1] == 0
                ):
                    self.add("burden_ohm is zero; use a link for no impedance", *here, "burden_ohm")

            outputs = device.get("outputs")
            for number, item in enumerate(outputs if isinstance(outputs, list) else ()):
                if not isinstance(item, dict):
                    continue
                here = (*where, "outputs", number)
                self.terminal(item.get("terminal"), *here, "terminal")
                self.terminal(item.get("target"), *here, "target")
                if isinstance(item.get("target"), str) and item.get("target") == item.get(
                    "terminal"
                ):
                    self.add("an output cannot target its own terminal", *here, "target")
