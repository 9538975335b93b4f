"""Plain-text renderings of the JSON bodies for the terminal (the ``--json`` form is the API's
body, exactly). Text keeps the cautions: a crew may read this, not the JSON."""

from __future__ import annotations

import json
import re
from typing import Any

from record.operations import OperationError, operation_from_json

# What a terminal would act on or hide rather than show: C0 controls but tab and newline
# (ESC starts a colour or cursor sequence), DEL, the C1 controls (U+009B is a one-byte CSI), and
# the bidirectional and zero-width formatting characters (they reorder or hide what follows).
_UNSAFE_FOR_TERMINAL = re.compile(
    "[\x00-\x08\x0b-\x1f\x7f-\x9f\u00ad\u061c\u180e\u200b-\u200f\u2028-\u202e\u2060-\u2069\ufeff]"
)


def terminal_safe(text: str) -> str:
    """``text`` with every character a terminal would act on written as ``\\uXXXX``: what
    the record holds is shown, never obeyed. In JSON output these characters only occur inside
    strings, where ``\\uXXXX`` is the same character, so the JSON stays exact."""
    return _UNSAFE_FOR_TERMINAL.sub(lambda m: f"\\u{ord(m.group()):04x}", text)


def op_text(op: dict[str, Any] | None) -> str:
    """One operation as a planner writes it: ``set TS-101/1 to open``."""
    if op is None:
        return "(initial state)"
    try:
        return operation_from_json(op).text
    except OperationError:
        pass  # not one of the operations: say what it holds
    (name, value), *_ = op.items()
    if isinstance(value, list):
        value = " – ".join(value)
    return f"{name.replace('_', ' ')} {value}"


def _wrap(text: str, indent: str, width: int = 100, *, first: str | None = None) -> list[str]:
    """Word-wrap ``text``; the first line starts with ``first`` (default: ``indent``)."""
    words, lines = text.split(), []
    line = indent if first is None else first
    for word in words:
        if len(line) + len(word) + 1 > width and line.strip():
            lines.append(line.rstrip())
            line = indent
        line += word + " "
    if line.strip():
        lines.append(line.rstrip())
    return lines


def findings_lines(findings: list[dict[str, Any]], indent: str = "      ") -> list[str]:
    lines = []
    for f in findings:
        stage = f" [{f['stage']}]" if f.get("stage") else ""
        lines.extend(_wrap(f"{f['severity'].upper()} {f['code']}{stage}: {f['message']}", indent))
    return lines


def readings_text(readings: list[dict[str, Any]]) -> str:
    """Expected clamp-meter readings as ``T1–T2 4.00 A`` items (``≈`` marks a path in
    parallel with another, whose share is an estimate)."""
    return ", ".join(
        f"{r['between'][0]}–{r['between'][1]} {'≈' if r.get('parallel') else ''}{r['a']:.2f} A"
        for r in readings
    )


def cautions_lines(cautions: list[str]) -> list[str]:
    lines = ["", "CAUTIONS"]
    for caution in cautions:
        lines.extend(_wrap(caution, "    ", first="  - "))
    return lines


def verdict_text(verdict: dict[str, Any]) -> str:
    """A procedure verdict as a step table."""
    state = "SAFE" if verdict["safe"] else "UNSAFE"
    lines = [f"Procedure {verdict['procedure']} at {verdict['site']}: {state}"]
    danger = verdict.get("first_danger")
    if danger:
        lines.append(
            f"first danger: step {danger['step']} ({danger['stage']}): {danger['code']}"
            + (f" on {danger['ct']}" if danger.get("ct") else "")
            + (f" / {danger['device']}" if danger.get("device") else "")
        )
    lines.append("")
    lines.append(f"{'step':>4}  operation")
    for step in verdict["steps"]:
        mark = "!!" if any(f["severity"] == "danger" for f in step["findings"]) else "  "
        lines.append(f"{step['step']:>4}{mark}{op_text(step['op'])}")
        lines.extend(findings_lines(step["findings"]))
        if step.get("readings"):
            lines.extend(_wrap("reads: " + readings_text(step["readings"]), "      "))
    lines.extend(cautions_lines(verdict["cautions"]))
    return "\n".join(lines)


def _bare(op: dict[str, Any]) -> dict[str, Any]:
    """A plan step without its ``why`` and ``readings`` (they are printed on their own)."""
    return {k: v for k, v in op.items() if k not in ("why", "readings")}


def plan_text(plan: dict[str, Any]) -> str:
    """An isolation plan: isolate steps, restore steps, who else is affected."""
    lines = [
        f"Isolation plan for {plan['device']} at {plan['site']}: "
        + ("possible" if plan["possible"] else "NOT POSSIBLE with the recorded provisions")
    ]
    if plan.get("reason"):
        lines.extend(_wrap(str(plan["reason"]), "  "))
    for key, title in (("isolate", "Isolate"), ("restore", "Restore")):
        if plan.get(key):
            lines.append("")
            lines.append(f"{title}:")
            for n, op in enumerate(plan[key], start=1):
                lines.extend(_wrap(op_text(_bare(op)), "      ", first=f"  {n:>2}. "))
                if op.get("why"):
                    lines.extend(_wrap("why: " + op["why"], "        ", first="      "))
                if op.get("readings"):
                    lines.extend(
                        _wrap("reads: " + readings_text(op["readings"]), "        ", first="      ")
                    )
    if plan.get("affected"):
        lines.append("")
        lines.append("Also affected:")
        for item in plan["affected"]:
            text = item.get("message") or json.dumps(item) if isinstance(item, dict) else item
            lines.extend(_wrap(str(text), "    ", first="  - "))
    for key in ("jumpers_needed",):
        if plan.get(key):
            lines.append("")
            lines.append("Temporary jumpers would be needed at:")
            for item in plan[key]:
                pair = " – ".join(item) if isinstance(item, list | tuple) else str(item)
                lines.append(f"  - {pair}")
    if plan.get("verdict"):
        lines.append("")
        lines.append(
            "Check of isolate + restore: " + ("safe" if plan["verdict"]["safe"] else "UNSAFE")
        )
    lines.extend(cautions_lines(plan["cautions"]))
    return "\n".join(lines)


def _v(value: Any, unit: str = "") -> str:
    """A report number with its unit, or "n/a" where the report has none."""
    if value is None:
        return "n/a"
    return f"{value} {unit}".rstrip()


def report_text(report: dict[str, Any]) -> str:
    """A CT report."""
    acc = report.get("accuracy") or {}
    knee = report.get("knee_point_v") or {}
    lines = [
        f"CT {report['ct']} at {report['site']}",
        f"  tap in use       {'-'.join(str(t) for t in report['tap'])}  ratio {report['ratio']}"
        f"  turns {report['turns']}",
        f"  winding at tap   {_v(report.get('winding_ohm_at_tap'), 'Ω')}",
        f"  accuracy         {_v(acc.get('class'))}: {_v(acc.get('voltage_at_tap_v'), 'V')} at"
        f" the tap, standard burden {_v(acc.get('standard_burden_ohm_at_tap'), 'Ω')}",
        f"  knee point       IEEE {_v(knee.get('ieee'), 'V')}, IEC {_v(knee.get('iec'), 'V')}",
    ]
    for case, values in (report.get("cases") or {}).items():
        burden = values.get("burden_ohm") or {}
        lines.append(f"  {case.replace('_', ' ')}:")
        lines.append(
            f"    burden {_v(burden.get('z'), 'Ω')} (R {_v(burden.get('r'))}, X"
            f" {_v(burden.get('x'))}); fault {_v(values.get('fault_a'), 'A')} primary,"
            f" {_v(values.get('secondary_fault_a'), 'A')} secondary,"
            f" X/R {_v(values.get('x_over_r'))}"
        )
        if values.get("c37_110_index") is None and values.get("vx_required_v") is None:
            lines.append(
                "    saturation not assessed for this case"
                " (a value it needs is missing or does not apply)"
            )
            continue
        ttl = values.get("time_to_saturate_ms")
        lines.append(
            f"    C37.110 index {_v(values.get('c37_110_index'))} (limit 20); Vx required"
            f" {_v(values.get('vx_required_v'), 'V')}, available"
            f" {_v(values.get('vx_available_v'), 'V')}; "
            + (f"time to saturate {ttl} ms" if ttl is not None else "voltage form met")
        )
    lines.append("  findings:")
    lines.extend(findings_lines(report.get("findings") or [], indent="    ") or ["    none"])
    return "\n".join(lines)
