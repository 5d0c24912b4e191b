"""Summary of the latest differential report (the file shipped in rexpr/data)."""

from __future__ import annotations

import json
from importlib import resources
from typing import Any

from rexpr.errors import EngineUnavailable

REPORT_FILE = "disagreements.json"


def report_payload() -> dict[str, Any]:
    try:
        text = resources.files("rexpr.data").joinpath(REPORT_FILE).read_text(encoding="utf-8")
        data = json.loads(text)
        pairs = [{"function": str(item["function"]), "engine": str(item["engine"])}
                 for item in data.get("faithful_disagreements", [])]
        generated = data.get("generated")
    except (OSError, ValueError, KeyError, TypeError, AttributeError):
        # Missing or unreadable: say so rather than report "no disagreements".
        raise EngineUnavailable("the differential report is missing or unreadable in this build",
                                code="component_unavailable") from None
    return {
        "source": "bundled differential report",
        "generated": str(generated) if generated is not None else None,
        "about": data.get("about") if isinstance(data.get("about"), str) else None,
        "disagreement_count": len(pairs),
        "faithful_disagreements": pairs,
    }
