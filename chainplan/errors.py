"""The one error type users see: a problem in a chain spec, located by file,
line and field, with a hint at what would be valid."""
from __future__ import annotations

import difflib


class SpecError(Exception):
    def __init__(self, message: str, file: str | None = None, line: int | None = None,
                 field: str | None = None):
        super().__init__(message)
        self.message, self.file, self.line, self.field = message, file, line, field

    def __str__(self) -> str:
        where = self.file or "<spec>"
        if self.line is not None:
            where += f":{self.line}"
        head = f"{where}: " + (f"{self.field}: " if self.field else "")
        return head + self.message


class UsageError(Exception):
    """Bad command-line input that is not a spec problem (exit 2)."""


def nearest(word: str, options) -> str:
    """A 'did you mean' suffix naming the closest valid option, or the list."""
    options = sorted(options)
    close = difflib.get_close_matches(word, options, n=1, cutoff=0.5)
    if close:
        return f" (did you mean '{close[0]}'?)"
    return " (valid: " + ", ".join(options) + ")" if len(options) <= 30 else ""
