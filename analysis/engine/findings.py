"""Findings: the contract between the engine, the jobs, the API and the CLI.

A finding is one thing a planner or engineer must look at. Its ``code`` is stable (other parts
filter and count by it); its ``message`` is for people and carries the numbers. The codes and
their severities are those of the design's findings table.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

DANGER = "danger"
WARNING = "warning"
CAUTION = "caution"
NOTICE = "notice"

SEVERITY_ORDER = (DANGER, WARNING, CAUTION, NOTICE)

OPEN_SECONDARY = "open_secondary"
TRIP_NOT_ISOLATED = "trip_not_isolated"
RATIO_SETTING_MISMATCH = "ratio_setting_mismatch"
INPUT_RATING_MISMATCH = "input_rating_mismatch"
SATURATION_RISK = "saturation_risk"
ACCURACY_EXCEEDED = "accuracy_exceeded"
THERMAL_OVERLOAD = "thermal_overload"
PARTIAL_WINDING_SHORT = "partial_winding_short"
NO_GROUND = "no_ground"
MULTIPLE_GROUNDS = "multiple_grounds"
INPUT_BYPASSED = "input_bypassed"
MISSING_DATA = "missing_data"
# A stored procedure the engine cannot check (it names something the record does not have, or
# cannot be carried out): never presented as safe, and as serious as an unsafe verdict.
PROCEDURE_UNCHECKED = "procedure_unchecked"

SEVERITY: dict[str, str] = {
    OPEN_SECONDARY: DANGER,
    TRIP_NOT_ISOLATED: DANGER,
    RATIO_SETTING_MISMATCH: DANGER,
    INPUT_RATING_MISMATCH: WARNING,
    SATURATION_RISK: WARNING,
    ACCURACY_EXCEEDED: WARNING,
    THERMAL_OVERLOAD: WARNING,
    PARTIAL_WINDING_SHORT: WARNING,
    NO_GROUND: WARNING,
    MULTIPLE_GROUNDS: WARNING,
    INPUT_BYPASSED: CAUTION,
    MISSING_DATA: NOTICE,
    PROCEDURE_UNCHECKED: DANGER,
}

# Findings that belong to a circuit state (checked in every step of a procedure); the others
# are static (settings and ratings) and belong to the CT report and the findings list.
STATE_CODES = frozenset(
    {
        OPEN_SECONDARY,
        TRIP_NOT_ISOLATED,
        INPUT_BYPASSED,
        PARTIAL_WINDING_SHORT,
        NO_GROUND,
        MULTIPLE_GROUNDS,
    }
)


@dataclass(frozen=True, slots=True)
class Finding:
    """One finding. ``numbers`` holds the figures the message quotes, for machines."""

    code: str
    message: str
    ct: str | None = None
    device: str | None = None
    input: str | None = None
    circuit: str | None = None
    stage: str | None = None  # "before", "transition" or "after" inside a procedure verdict
    numbers: dict[str, Any] = field(default_factory=dict)

    @property
    def severity(self) -> str:
        return SEVERITY[self.code]

    def to_json(self) -> dict[str, Any]:
        """The finding as the procedure verdict and CT report JSON show it."""
        return {
            "code": self.code,
            "severity": self.severity,
            "stage": self.stage,
            "ct": self.ct,
            "device": self.device,
            "input": self.input,
            "circuit": self.circuit,
            "message": self.message,
        }
