"""The one error tree of contrast-aid.

Every error a user can cause is a :class:`ContrastAidError`; its message names the field, the value
given and what is allowed, in one line. The CLI prints that line and exits 2; the dashboard shows it
next to the field. Nothing else is ever raised for bad input.
"""

from __future__ import annotations

from typing import Any


class ContrastAidError(Exception):
    """Base of every error contrast-aid raises on purpose."""

    def __init__(self, message: str, *, field: str | None = None):
        super().__init__(message)
        self.field = field

    @property
    def message(self) -> str:
        return str(self.args[0])


class KnowledgeError(ContrastAidError):
    """A knowledge table (or a policy file) is missing, malformed or inconsistent."""


class CaseError(ContrastAidError):
    """A case (exam request and patient factors) is malformed or out of range."""


class RangeError(CaseError):
    """A calculator was given a value outside the range its formula is valid for."""


def show(value: Any) -> str:
    """Render a value given by the user for an error message, kept short."""
    text = f"{value:g}" if isinstance(value, float) else repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def out_of_range(field: str, value: Any, low: float | None, high: float | None, unit: str = "") -> RangeError:
    """The standard message for a number outside its valid range."""
    unit = f" {unit}" if unit else ""
    if low is not None and high is not None:
        allowed = f"from {low:g} to {high:g}{unit}"
    elif low is not None:
        allowed = f"at least {low:g}{unit}"
    else:
        allowed = f"at most {high:g}{unit}"
    return RangeError(f"{field}: {show(value)} is out of range; allowed: {allowed}", field=field)
