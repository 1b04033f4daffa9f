"""Errors and constants in one place (issue 7, section 4): each clinical constant is defined once and
imported; nobody parses an error's message text. These are source checks: they fail when a second
definition or a message parser comes back."""

from __future__ import annotations

import re
from pathlib import Path

from knowledge.calculators import access, body, dose, hydration, limits, timeline
from knowledge.decision import plans
from knowledge.present import report
from knowledge.tables import constants as c
from knowledge.tables import models as m

ROOT = Path(__file__).resolve().parents[1]
SOURCES = [p for d in ("knowledge", "widgets") for p in (ROOT / d).rglob("*.py")]


def _code(path: Path) -> str:
    """The file without docstrings and comments (calculator docstrings quote their ranges in words)."""
    text = re.sub(r'"""[\s\S]*?"""', "", path.read_text(encoding="utf-8"))
    return "\n".join(line.split("#", 1)[0] for line in text.splitlines())


def _defining(pattern: str) -> list[str]:
    return sorted(str(p.relative_to(ROOT)) for p in SOURCES if re.search(pattern, _code(p)))


def test_each_clinical_constant_is_defined_once():
    assert _defining(r"HOURS\w* *= *48|\b48(\.0)? ?h\b") == ["knowledge/tables/constants.py"]  # metformin 48 h
    assert _defining(r"\(0\.5, 350(\.0)?\)") == ["knowledge/tables/constants.py"]  # weight range
    assert _defining(r"[\"']antecubital[\"'], *[\"']forearm") == ["knowledge/tables/constants.py"]  # IV site list
    assert _defining(r"[\"']none[\"']: 0") == []  # severity order (constants builds it from SEVERITY_ORDER)
    assert _defining(r"VISCOUS_MPAS_37C = ") == ["knowledge/tables/constants.py"]


def test_every_user_of_a_constant_imports_the_same_object():
    assert dose.WEIGHT_KG_RANGE == body.WEIGHT_KG_RANGE == limits.WEIGHT_KG_RANGE == hydration.WEIGHT_KG_RANGE == c.WEIGHT_KG_RANGE
    assert access.SITES is c.IV_SITES and set(m.IVAccess.model_fields["site"].annotation.__args__) == set(c.IV_SITES)
    assert report.METFORMIN_HOLD_HOURS == timeline.METFORMIN_RECHECK_HOURS == c.METFORMIN_HOLD_HOURS == 48
    assert plans.VISCOUS_MPAS_37C is c.VISCOUS_MPAS_37C
    assert tuple(s.value for s in m.Severity) == c.SEVERITY_ORDER  # the enum and the order agree


def test_nobody_parses_error_message_text():
    assert _defining(r"\.message\.split\(") == []
    assert _defining(r"\.message\.removeprefix\(|message\.startswith\(") == []
