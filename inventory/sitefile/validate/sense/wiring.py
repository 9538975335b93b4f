"""Sense checks of the wiring: wires (ends, one way to give the resistance, the conductor size),
links and grounds."""

from __future__ import annotations

from inventory.sitefile.validate.sense.base import SenseBase, items_of


class WiringChecks(SenseBase):
    def check_wires(self) -> None:
        for index, wire in items_of(self.doc, "wires"):
            here = ("wires", index)
            start, end = wire.get("from"), wire.get("to")
            self.terminal(start, *here, "from")
            self.terminal(end, *here, "to")
            if isinstance(start, str) and isinstance(end, str) and start == end:
                self.add(f"a wire from a terminal to itself ({end!r})", *here, "to")

            has_r = "r_ohm" in wire
            has_size = "size" in wire
            has_m, has_ft = "length_m" in wire, "length_ft" in wire
            if has_r and (has_size or has_m or has_ft or "material" in wire):
                self.add("give r_ohm alone, or size with length_m or length_ft; not both", *here)
            elif not has_r:
                if not has_size and not (has_m or has_ft):
                    self.add("no resistance: give size with length_m or length_ft, or r_ohm", *here)
                elif not has_size:
                    self.add("length given without a size (e.g. '10AWG', '4mm2')", *here)
                elif not (has_m or has_ft):
                    self.add("size given without length_m or length_ft", *here)
            if has_m and has_ft:
                self.add("give length_m or length_ft, not both", *here)

            size = wire.get("size")
            if isinstance(size, str) and size:
                material = wire.get("material", "cu")
                problem = self.wire_size_check(size, material if material in ("cu", "al") else "cu")
                if problem:
                    self.add(problem, *here, "size")

    def check_links_and_grounds(self) -> None:
        links = self.doc.get("links")
        for index, link in enumerate(links if isinstance(links, list) else ()):
            self.two_ends(link, "a link", "links", index)
        grounds = self.doc.get("grounds")
        seen: dict[str, int] = {}
        for index, ground in enumerate(grounds if isinstance(grounds, list) else ()):
            self.terminal(ground, "grounds", index)
            if isinstance(ground, str):
                if ground in seen:
                    self.add(
                        f"{ground!r} is listed twice (first at /grounds/{seen[ground]})",
                        "grounds",
                        index,
                    )
                else:
                    seen[ground] = index
