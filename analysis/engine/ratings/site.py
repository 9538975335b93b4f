"""Look-ups into a site record (``record.SiteRecord``), built once per site."""

from __future__ import annotations

import functools
from collections.abc import Mapping
from typing import Any

import record as rec
from analysis.engine.ratings.saturation import DEFAULT_FREQUENCY_HZ
from analysis.engine.ratings.taps import Tap, tap_of


def record_tap(ct: rec.CT) -> Tap:
    """The tap in use of a record's CT; raises ``ValueError`` saying what is missing or wrong
    (as :func:`analysis.engine.ratings.taps.ct_tap` does for a site-file entry)."""
    if not ct.terminals:
        raise ValueError(f"CT {ct.code!r} has no terminal positions")
    if not ct.in_use:
        raise ValueError(f"CT {ct.code!r} has no terminals in use")
    return _tap(ct.terminals, ct.in_use, ct.secondary_a)


@functools.lru_cache(maxsize=8192)
def _tap(
    terminals: tuple[tuple[str, float], ...], in_use: tuple[str, ...], secondary_a: float
) -> Tap:
    """``tap_of`` once per distinct winding and pair (the CTs of a set share them)."""
    return tap_of(dict(terminals), in_use, secondary_a)


class SiteIndex:
    """The parts of a site record the ratings need, keyed by code. A ``loopkeep.site/1`` dict
    is accepted too (converted with ``record.record_from_document``)."""

    __slots__ = ("_taps", "buses", "code", "cts", "devices", "equipment", "frequency_hz", "record")

    def __init__(self, source: rec.SiteRecord | Mapping[str, Any]) -> None:
        record = rec.as_record(source)
        self.record = record
        self.code: str | None = record.site.code or None
        self.frequency_hz = DEFAULT_FREQUENCY_HZ
        self.buses = {b.code: b for b in record.buses}
        self.equipment = {e.code: e for e in record.equipment}
        self.cts = {c.code: c for c in record.cts}
        self.devices = {d.code: d for d in record.devices}
        self._taps: dict[str, Tap | ValueError] = {}

    def tap(self, ct: rec.CT) -> Tap:
        """The tap in use of a CT (memoised per index); raises ``ValueError`` as
        :func:`record_tap` does."""
        hit = self._taps.get(ct.code)
        if hit is None:
            try:
                hit = record_tap(ct)
            except ValueError as err:
                hit = err
            self._taps[ct.code] = hit
        if isinstance(hit, ValueError):
            raise ValueError(str(hit))
        return hit

    def ct(self, code: str) -> rec.CT:
        try:
            return self.cts[code]
        except KeyError:
            raise KeyError(f"no CT {code!r} at site {self.code!r}") from None

    def equipment_of(self, ct: rec.CT) -> rec.Equipment | None:
        return None if ct.equipment is None else self.equipment.get(ct.equipment)

    def bus_of(self, ct: rec.CT) -> rec.Bus | None:
        eq = self.equipment_of(ct)
        return None if eq is None or eq.bus is None else self.buses.get(eq.bus)
