"""The one error tree of contrast-aid, and the one place its one-line messages are built.

Every error a user can cause is a :class:`ContrastAidError`. It carries the structured facts of the
problem — ``field`` (dotted path, e.g. ``patient.age_years``), ``value`` (what was given), ``allowed``
(what would be accepted) and an optional ``suggestion`` (the nearest known id) — and its message is the
one line :func:`line` builds from them: ``field: value problem (did you mean X?); allowed: ...``, never
longer than :data:`MAX_LINE` characters. Callers read the attributes; nobody parses the message text.
The CLI prints that line and exits 2; the dashboard shows it next to ``field``.
"""

from __future__ import annotations

import difflib
from typing import Any, Iterable

#: Longest message line (characters): a 1 MB exam id must not give a 1 MB error line.
MAX_LINE = 1000
#: Longest rendering of a value given by the user inside a message.
MAX_VALUE = 60


class _Missing:
    def __repr__(self) -> str:
        return "<no value>"


#: Marks "no value given" (``None`` is a value a user can give).
NO_VALUE: Any = _Missing()


def clip(text: str, limit: int = MAX_LINE) -> str:
    """``text`` on one line and at most ``limit`` characters (an ellipsis marks a cut)."""
    text = " ".join(str(text).split())
    return text if len(text) <= limit else text[: limit - 3] + "..."


def show(value: Any) -> str:
    """Render a value given by the user for an error message, kept short."""
    try:
        text = f"{value:g}" if isinstance(value, float) else repr(value)
    except (ValueError, RecursionError):  # a huge int (str-digit limit) or a deeply nested object
        text = f"<{type(value).__name__}>"
    text = " ".join(text.split())
    return text if len(text) <= MAX_VALUE else text[: MAX_VALUE - 3] + "..."


def suggest(word: Any, choices: Iterable[str]) -> str | None:
    """The nearest of ``choices`` to ``word`` (difflib), or None when nothing is close."""
    if not isinstance(word, str) or len(word) > 200:
        return None
    near = difflib.get_close_matches(word, list(choices), n=1, cutoff=0.6)
    return near[0] if near else None


def line(field: str | None, problem: str, value: Any = NO_VALUE, allowed: str | None = None,
         suggestion: str | None = None, note: str | None = None) -> str:
    """The one-line message: ``field: value problem (did you mean X?); allowed: ...[ note]``."""
    head = f"{field}: " if field else ""
    given = "" if value is NO_VALUE else show(value) + " "
    hint = f" (did you mean {suggestion}?)" if suggestion else ""
    tail = f"; allowed: {allowed}" if allowed else ""
    extra = f" {note}" if note else ""
    return clip(f"{head}{given}{problem}{hint}{tail}{extra}")


class ContrastAidError(Exception):
    """Base of every error contrast-aid raises on purpose.

    Give either a ready ``message`` (kept for short internal messages) or the structured parts —
    ``problem`` with ``field``, ``value``, ``allowed``, ``suggestion`` — from which :func:`line` builds it.
    """

    def __init__(self, message: str | None = None, *, field: str | None = None, value: Any = NO_VALUE,
                 allowed: str | None = None, suggestion: str | None = None, problem: str | None = None,
                 note: str | None = None):
        self.field = field
        self.value = value
        self.allowed = allowed
        self.suggestion = suggestion
        self.problem = problem
        self.note = note
        if message is None:
            message = line(field, problem or "is not valid", value, allowed, suggestion, note)
        super().__init__(clip(message))

    @property
    def message(self) -> str:
        return str(self.args[0])

    @property
    def structured(self) -> bool:
        return self.problem is not None

    def at(self, prefix: str, *, rename: dict[str, str] | None = None) -> "ContrastAidError":
        """The same error with its field under ``prefix`` (``weight_kg`` -> ``patient.weight_kg``), or with
        the field renamed by ``rename`` (the egfr subcommand names its flags). Same class, same parts."""
        field = self.field or ""
        if rename is not None:
            new_field = rename.get(field, field)
        else:
            new_field = f"{prefix}.{field}" if field else prefix
        if self.structured:
            return type(self)(field=new_field, value=self.value, allowed=self.allowed, suggestion=self.suggestion,
                              problem=self.problem, note=self.note)
        text = self.message
        if field and text.startswith(field + ":"):
            text = new_field + text[len(field):]
        elif rename is None:
            text = f"{prefix}.{text}"
        return type(self)(text, field=new_field, value=self.value, allowed=self.allowed,
                          suggestion=self.suggestion)


class KnowledgeError(ContrastAidError):
    """A knowledge table (or a policy file) is missing, malformed or inconsistent."""


class CaseError(ContrastAidError):
    """A case (exam request and patient factors) is malformed or out of range."""


class RangeError(CaseError):
    """A calculator was given a value outside the range its formula is valid for."""


def range_words(low: float | None, high: float | None, unit: str = "") -> str:
    """'from 1 to 20 mg/dL', 'at least 0', 'at most 120 years'."""
    unit = f" {unit}" if unit else ""
    if low is not None and high is not None:
        return f"from {low:g} to {high:g}{unit}"
    if low is not None:
        return f"at least {low:g}{unit}"
    return f"at most {high:g}{unit}"


def out_of_range(field: str, value: Any, low: float | None, high: float | None, unit: str = "") -> RangeError:
    """The standard error for a number outside its valid range."""
    return RangeError(field=field, value=value, problem="is out of range", allowed=range_words(low, high, unit))
