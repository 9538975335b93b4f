"""Issue 11, item 1: every string of the site file has a maximum length, and it is the length
of the database column it is stored in, so a too-long value is refused with its pointer instead
of reaching the database ("the database refused the import"). The test walks the schema and the
models both ways, so neither can change without the other."""

from __future__ import annotations

import re
from typing import Any

from django.db import models as djm

from inventory import models
from inventory.sitefile.validate import load_schema

M = models
# Where each string of the schema is stored: a model column, or (for text kept in a JSON
# column or a text field) the limit chosen here with its reason.
COLUMNS: dict[str, tuple[type[djm.Model], str] | tuple[int, str]] = {
    "site.code": (M.Site, "code"),
    "site.name": (M.Site, "name"),
    "site.notes": (20000, "TextField: a few pages of notes"),
    "terminal_blocks[].code": (M.TerminalBlock, "code"),
    "terminal_blocks[].description": (M.TerminalBlock, "description"),
    "buses[].code": (M.Bus, "code"),
    "equipment[].code": (M.Equipment, "code"),
    "equipment[].bus": (M.Bus, "code"),
    "cts[].code": (M.CurrentTransformer, "code"),
    "cts[].equipment": (M.Equipment, "code"),
    "cts[].set": (M.CurrentTransformer, "set_name"),
    "cts[].terminals{}": (M.Terminal, "name"),
    "cts[].in_use[]": (M.Terminal, "name"),
    "cts[].accuracy": (M.CurrentTransformer, "accuracy"),
    "cts[].nameplate": (2000, "TextField: the nameplate's text"),
    "cts[].tap_changes[].from[]": (M.Terminal, "name"),
    "cts[].tap_changes[].to[]": (M.Terminal, "name"),
    "cts[].tap_changes[].at": (40, "DateTimeField: an ISO 8601 time with zone is 32 characters"),
    "cts[].tap_changes[].by": (M.TapChange, "changed_by"),
    "cts[].tap_changes[].reason": (M.TapChange, "reason"),
    "devices[].code": (M.Device, "code"),
    "devices[].functions[]": (20, "JSONField: IEEE C37.2 numbers such as 87B or 50/51N"),
    "devices[].ratio_setting": (M.Device, "ratio_setting"),
    "devices[].inputs[].name": (M.DeviceInput, "name"),
    "devices[].outputs[].name": (M.DeviceOutput, "name"),
    "wires[].size": (M.Wire, "size"),
    "switches[].code": (M.Switch, "code"),
    "switches[].positions[]": (M.SwitchPosition, "name"),
    "switches[].normal": (M.SwitchPosition, "name"),
    "switches[].contacts[].closed_in[]": (M.SwitchPosition, "name"),
    "procedures[].code": (M.Procedure, "code"),
    "procedures[].title": (M.Procedure, "title"),
    "procedures[].author": (M.Procedure, "author"),
    "procedures[].devices[]": (M.Device, "code"),
    "operation.set": (M.Switch, "code"),
    "operation.to": (M.SwitchPosition, "name"),
    "operation.id": (60, "JSONField: a jumper id, a code like the others"),
    "operation.remove_jumper": (60, "JSONField: a jumper id"),
    "operation.remove_device": (M.Device, "code"),
    "operation.insert_device": (M.Device, "code"),
    "operation.deenergize": (M.Equipment, "code"),
    "operation.energize": (M.Equipment, "code"),
    "operation.note": (2000, "JSONField: an instruction of a step"),
}
# Terminals (OWNER:NAME) are stored as their two parts.
TERMINAL_OWNER, TERMINAL_NAME = (M.Terminal, "owner"), (M.Terminal, "name")
# Model text columns that are not in the site file (computed, internal or the choices).
NOT_IN_THE_FILE = {
    (M.Equipment, "kind"),
    (M.CurrentTransformer, "phase"),
    (M.Terminal, "tap_role"),
    (M.Device, "kind"),
    (M.Wire, "material"),
    (M.Switch, "kind"),
    (M.Switch, "transition"),
    (M.SiteChange, "status"),
    (M.Terminal, "owner"),  # the terminal pattern's owner part, checked below
}

STRING_DEFS = ("text", "code", "switch_code", "terminal_name", "terminal")


def _strings(node: Any, name: str, defs: dict) -> dict[str, dict]:
    """Every string the schema admits, by a dotted name, with its schema node (merged with the
    $defs entry it refers to)."""
    found: dict[str, dict] = {}
    if not isinstance(node, dict):
        return found
    ref = node.get("$ref", "").rsplit("/", 1)[-1]
    if ref and ref not in STRING_DEFS:
        return _strings({**defs[ref], **{k: v for k, v in node.items() if k != "$ref"}}, name, defs)
    if node.get("type") == "string" or ref in STRING_DEFS:
        found[name] = {**defs.get(ref, {}), **node}
        return found
    for key, sub in node.get("properties", {}).items():
        found.update(_strings(sub, f"{name}.{key}" if name else key, defs))
    if isinstance(node.get("items"), dict):
        found.update(_strings(node["items"], f"{name}[]", defs))
    for branch in node.get("prefixItems", []):
        found.update(_strings(branch, f"{name}[]", defs))
    if "propertyNames" in node:
        found.update(_strings(node["propertyNames"], f"{name}{{}}", defs))
    return found


def _schema_strings() -> dict[str, dict]:
    schema = load_schema()
    defs = schema["$defs"]
    found = _strings(schema, "", defs)
    for branch in defs["operation"]["oneOf"]:
        found.update(_strings(branch, "operation", defs))
    return found


def _column_length(model: type[djm.Model], field: str) -> int:
    return model._meta.get_field(field).max_length  # type: ignore[return-value]


def test_every_string_of_the_schema_has_a_column_or_a_stated_limit():
    strings = _schema_strings()
    terminals = {
        k
        for k, v in strings.items()
        if v.get("pattern", "").count(":") and "{1," in v.get("pattern", "")
    }
    assert set(strings) - terminals == set(COLUMNS)
    for name, node in strings.items():
        assert "maxLength" in node, f"{name} has no maxLength"


def test_each_maximum_length_is_its_columns():
    strings = _schema_strings()
    for name, where in COLUMNS.items():
        limit = where[0] if isinstance(where[0], int) else _column_length(*where)  # type: ignore[arg-type]
        assert strings[name]["maxLength"] == limit, name


def test_a_terminal_is_limited_by_its_owner_and_name_columns():
    terminal = load_schema()["$defs"]["terminal"]
    owner, name = _column_length(*TERMINAL_OWNER), _column_length(*TERMINAL_NAME)
    assert re.search(rf"\{{1,{owner}\}}:", terminal["pattern"])
    assert terminal["pattern"].endswith(f"{{1,{name}}}$")
    assert terminal["maxLength"] == owner + 1 + name


def test_every_text_column_of_the_record_is_in_the_file():
    stored = {where for where in COLUMNS.values() if not isinstance(where[0], int)}
    for model in (
        M.Site, M.TerminalBlock, M.Bus, M.Equipment, M.CurrentTransformer, M.Terminal,
        M.TapChange, M.Device, M.DeviceInput, M.DeviceOutput, M.Wire, M.Switch,
        M.SwitchPosition, M.Procedure, M.SiteChange,
    ):  # fmt: skip
        for field in model._meta.concrete_fields:
            if isinstance(field, djm.CharField) and not field.primary_key:
                key = (model, field.name)
                assert key in stored or key in NOT_IN_THE_FILE, f"{model.__name__}.{field.name}"
