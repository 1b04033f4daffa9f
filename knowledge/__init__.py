"""contrast-aid domain core: knowledge tables, rule engine, calculators. Never imports ipywidgets.

Layers, lowest first (each imports only from those below it; ``tests/test_layers.py`` walks the imports):
``errors`` → ``tables`` → ``calculators`` → ``decision`` → ``present`` → (``widgets``) → ``cli``.
This package's own namespace re-exports the public API and is imported by nothing inside it.
"""

from .decision.engine import decide, parse_case
from .errors import CaseError, ContrastAidError, KnowledgeError, RangeError
from .tables.loader import Knowledge, load_knowledge

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
