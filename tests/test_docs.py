"""docs/semantics.md is generated from the catalogue and cannot drift from it.

Oracles: the catalogue itself (every id, cast pair and error class must be documented) and the
reference evaluator (worked examples written in the catalogue's sentences must hold on it).
"""

from __future__ import annotations

import math
import re
import struct
from pathlib import Path

import pyarrow as pa
import pytest

import rexpr
from rexpr.catalogue import BY_ID, CAST_RULES, ENTRIES, ErrorClass
from rexpr.docs_gen import compare_rules, render_semantics

DOC = Path(__file__).resolve().parents[1] / "docs" / "semantics.md"


def test_semantics_md_is_the_rendered_catalogue():
    assert DOC.read_text(encoding="utf-8") == render_semantics(), (
        "docs/semantics.md is stale: run  python -m rexpr.docs_gen > docs/semantics.md")


def test_every_catalogue_id_has_a_section():
    text = render_semantics()
    missing = [fid for fid in BY_ID if f"#### `{fid}`\n" not in text]
    assert missing == []
    assert len(re.findall(r"^#### `", text, flags=re.M)) == len(ENTRIES) == 51


def test_every_cast_and_error_class_is_documented():
    text = render_semantics()
    for rule in CAST_RULES:
        assert f"| `{rule.source.value}` | `{rule.target.value}` |" in text
    for error in ErrorClass:
        assert f"| `{error.value}` |" in text


def test_comparison_rules_come_from_compare_module():
    rules = compare_rules()
    assert len(rules) == 8 and rules[0].startswith("null equals null")
    assert all(rule in render_semantics() for rule in rules)


def test_agreement_is_not_claimed_as_proof():
    assert "evidence, not proof" in render_semantics()


# Worked examples inside the catalogue's semantics sentences, e.g. "div(-7, 2) = -3": the
# reference must give exactly that (floats compared by bits, so a wrong sign of zero shows).
_EXAMPLE = re.compile(r"([a-z_]+\((?:[^()]|\([^()]*\))*\)|-?\d+ % -?\d+) = (-?\d+(?:\.\d+)?|NaN|-?inf|'[^']*')(?![\w(])")
_WORDS = {"NaN": "cast('NaN' as float64)", "inf": "cast('Infinity' as float64)",
          "-inf": "cast('-Infinity' as float64)"}


def _examples() -> list:
    found = []
    for spec in ENTRIES:
        for left, right in _EXAMPLE.findall(spec.semantics):
            if re.search(r"\b[xy]\b", left):
                continue  # a general statement ("power(x, 0) = 1 for every x"), not an example
            found.append(pytest.param(left, right, id=f"{spec.id}: {left} = {right}"))
    return found


def _as_text(words: str) -> str:
    return re.sub(r"(?<![\w'])(-?inf|NaN)(?![\w'])", lambda m: _WORDS[m.group(1)], words)


def _value(text: str):
    return rexpr.compile(text, {}).evaluate(pa.table({"_row": [0]}), backend="reference").to_pylist()[0]


def _same(a, b) -> bool:
    if isinstance(a, float) or isinstance(b, float):
        a, b = float(a), float(b)
        return (math.isnan(a) and math.isnan(b)) or struct.pack("<d", a) == struct.pack("<d", b)
    return a == b


def test_catalogue_states_worked_examples():
    assert len(_examples()) >= 10  # the extraction itself must keep working


@pytest.mark.parametrize("left, right", _examples())
def test_catalogue_worked_example_holds(left, right):
    got, want = _value(_as_text(left)), _value(_as_text(right))
    assert _same(got, want), f"{left} is {got!r}, the catalogue says {right}"
