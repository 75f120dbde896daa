"""Reading and writing problem specifications as TOML files."""

from __future__ import annotations

import tomllib
from pathlib import Path

import tomli_w

from .errors import SpecError
from .spec import Problem


def parse_problem(text: str, source: str = "<string>") -> Problem:
    """Parse TOML text into a validated Problem; syntax errors become SpecError naming the source."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(source, f"not valid TOML ({exc}); check the syntax at that line") from None
    return Problem.from_dict(data)


def load_problem(path: str | Path) -> Problem:
    """Read a problem from a TOML file."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise SpecError(str(path), f"cannot read the file ({exc.__class__.__name__}: {exc})") from None
    return parse_problem(text, str(path))


def format_problem(problem: Problem) -> str:
    """TOML text that ``parse_problem`` reads back into an equal Problem."""
    return tomli_w.dumps(problem.to_dict())


def save_problem(problem: Problem, path: str | Path) -> None:
    Path(path).write_text(format_problem(problem), encoding="utf-8")
