"""What an engine with only the simple (one-to-one) Unicode case mappings needs to give the
full mappings of the Unicode Standard 3.13, as Python's str.upper/str.lower do.

Everything is derived from Python's own str methods (once, on first use), so the tables follow the
Unicode version of the running Python:

* ``special("upper")``: characters whose full uppercase is several characters (SpecialCasing.txt,
  unconditional entries: 'ß' -> 'SS', 'ŉ' -> 'ʼN', the Greek iota-subscript forms, ...).
  Replacing each by its expansion *before* the simple mapping is exact, because the
  expansions are already uppercase (their uppercase is themselves).
* ``special("lower")``: the same for lowercase (only 'İ' -> 'i̇').
* ``sigma_classes()``: the character classes of the Final_Sigma condition
  (Unicode 3.13, table 3-17): U+03A3 lowercases to U+03C2 when preceded by a cased letter
  (skipping case-ignorable characters) and not followed by one. A character that is both
  cased and case-ignorable behaves as case-ignorable there, so the classes are split that way.
"""

from __future__ import annotations

from functools import cache

SIGMA, FINAL_SIGMA = "\u03a3", "\u03c2"


def _characters() -> list[str]:
    return [chr(c) for c in range(0x110000) if not 0xD800 <= c < 0xE000]


@cache
def special(method: str) -> tuple[tuple[str, str], ...]:
    """(character, expansion) for every character whose full ``method`` mapping is longer."""
    return tuple((c, getattr(c, method)()) for c in _characters() if len(getattr(c, method)()) > 1)


@cache
def sigma_classes() -> tuple[tuple[tuple[int, int], ...], tuple[tuple[int, int], ...]]:
    """Probe str.lower: 'cΣ' ends in final sigma iff c is cased and not case-ignorable;
    'AcΣ' iff c is case-ignorable or cased."""
    cased_only: list[int] = []
    ignorable: list[int] = []
    for ch in _characters():
        if (ch + SIGMA).lower().endswith(FINAL_SIGMA):
            cased_only.append(ord(ch))
        elif ("A" + ch + SIGMA).lower().endswith(FINAL_SIGMA):
            ignorable.append(ord(ch))
    return ranges(cased_only), ranges(ignorable)


def ranges(code_points: list[int]) -> tuple[tuple[int, int], ...]:
    out: list[list[int]] = []
    for c in code_points:
        if out and out[-1][1] == c - 1:
            out[-1][1] = c
        else:
            out.append([c, c])
    return tuple((a, b) for a, b in out)


def pcre_class(spans: tuple[tuple[int, int], ...]) -> str:
    """A PCRE character class (UTF mode) of code point ranges."""
    parts = (f"\\x{{{a:X}}}" if a == b else f"\\x{{{a:X}}}-\\x{{{b:X}}}" for a, b in spans)
    return "[" + "".join(parts) + "]"


def final_sigma_pattern() -> str:
    """PCRE pattern whose group 1 is the context before a Σ in final position; replacing the
    match with group 1 and U+03C2 applies the Final_Sigma rule (left to right, no overlap:
    a Σ used as context is followed by a cased Σ, so it is never final itself)."""
    cased_only, case_ignorable = sigma_classes()
    cased, ignorable = pcre_class(cased_only), pcre_class(case_ignorable)
    return f"({cased}{ignorable}*){SIGMA}(?!{ignorable}*{cased})"
