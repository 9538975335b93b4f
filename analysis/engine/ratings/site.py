"""Look-ups into a ``loopkeep.site/1`` document, built once per site."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from analysis.engine.ratings.saturation import DEFAULT_FREQUENCY_HZ
from analysis.engine.ratings.taps import Tap, ct_tap


class SiteIndex:
    """The parts of a site document the ratings need, keyed by code."""

    __slots__ = ("_taps", "buses", "code", "cts", "devices", "doc", "equipment", "frequency_hz")

    def __init__(self, doc: Mapping[str, Any]) -> None:
        self.doc = doc
        site = doc.get("site") or {}
        self.code: str | None = site.get("code")
        self.frequency_hz = float(site.get("frequency_hz") or DEFAULT_FREQUENCY_HZ)
        self.buses = {b["code"]: b for b in doc.get("buses") or ()}
        self.equipment = {e["code"]: e for e in doc.get("equipment") or ()}
        self.cts: dict[str, Mapping[str, Any]] = {c["code"]: c for c in doc.get("cts") or ()}
        self.devices = {d["code"]: d for d in doc.get("devices") or ()}
        self._taps: dict[str, Tap | ValueError] = {}

    def tap(self, ct: Mapping[str, Any]) -> Tap:
        """The tap in use of a CT entry (memoised per index); raises ``ValueError`` as
        :func:`ct_tap` does."""
        code = ct.get("code")
        hit = self._taps.get(code) if isinstance(code, str) else None
        if hit is None:
            try:
                hit = ct_tap(ct)
            except ValueError as err:
                hit = err
            if isinstance(code, str):
                self._taps[code] = hit
        if isinstance(hit, ValueError):
            raise ValueError(str(hit))
        return hit

    def ct(self, code: str) -> Mapping[str, Any]:
        try:
            return self.cts[code]
        except KeyError:
            raise KeyError(f"no CT {code!r} at site {self.code!r}") from None

    def equipment_of(self, ct: Mapping[str, Any]) -> Mapping[str, Any] | None:
        return self.equipment.get(ct.get("equipment"))

    def bus_of(self, ct: Mapping[str, Any]) -> Mapping[str, Any] | None:
        eq = self.equipment_of(ct)
        return None if eq is None else self.buses.get(eq.get("bus"))
