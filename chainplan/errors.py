"""The one error type users see: a problem in a chain spec, located by file,
line and field, with a hint at what would be valid."""
from __future__ import annotations

import difflib
import re


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
        return tidy(head + self.message)


#: longest quoted value a message echoes, and longest message
ECHO_CHARS, MESSAGE_CHARS = 80, 1000


def tidy(text: str) -> str:
    """A message on one line: control characters escaped (a value with a newline
    cannot split it), quoted values over ECHO_CHARS shortened with '…', the whole
    cut at MESSAGE_CHARS."""
    text = re.sub(r"[\x00-\x1f\x7f]", lambda m: repr(m.group())[1:-1], str(text))
    text = re.sub(r"(?<![\w'])'(?=\S)([^']{%d,}?)(?<=\S)'(?![\w'])" % (ECHO_CHARS + 1),
                  lambda m: f"'{m.group(1)[:ECHO_CHARS - 1]}…'", text)
    return text if len(text) <= MESSAGE_CHARS else text[:MESSAGE_CHARS - 1] + "…"


class UsageError(Exception):
    """Bad command-line input that is not a spec problem (exit 2)."""


def nearest(word: str, options) -> str:
    """A 'did you mean' suffix naming the closest valid option, or the list."""
    options = sorted(options)
    close = difflib.get_close_matches(word, options, n=1, cutoff=0.5)
    if close:
        return f" (did you mean '{close[0]}'?)"
    return " (valid: " + ", ".join(options) + ")" if len(options) <= 30 else ""
