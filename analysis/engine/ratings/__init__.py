"""CT ratings: taps, accuracy class at the tap, saturation, excitation knee points and checks.

Pure functions (no Django): the CT report, the jobs and the API call these. What the accuracy
class and ratio strings mean is the trade's (``trade.accuracy``, ``trade.ratio``).
"""

from analysis.engine.ratings.checks import (
    CASES,
    CTRating,
    accuracy_check,
    device_static_findings,
    evaluate_ct,
    input_rating_check,
    ratio_setting_check,
    saturation_findings,
    site_static_findings,
    thermal_check,
)
from analysis.engine.ratings.excitation import (
    ExcitationCurve,
    KneePoint,
    current_at,
    excitation_curve,
    knee_point_iec,
    knee_point_ieee,
    operating_point,
    scale_to_tap,
    voltage_at,
)
from analysis.engine.ratings.report import (
    ExcitationPlotInputs,
    OperatingPoint,
    SiteRatings,
    build_ct_report,
    excitation_plot_inputs,
    site_ratings,
)
from analysis.engine.ratings.saturation import (
    C37_110_LIMIT,
    SaturationCase,
    assess_case,
    c37_110_index,
    passes_c37_110,
    required_class_voltage_v,
    required_saturation_emf_v,
    saturation_index,
    time_to_saturate_s,
)
from analysis.engine.ratings.site import SiteIndex
from analysis.engine.ratings.taps import (
    Tap,
    all_taps,
    ct_tap,
    full_primary_a,
    parse_tap,
    tap_of,
    winding_ohm_at_tap,
)

__all__ = [
    "C37_110_LIMIT",
    "CASES",
    "CTRating",
    "ExcitationCurve",
    "ExcitationPlotInputs",
    "KneePoint",
    "OperatingPoint",
    "SaturationCase",
    "SiteIndex",
    "SiteRatings",
    "Tap",
    "accuracy_check",
    "all_taps",
    "assess_case",
    "build_ct_report",
    "c37_110_index",
    "ct_tap",
    "current_at",
    "device_static_findings",
    "evaluate_ct",
    "excitation_curve",
    "excitation_plot_inputs",
    "full_primary_a",
    "input_rating_check",
    "knee_point_iec",
    "knee_point_ieee",
    "operating_point",
    "parse_tap",
    "passes_c37_110",
    "ratio_setting_check",
    "required_class_voltage_v",
    "required_saturation_emf_v",
    "saturation_findings",
    "saturation_index",
    "scale_to_tap",
    "site_ratings",
    "site_static_findings",
    "tap_of",
    "thermal_check",
    "time_to_saturate_s",
    "voltage_at",
    "winding_ohm_at_tap",
]
