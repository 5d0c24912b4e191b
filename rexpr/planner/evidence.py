"""Evidence from the differential tester: function x engine pairs the last report saw disagree.

The file ships with the package (``rexpr/data/disagreements.json``); ``rexpr diff
--update-baseline`` refreshes it. A pair listed there is never pushed, whatever the capability
table says.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources
from pathlib import Path


@dataclass(frozen=True)
class Evidence:
    source: str
    generated: str | None
    disagreeing: frozenset[tuple[str, str]]  # (function id, engine)

    def disagrees(self, function_id: str, engine: str) -> bool:
        return (function_id, engine) in self.disagreeing


def load_evidence(path: str | Path | None = None) -> Evidence:
    if path is None:
        return _bundled()
    return _parse(Path(path).read_text(encoding="utf-8"), str(path))


@lru_cache(maxsize=1)
def _bundled() -> Evidence:
    resource = resources.files("rexpr.data").joinpath("disagreements.json")
    try:
        text = resource.read_text(encoding="utf-8")
    except FileNotFoundError:
        return Evidence("none", None, frozenset())
    return _parse(text, "bundled differential report")


def _parse(text: str, source: str) -> Evidence:
    data = json.loads(text)
    pairs = frozenset((item["function"], item["engine"]) for item in data.get("faithful_disagreements", []))
    return Evidence(source, data.get("generated"), pairs)
