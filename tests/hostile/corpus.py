"""The hostile-input corpus: site files built to break the loader, the validator, the database
or the terminal, each with what ``import_site`` must answer (exit status 2, the JSON pointer
or the words of the refusal). Invented data on the small test site of tests/inventory/docs.py.

The files are built, not stored (the bombs are generated, the oversized ones would bloat the
repository); to look at them by hand::

    python -m tests.hostile.corpus OUTDIR      # writes every case as a file into OUTDIR
"""

from __future__ import annotations

import json
import sys
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import yaml

from tests.inventory.docs import small_site

MAX_BYTES = 4 * 1024 * 1024  # the default SITE_FILE_MAX_BYTES


@dataclass(frozen=True)
class Case:
    """One hostile file: its name (with the suffix that picks the parser), its bytes, and the
    refusal expected: exit status 2 always, ``pointer`` (the first error's JSON pointer) when
    the refusal is about a value, else ``words`` (in the first line) for a file that cannot be
    read at all."""

    name: str
    build: Callable[[], bytes]
    pointer: str | None = None
    words: str | None = None
    bomb: bool = False  # measured for time and memory in a fresh process


def _json(doc: Any) -> bytes:
    return json.dumps(doc, ensure_ascii=False, indent=1).encode("utf-8", "surrogatepass")


def _ascii_json(doc: Any) -> bytes:
    return json.dumps(doc, ensure_ascii=True, indent=1).encode()


def _set(path: str, value: Any, *, ascii_only: bool = False) -> Callable[[], bytes]:
    """The small site with one value replaced (``path`` in JSON pointer tokens)."""

    def build() -> bytes:
        doc = small_site()
        *parents, last = path.strip("/").split("/")
        node: Any = doc
        for token in parents:
            node = node[int(token)] if isinstance(node, list) else node[token]
        if isinstance(node, list):
            node[int(last)] = value
        else:
            node[last] = value
        return _ascii_json(doc) if ascii_only else _json(doc)

    return build


def _tap_change_at(at: str) -> Callable[[], bytes]:
    def build() -> bytes:
        doc = small_site()
        doc["cts"][0]["tap_changes"] = [
            {"from": ["X1", "X5"], "to": ["X1", "X4"], "at": at, "reason": "WO-1"}
        ]
        return _json(doc)

    return build


def _text(text: str) -> Callable[[], bytes]:
    return lambda: text.encode()


def _site_text(replace: str, by: str) -> Callable[[], bytes]:
    """The small site's JSON text with one piece of text replaced (for what a dict cannot
    hold: a key twice, a literal number of 400 digits, ``NaN``)."""

    def build() -> bytes:
        text = json.dumps(small_site(), indent=1)
        assert replace in text, replace
        return text.replace(replace, by, 1).encode()

    return build


def _yaml_site(transform: Callable[[str], str]) -> Callable[[], bytes]:
    def build() -> bytes:
        text = yaml.safe_dump(small_site(), sort_keys=False)
        return transform(text).encode()

    return build


def _replace_once(old: str, new: str) -> Callable[[str], str]:
    def transform(text: str) -> str:
        assert old in text, old
        return text.replace(old, new, 1)

    return transform


def alias_bomb(levels: int) -> bytes:
    """The "billion laughs" in YAML: each level a list of nine aliases of the one before, so
    ``levels`` levels expand to 9**levels strings (about 44 KB of text at 8 levels with long
    lines)."""
    lines = ['a0: &a0 ["' + "lol" * 14500 + '"]']
    for level in range(1, levels + 1):
        refs = ", ".join(f"*a{level - 1}" for _ in range(9))
        lines.append(f"a{level}: &a{level} [{refs}]")
    lines.append(f"format: loopkeep.site/1\nsite: {{code: X, name: *a{levels}}}")
    return ("\n".join(lines) + "\n").encode()


def deep_json(depth: int) -> bytes:
    return ('{"format": "loopkeep.site/1", "site": ' + "[" * depth + "]" * depth + "}").encode()


def deep_yaml(depth: int) -> bytes:
    return ("format: loopkeep.site/1\nsite: " + "[" * depth + "]" * depth + "\n").encode()


def bad_wires(n_bytes: int) -> bytes:
    """A site whose wires are all wrong (unknown owners, no size): one error or more per
    wire, far more than a screen."""
    doc = small_site()
    wire = {"from": "NOPE-1:A", "to": "NOPE-2:B", "size": "99AWG", "length_m": 1}
    one = len(json.dumps(wire)) + 2
    doc["wires"] = [dict(wire) for _ in range(max(1, n_bytes // one))]
    return json.dumps(doc).encode()


def _dup_key_json() -> bytes:
    return _site_text('"kv": 69', '"kv": 69, "kv": 690')()


CODE_CHARS = {
    "esc": "\x1b[31m",
    "nul": "\x00",
    "bell": "\x07",
    "c1-csi": "\x9b",
    "rlo": "\u202e",
    "lri": "\u2066",
    "lrm": "\u200e",
    "zwsp": "\u200b",
    "zwj": "\u200d",
    "bom": "\ufeff",
    "word-joiner": "\u2060",
}

CASES: list[Case] = [
    # -- dates that break the record for good (issue 11)
    Case(
        "at-year-1-east.json",
        _tap_change_at("0001-01-01T00:00:00+05:00"),
        "/cts/0/tap_changes/0/at",
    ),
    Case(
        "at-year-9999-west.json",
        _tap_change_at("9999-12-31T23:00:00-05:00"),
        "/cts/0/tap_changes/0/at",
    ),
    Case("at-1899.json", _tap_change_at("1899-12-31T00:00:00Z"), "/cts/0/tap_changes/0/at"),
    Case("at-2201.json", _tap_change_at("2201-01-01T00:00:00Z"), "/cts/0/tap_changes/0/at"),
    Case("at-no-zone.json", _tap_change_at("2023-04-18T08:45:00"), "/cts/0/tap_changes/0/at"),
    Case("at-date-only.json", _tap_change_at("2023-04-18"), "/cts/0/tap_changes/0/at"),
    Case("at-garbage.json", _tap_change_at("yesterday"), "/cts/0/tap_changes/0/at"),
    # -- numbers beyond physics or beyond the machine
    Case("kv-1e308.json", _set("/buses/0/kv", 1e308), "/buses/0/kv"),
    Case("kv-1201.json", _set("/buses/0/kv", 1201), "/buses/0/kv"),
    Case(
        "fault-ka-501.json",
        _set("/buses/0/three_phase_fault_ka", 501),
        "/buses/0/three_phase_fault_ka",
    ),
    Case(
        "ground-ka-1e300.json", _set("/buses/0/ground_fault_ka", 1e300), "/buses/0/ground_fault_ka"
    ),
    Case("x-over-r-301.json", _set("/buses/0/x_over_r", 301), "/buses/0/x_over_r"),
    Case("max-load-1e9.json", _set("/equipment/0/max_load_a", 1e9), "/equipment/0/max_load_a"),
    Case("ct-position-1e7.json", _set("/cts/0/terminals/X5", 1e7), "/cts/0/terminals/X5"),
    Case("winding-ohm-1e6.json", _set("/cts/0/winding_ohm", 1e6), "/cts/0/winding_ohm"),
    Case("rating-factor-11.json", _set("/cts/0/rating_factor", 11), "/cts/0/rating_factor"),
    Case("knee-v-1e5.json", _set("/cts/0/knee_v", 1e5), "/cts/0/knee_v"),
    Case(
        "excitation-volts-1e6.json",
        _set("/cts/0/excitation/3", [0.5, 1e6]),
        "/cts/0/excitation/3/1",
    ),
    Case(
        "burden-va-1e4.json",
        _set("/devices/0/inputs/0/burden_va", 1e4),
        "/devices/0/inputs/0/burden_va",
    ),
    Case(
        "burden-ohm-1e5.json",
        _set("/devices/0/inputs/3/burden_ohm", [1e5, 0]),
        "/devices/0/inputs/3/burden_ohm/0",
    ),
    Case("length-m-1e6.json", _set("/wires/0/length_m", 1e6), "/wires/0/length_m"),
    Case("length-ft-1e6.json", _set("/wires/9/length_ft", 1e6), "/wires/9/length_ft"),
    Case("nan.json", _site_text('"length_m": 80', '"length_m": NaN'), "/wires/0/length_m"),
    Case("infinity.json", _site_text('"kv": 69', '"kv": Infinity'), "/buses/0/kv"),
    Case(
        "negative-infinity.json",
        _site_text('"x_over_r": 10', '"x_over_r": -Infinity'),
        "/buses/0/x_over_r",
    ),
    Case("int-400-digits.json", _site_text('"kv": 69', '"kv": ' + "9" * 400), "/buses/0/kv"),
    Case(
        "int-400-digits-secondary.json",
        _site_text('"secondary_a": 5', '"secondary_a": ' + "5" * 400),
        "/cts/0/secondary_a",
    ),
    Case(
        "int-negative-400-digits.json",
        _site_text('"design_temp_c": 75', '"design_temp_c": -' + "7" * 400),
        "/site/design_temp_c",
    ),
    Case(
        "int-5000-digits.json",
        _site_text('"kv": 69', '"kv": ' + "9" * 5000),
        words="a number is too long",
    ),
    Case(
        "int-5000-digits.yaml",
        _yaml_site(_replace_once("kv: 69", "kv: " + "9" * 5000)),
        words="a number is too long",
    ),
    # -- text that breaks the database or the terminal
    Case("surrogate-raw.json", _set("/site/name", "Yard \ud800"), words="not UTF-8"),
    Case("surrogate-name.json", _set("/site/name", "Yard \ud800", ascii_only=True), "/site/name"),
    Case(
        "surrogate-notes-escaped.json",
        _set("/site/notes", "x\udfff", ascii_only=True),
        "/site/notes",
    ),
    Case("surrogate-key.json", _site_text('"design_temp_c"', '"\\ud800"'), "/site/\ud800"),
    Case("nul-in-notes.json", _set("/site/notes", "a\x00b"), "/site/notes"),
    Case("nul-in-name.json", _set("/site/name", "\x00"), "/site/name"),
    *[
        Case(f"ct-code-{label}.json", _set("/cts/0/code", f"CB-1-A{char}"), "/cts/0/code")
        for label, char in CODE_CHARS.items()
    ],
    Case("site-code-zwsp.json", _set("/site/code", "T\u200bST"), "/site/code"),
    Case("terminal-rlo.json", _set("/wires/0/to", "TB-1:\u202e1"), "/wires/0/to"),
    Case("switch-code-bidi.json", _set("/switches/0/code", "TS-1/\u20661"), "/switches/0/code"),
    Case("ct-terminal-name-zwj.json", _set("/cts/0/in_use", ["X1", "X\u200d4"]), "/cts/0/in_use/1"),
    # -- strings longer than their column
    Case("site-code-41.json", _set("/site/code", "S" * 41), "/site/code"),
    Case("site-name-201.json", _set("/site/name", "n" * 201), "/site/name"),
    Case("ct-code-61.json", _set("/cts/0/code", "C" * 61), "/cts/0/code"),
    Case("accuracy-31.json", _set("/cts/0/accuracy", "C" * 31), "/cts/0/accuracy"),
    Case(
        "ratio-setting-21.json",
        _set("/devices/0/ratio_setting", "4" * 21),
        "/devices/0/ratio_setting",
    ),
    Case(
        "input-name-31.json", _set("/devices/0/inputs/0/name", "I" * 31), "/devices/0/inputs/0/name"
    ),
    Case("terminal-owner-61.json", _set("/grounds/0", "T" * 61 + ":N"), "/grounds/0"),
    Case("procedure-title-201.json", _set("/procedures/0/title", "t" * 201), "/procedures/0/title"),
    Case("notes-1mb.json", _set("/site/notes", "n" * 1_000_000), "/site/notes"),
    # -- keys given twice (last would silently win)
    Case("dup-key.json", _dup_key_json, "/buses/0/kv"),
    Case(
        "dup-key-top.json",
        _site_text('"format": "loopkeep.site/1"', '"format": "loopkeep.site/1", "format": "x"'),
        "/format",
    ),
    Case(
        "dup-key.yaml",
        _yaml_site(_replace_once("  kv: 69\n", "  kv: 69\n  kv: 690\n")),
        "/buses/0/kv",
    ),
    # -- structure that exhausts the parser or the memory
    Case("deep-5000.json", lambda: deep_json(5000), words="nested too deeply", bomb=True),
    Case("deep-100000.json", lambda: deep_json(100_000), words="nested too deeply", bomb=True),
    Case("deep-5000.yaml", lambda: deep_yaml(5000), words="nested too deeply", bomb=True),
    Case("deep-20.json", lambda: deep_json(20), words="more than 12 levels deep"),
    Case("deep-9.json", lambda: deep_json(9), "/site"),
    Case("alias-bomb-8.yaml", lambda: alias_bomb(8), words="YAML aliases", bomb=True),
    Case("alias-bomb-9.yaml", lambda: alias_bomb(9), words="YAML aliases", bomb=True),
    Case(
        "alias-self.yaml",
        _text("format: loopkeep.site/1\nsite: &s [*s]\n"),
        words="YAML aliases",
        bomb=True,
    ),
    Case(
        "alias-plain.yaml",
        _yaml_site(lambda t: "x: &n Yard\n" + t.replace("name: Test Yard 69 kV", "name: *n")),
        words="YAML aliases",
    ),
    Case(
        "merge-key.yaml",
        _text("base: &b {code: X}\nsite: {<<: *b, name: Y}\n"),
        words="YAML aliases",
    ),
    Case("too-big.json", lambda: bad_wires(MAX_BYTES + 1024), words="larger than", bomb=True),
    Case("bad-wires-1mb.json", lambda: bad_wires(1024 * 1024), "/wires/0/from", bomb=True),
    # -- not a site file at all
    Case("empty.json", _text(""), words="not valid JSON"),
    Case("top-list.json", _text("[1, 2]"), words="one object at the top level"),
    Case("top-string.yaml", _text("just text\n"), words="one object at the top level"),
    Case("latin1.json", lambda: '{"site": "Gr\u00fcn"}'.encode("latin-1"), words="not UTF-8"),
    Case("utf16.json", lambda: '{"format": "x"}'.encode("utf-16"), words="not UTF-8"),
    Case("binary.json", lambda: bytes(range(256)) * 4, words="not UTF-8"),
    Case(
        "python-object.yaml",
        _text("site: !!python/object/apply:os.system ['true']\n"),
        words="not valid YAML",
    ),
    Case("binary-tag.yaml", _text("format: loopkeep.site/1\nsite: !!binary aGVsbG8=\n"), "/site"),
    Case("set-tag.yaml", _text("format: loopkeep.site/1\nsite: !!set {a, b}\n"), "/site"),
    Case(
        "timestamp-tag.yaml",
        _text("format: loopkeep.site/1\nsite: {code: X, name: !!timestamp 2024-01-01}\n"),
        "/site/name",
    ),
    Case("int-key.yaml", _text("format: loopkeep.site/1\n1: x\n"), words="a key must be text"),
    Case(
        "list-key.yaml",
        _text("format: loopkeep.site/1\n? [a, b]\n: x\n"),
        words="a key must be text",
    ),
]

# Files that are not files: refused before a byte is read.
SPECIAL_PATHS = {"dev-zero": "/dev/zero", "dev-null-dir": "/dev", "dev-urandom": "/dev/urandom"}


def write_corpus(folder: Path) -> dict[str, Path]:
    """Every case as a file in ``folder``: name -> path."""
    folder.mkdir(parents=True, exist_ok=True)
    paths = {}
    for case in CASES:
        path = folder / case.name
        path.write_bytes(case.build())
        paths[case.name] = path
    return paths


if __name__ == "__main__":
    written = write_corpus(Path(sys.argv[1]))
    print(f"{len(written)} files written to {sys.argv[1]}")
