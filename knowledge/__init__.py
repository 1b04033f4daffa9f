"""contrast-aid domain core: knowledge tables, rule engine, calculators. Never imports ipywidgets."""

from .engine import decide, parse_case
from .errors import CaseError, ContrastAidError, KnowledgeError, RangeError
from .loader import Knowledge, load_knowledge

__all__ = [
    "CaseError",
    "ContrastAidError",
    "Knowledge",
    "KnowledgeError",
    "RangeError",
    "decide",
    "load_knowledge",
    "parse_case",
]
