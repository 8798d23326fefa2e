"""Type and choice checks of recipe values; every error names the file, line and key."""

from __future__ import annotations

import difflib
from pathlib import Path

from refit.errors import UsageError

#: Longest list a recipe key may hold (forms, estimators, methods, predictors, ...).
MAX_ITEMS = 64
#: Characters of an offending value quoted in a message.
SHOWN_CHARS = 80


def shown(value) -> str:
    """``repr(value)`` cut to :data:`SHOWN_CHARS` characters, saying how long it was."""
    text = repr(value)
    if len(text) <= SHOWN_CHARS:
        return text
    size = f"{len(value):,} items, " if isinstance(value, (list, tuple, dict)) else ""
    return f"{text[:SHOWN_CHARS]}... ({size}{len(text):,} characters)"


def where(path: Path, lines: dict, key: str) -> str:
    """``"recipe.toml, line 12"`` for a ``section.key`` (or the file alone)."""
    line = lines.get(key) or lines.get(key.split(".")[0])
    return f"{path}" + (f", line {line}" if line else "")


def suggest(word: str, choices) -> str:
    """``" (did you mean 'x'?)"`` for the closest of ``choices``, or ``""``."""
    close = difflib.get_close_matches(str(word), list(choices), n=1, cutoff=0.6)
    return f" (did you mean {close[0]!r}?)" if close else ""


class Values:
    """Type and choice checks that name the file, line and key."""

    def __init__(self, path: Path, lines: dict):
        self.path, self.lines = path, lines

    def fail(self, key: str, what: str, value):
        section, name = key.split(".", 1)
        raise UsageError(f"{where(self.path, self.lines, key)}: [{section}] {name} must be "
                         f"{what}; got {shown(value)}")

    def not_too_long(self, key, items) -> None:
        if isinstance(items, list) and len(items) > MAX_ITEMS:
            self.fail(key, f"a list of at most {MAX_ITEMS} items (refit's limit; found "
                      f"{len(items):,})", items)

    def string(self, key, value) -> str:
        if not isinstance(value, str) or not value.strip():
            self.fail(key, "a non-empty text in quotes", value)
        return value.strip()

    def names(self, key, value) -> tuple[str, ...]:
        items = [value] if isinstance(value, str) else value
        if not isinstance(items, list) or not items:
            self.fail(key, "a column name or a list of column names", value)
        self.not_too_long(key, items)
        out = tuple(self.string(key, v) for v in items)
        if len(set(out)) != len(out):
            self.fail(key, "a list without repeats", value)
        return out

    def choice(self, key, value, choices, *, aliases=()) -> str:
        if not isinstance(value, str) or value not in choices:
            self.fail(key, "one of " + ", ".join(map(repr, choices + tuple(aliases)))
                      + suggest(value, choices + tuple(aliases)), value)
        return value

    def list_of(self, key, value, choices, *, valid=None, extra="") -> tuple[str, ...]:
        items = [value] if isinstance(value, str) else value
        ok = valid or (lambda s: s in choices)
        if not isinstance(items, list) or not items:
            self.fail(key, "a non-empty list", value)
        self.not_too_long(key, items)
        for item in items:
            if not isinstance(item, str) or not ok(item):
                listed = ", ".join(map(repr, choices)) + (f", {extra}" if extra else "")
                self.fail(key, f"a list of: {listed}; {shown(item)} is not one of them"
                          + suggest(item, choices), value)
        if len(set(items)) != len(items):
            self.fail(key, "a list without repeats", value)
        return tuple(items)

    def integer(self, key, value, *, minimum: int, maximum: int) -> int:
        if isinstance(value, bool) or not isinstance(value, int) \
                or not minimum <= value <= maximum:
            self.fail(key, f"a whole number >= {minimum} and <= {maximum:,} (refit's "
                      "limit)", value)
        return int(value)

    def level(self, key, value) -> float:
        if isinstance(value, bool) or not isinstance(value, (int, float)) \
                or not 0.5 <= value < 1:
            self.fail(key, "a coverage between 0.5 and 1, e.g. 0.95", value)
        return float(value)
