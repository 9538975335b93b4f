"""Helpers shared by the job tests: one set of stored results, and log records caught."""

from __future__ import annotations

import logging

from analysis import services
from analysis.compute import compute_sites
from inventory.selectors import site_records


def result_rows(site_id: int) -> dict[str, int]:
    """The stored result rows of a site, counted per table."""
    return {m.__name__: m.objects.filter(site_id=site_id).count() for m in services.RESULT_MODELS}


def one_set_of_rows(site_id: int) -> dict[str, int]:
    """What one set of results has per table: the engine's answer for the stored record."""
    r = compute_sites(site_records([site_id]))[site_id]
    members = sum(len(set(c["cts"])) + len(set(c["devices"])) for c in r.circuits)
    return {
        "CTRating": len(r.ct_cases),
        "CTReport": len(r.ct_reports),
        "Finding": len(r.findings),
        "ProcedureVerdict": len(r.verdicts),
        "CircuitMember": members,
        "Circuit": len(r.circuits),
        "SiteComputation": 1,
    }


class LogRecords(logging.Handler):
    """Catches the records of a logger (``pytest -p no:logging`` has no caplog)."""

    def __init__(self) -> None:
        super().__init__(logging.DEBUG)
        self.records: list[logging.LogRecord] = []

    def emit(self, record: logging.LogRecord) -> None:
        self.records.append(record)
