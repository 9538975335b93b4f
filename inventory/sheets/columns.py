"""The canonical columns of each kind of sheet, and how a file's own headers map onto them.

A header matches a column by its name or an alias, ignoring case, spacing, ``_``/``-``/``.``
and a unit in brackets (``Winding resistance (mΩ)``); the unit is converted to the column's
own (mΩ → Ω). A mapping file (YAML or JSON: ``{"columns": {"Their header": "winding_ohm",
"Notes": null}}``, or the inner mapping alone) names a utility's own headers; ``null`` ignores a
column. Any other header is an error, never silently dropped.
"""

from __future__ import annotations

import json
import re
from dataclasses import dataclass
from pathlib import Path

import yaml


@dataclass(frozen=True)
class Column:
    """A canonical column: its name, other names for it, and its unit (None: no unit)."""

    name: str
    aliases: tuple[str, ...] = ()
    unit: str | None = None
    required: bool = False


CT_COLUMNS: tuple[Column, ...] = (
    Column("site", ("site code", "substation", "station"), required=True),
    Column("equipment", ("equipment code", "breaker", "apparatus", "bay")),
    Column("ct", ("ct code", "ct id", "ct name", "code"), required=True),
    Column("phase", ("ph",)),
    Column("set", ("set name", "ct set")),
    Column("secondary_a", ("secondary", "secondary rating", "secondary current", "sec"), "A"),
    Column("terminals", ("terminal positions", "winding", "ratio", "full ratio", "ct ratio")),
    Column("in_use", ("tap in use", "tap", "taps in use", "connected tap", "in use tap")),
    Column("accuracy", ("accuracy class", "class")),
    Column("rated_burden_va", ("rated burden", "rated output"), "VA"),
    Column("winding_ohm", ("winding resistance", "secondary resistance", "rct"), "Ω"),
    Column("rating_factor", ("rf", "thermal rating factor")),
    Column("serial", ("serial number", "serial no", "nameplate")),
)

TAP_CHANGE_COLUMNS: tuple[Column, ...] = (
    Column("site", ("site code", "substation", "station"), required=True),
    Column("ct", ("ct code", "ct id", "ct name", "code"), required=True),
    Column("from", ("from tap", "old tap", "previous tap"), required=True),
    Column("to", ("to tap", "new tap"), required=True),
    Column("changed_at", ("changed", "date", "when", "changed on", "date changed"), required=True),
    Column("work_order", ("wo", "work order no", "work order number")),
    Column("changed_by", ("by", "who", "changed by name")),
    Column("reason", ("why", "comment", "remarks")),
)

KINDS: dict[str, tuple[Column, ...]] = {"cts": CT_COLUMNS, "tap_changes": TAP_CHANGE_COLUMNS}

# Unit as written (exact, then case-insensitive where that is unambiguous) -> (the column's
# unit, factor to it).
_UNITS: dict[str, tuple[str, float]] = {
    "Ω": ("Ω", 1.0),
    "ohm": ("Ω", 1.0),
    "ohms": ("Ω", 1.0),
    "mΩ": ("Ω", 1e-3),
    "mohm": ("Ω", 1e-3),
    "milliohm": ("Ω", 1e-3),
    "milliohms": ("Ω", 1e-3),
    "VA": ("VA", 1.0),
    "A": ("A", 1.0),
    "amps": ("A", 1.0),
    "m": ("m", 1.0),
    "ft": ("m", 0.3048),  # the international foot, exactly
    "feet": ("m", 0.3048),
}
_UNITS_FOLDED = {k.casefold(): v for k, v in _UNITS.items() if k not in ("mΩ",)}

_UNIT_IN_HEADER = re.compile(r"^(?P<label>.*?)\s*[\(\[](?P<unit>[^\)\]]*)[\)\]]\s*$")


def normal(text: str) -> str:
    """A header in the form names are compared in: case-folded, separators as one space."""
    return re.sub(r"[\s_\-.#:]+", " ", str(text).casefold()).strip()


class HeaderError(ValueError):
    """Headers that map to no column (or twice to one); ``problems`` lists (header, message)."""

    def __init__(self, problems: list[tuple[str, str]]) -> None:
        self.problems = problems
        super().__init__("; ".join(f"{h!r}: {m}" for h, m in problems))


@dataclass(frozen=True)
class Mapped:
    """One column of the file: its header as written, the canonical column and the factor that
    converts its numbers to the column's unit."""

    index: int
    header: str
    column: Column
    factor: float = 1.0


def load_mapping(path: str | Path) -> dict[str, str | None]:
    """A mapping file: header as written -> canonical column name (or null to ignore)."""
    text = Path(path).read_text(encoding="utf-8")
    try:
        data = json.loads(text) if str(path).endswith(".json") else yaml.safe_load(text)
    except (ValueError, yaml.YAMLError) as exc:
        raise ValueError(f"{path}: not a JSON or YAML mapping: {exc}") from None
    if isinstance(data, dict) and isinstance(data.get("columns"), dict):
        data = data["columns"]
    if not isinstance(data, dict) or not all(
        isinstance(v, str) or v is None for v in data.values()
    ):
        raise ValueError(
            f"{path}: expected a mapping of headers to column names (or null to ignore one)"
        )
    return {str(k): v for k, v in data.items()}


def _unit_factor(column: Column, unit: str) -> float:
    unit = unit.strip()
    found = _UNITS.get(unit) or _UNITS_FOLDED.get(unit.casefold())
    if column.unit is None:
        raise ValueError(f"the column {column.name} takes no unit, got ({unit})")
    if found is None or found[0] != column.unit:
        raise ValueError(
            f"unit ({unit}) is not one {column.name} can be given in "
            f"({', '.join(k for k, v in _UNITS.items() if v[0] == column.unit)})"
        )
    return found[1]


def map_headers(
    headers: list[str], kind: str, mapping: dict[str, str | None] | None = None
) -> list[Mapped]:
    """Map a file's headers onto the columns of ``kind``; raises ``HeaderError`` naming every
    header that maps to nothing or to a column already taken, and every required column
    missing."""
    columns = KINDS[kind]
    by_name: dict[str, Column] = {}
    for each in columns:
        for name in (each.name, *each.aliases):
            by_name[normal(name)] = each
    own = {normal(k): v for k, v in (mapping or {}).items()}
    problems: list[tuple[str, str]] = []
    mapped: list[Mapped] = []
    taken: dict[str, str] = {}
    for index, header in enumerate(headers):
        text = str(header).strip()
        if not text:
            continue
        match = _UNIT_IN_HEADER.match(text)
        label, unit = (match["label"], match["unit"]) if match else (text, None)
        column: Column | None
        if normal(text) in own or normal(label) in own:
            target = own.get(normal(text), own.get(normal(label)))
            if target is None:
                continue  # the mapping file says: ignore this column
            column = next((c for c in columns if c.name == target), None)
            if column is None:
                problems.append((text, f"the mapping file names no column {target!r}"))
                continue
        else:
            column = by_name.get(normal(text)) or by_name.get(normal(label))
            if column is None:
                problems.append(
                    (
                        text,
                        "unknown column (columns: "
                        + ", ".join(c.name for c in columns)
                        + "; a mapping file can name it or ignore it)",
                    )
                )
                continue
        factor = 1.0
        if unit is not None and by_name.get(normal(text)) is not column:
            try:
                factor = _unit_factor(column, unit)
            except ValueError as exc:
                problems.append((text, str(exc)))
                continue
        if column.name in taken:
            problems.append(
                (text, f"also column {column.name}, already given by {taken[column.name]!r}")
            )
            continue
        taken[column.name] = text
        mapped.append(Mapped(index, text, column, factor))
    for each in columns:
        if each.required and each.name not in taken:
            problems.append(("", f"the required column {each.name} is missing"))
    if problems:
        raise HeaderError(problems)
    return mapped
