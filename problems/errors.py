"""The one error type raised for a malformed problem, suite or parameter.

Every message is a single line that names the field (a dotted path such as ``up.mass``), the
value that was given and what is allowed, so that a user can fix the input without reading code.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable
from typing import Any


class SpecError(ValueError):
    """A field of a user-supplied specification is missing, unknown or out of range."""

    def __init__(self, field: str, message: str):
        self.field = field
        self.reason = message
        super().__init__(f"{field}: {message}")


def show(value: Any) -> str:
    """A short printable form of a user value for an error message."""
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def did_you_mean(name: str, candidates: Iterable[str], otherwise: str = "", cutoff: float = 0.5) -> str:
    """The hint "did you mean 'X'?" for the candidate X closest to a mistyped ``name`` (``difflib``
    similarity at least ``cutoff``), else ``otherwise``."""
    close = difflib.get_close_matches(str(name), list(candidates), n=1, cutoff=cutoff)
    return f"did you mean '{close[0]}'?" if close else otherwise


def reject_unknown_keys(table: dict, allowed: Iterable[str], where: str) -> None:
    """Raise SpecError for the first key of ``table`` not in ``allowed``, suggesting the closest."""
    allowed = list(allowed)
    for key in table:
        if key not in allowed:
            field = f"{where}.{key}" if where else str(key)
            hint = did_you_mean(key, allowed, otherwise="allowed keys: " + ", ".join(sorted(allowed)))
            raise SpecError(field, f"unknown key; {hint}")
