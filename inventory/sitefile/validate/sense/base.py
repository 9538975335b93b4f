"""What every section's sense checks share: the index of the record's codes and terminal
owners, and the checks of a terminal reference, a two-ended element and unique names."""

from __future__ import annotations

from collections.abc import Iterator
from datetime import UTC, datetime
from typing import Any

from inventory.sitefile.validate.sense.trade_checks import accuracy_checker, wire_size_checker
from inventory.sitefile.validate.words import SiteFileError, listing, pointer, show
from trade.ratio import ratio_setting_error


def is_num(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)


def is_pair(value: Any) -> bool:
    return isinstance(value, list) and len(value) == 2 and all(isinstance(v, str) for v in value)


def items_of(doc: dict, section: str) -> Iterator[tuple[int, dict]]:
    items = doc.get(section)
    if isinstance(items, list):
        for index, item in enumerate(items):
            if isinstance(item, dict):
                yield index, item


def positive(value: Any) -> float | None:
    return value if is_num(value) and value > 0 else None


# Recorded times: a tap change before 1900 or after 2200 is a typing error, and times outside
# what the database driver can read back (year 1 with an offset east of UTC, year 9999 west of
# it) would break the site for good.
EARLIEST_YEAR, LATEST_YEAR = 1900, 2200


def parse_time(text: str) -> datetime | str:
    """A recorded time: an ISO 8601 date and time with its zone, between
    :data:`EARLIEST_YEAR` and :data:`LATEST_YEAR`; or why it is not one."""
    example = "a date and time with its zone like '2024-03-05T10:00:00Z'"
    try:
        moment = datetime.fromisoformat(text)
    except ValueError:
        return f"must be {example}, got {show(text)}"
    if moment.tzinfo is None or moment.utcoffset() is None:
        return f"must be {example} (no zone: which clock?), got {show(text)}"
    try:
        year = moment.astimezone(UTC).year
    except OverflowError:
        year = moment.year
    if not EARLIEST_YEAR <= year <= LATEST_YEAR:
        return (
            f"must be between {EARLIEST_YEAR} and {LATEST_YEAR} (a recorded change), "
            f"got {show(text)}"
        )
    return moment


class EnoughErrors(Exception):
    """Raised by :meth:`SenseBase.add` once ``max_errors`` are collected."""


class SenseBase:
    """The reference and plausibility checks; tolerant of a structurally broken document
    (anything of the wrong type is skipped here because the schema layer reports it)."""

    def __init__(self, doc: dict, *, max_errors: int | None = None) -> None:
        self.max_errors = max_errors
        self.doc = doc
        self.errors: list[SiteFileError] = []
        self.wire_size_check = wire_size_checker()
        self.accuracy_check = accuracy_checker()
        # The model layer's rule, so the file and the admin accept the same settings.
        self.ratio_check = ratio_setting_error

    def index(self) -> None:
        """The codes of each section (first declaration wins; later duplicates are errors),
        the terminal names of each CT and the other owners of terminals."""
        self.buses = self.codes("buses", "bus")
        self.equipment = self.codes("equipment", "equipment")
        self.blocks = self.codes("terminal_blocks", "terminal block")
        self.cts = self.codes("cts", "CT")
        self.devices = self.codes("devices", "device")
        self.switches = self.codes("switches", "switch")
        self.codes("procedures", "procedure")

        # Terminal names of each CT (for OWNER:NAME checks and taps).
        # None when the CT's terminals are unreadable (the schema layer says so): then any
        # name is let through rather than reported against a list that is not there.
        self.ct_terminals: dict[str, dict[str, Any] | None] = {}
        for index, ct in items_of(self.doc, "cts"):
            code, terminals = ct.get("code"), ct.get("terminals")
            if isinstance(code, str) and self.cts.get(code) == index:
                self.ct_terminals[code] = terminals if isinstance(terminals, dict) else None

        # Owners other than CTs: devices, equipment, terminal blocks, switch groups.
        self.owners: set[str] = set(self.devices) | set(self.equipment) | set(self.blocks)
        for _, switch in items_of(self.doc, "switches"):
            code = switch.get("code")
            if isinstance(code, str):
                self.owners.add(code.split("/", 1)[0])

    def add(self, message: str, *tokens: Any) -> None:
        self.errors.append(SiteFileError(pointer(*tokens), message))
        if self.max_errors is not None and len(self.errors) >= self.max_errors:
            raise EnoughErrors

    # -- codes ---------------------------------------------------------------------------

    def codes(self, section: str, noun: str) -> dict[str, int]:
        """code -> index of its first declaration; later duplicates are errors."""
        seen: dict[str, int] = {}
        for index, item in items_of(self.doc, section):
            code = item.get("code")
            if not isinstance(code, str):
                continue
            if code in seen:
                self.add(
                    f"duplicate {noun} code {code!r} (first at {pointer(section, seen[code])})",
                    section,
                    index,
                    "code",
                )
            else:
                seen[code] = index
        return seen

    # -- terminals -----------------------------------------------------------------------

    def terminal(self, value: Any, *tokens: Any) -> None:
        if not isinstance(value, str) or ":" not in value:
            return
        owner, name = value.split(":", 1)
        if owner in self.ct_terminals:
            names = self.ct_terminals[owner]
            if names is not None and name not in names:
                self.add(
                    f"CT {owner!r} has no terminal {name!r} (it has {listing(names) or 'none'})",
                    *tokens,
                )
        elif owner not in self.owners:
            self.add(
                f"unknown owner {owner!r} of terminal {value!r}: not a CT, device, equipment, "
                "terminal block or switch group of this site",
                *tokens,
            )

    def two_ends(self, pair: Any, what: str, *tokens: Any) -> None:
        """Both ends of a two-terminal element (wire, link, contact, jumper) exist and differ."""
        if not isinstance(pair, list):
            return
        for end, value in enumerate(pair[:2]):
            self.terminal(value, *tokens, end)
        if is_pair(pair) and pair[0] == pair[1]:
            self.add(f"{what} from a terminal to itself ({pair[0]!r})", *tokens, 1)

    def unique_names(self, items: Any, noun: str, *tokens: Any) -> None:
        if not isinstance(items, list):
            return
        seen: dict[str, int] = {}
        for index, item in enumerate(items):
            name = item.get("name") if isinstance(item, dict) else None
            if not isinstance(name, str):
                continue
            if name in seen:
                self.add(
                    f"duplicate {noun} name {name!r} (first at {pointer(*tokens, seen[name])})",
                    *tokens,
                    index,
                    "name",
                )
            else:
                seen[name] = index
