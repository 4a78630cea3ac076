"""User-facing errors shared by caseprep and postproc.

A :class:`UserError` is a mistake in the user's input (config, geometry,
results files, command-line options). The CLIs catch it, print its message
and exit with code 2 — never a traceback. Everything else is a bug.

Messages follow one shape: what was expected, what was found, where (file and
key or array), and how to fix it::

    expected a positive number (m), got -0.01 in sweep.toml at sweep.ride_height[2].
    Fix: ride heights are measured upwards from the ground; use a value > 0.
"""
from __future__ import annotations

import difflib
from typing import Iterable


class UserError(Exception):
    """A problem with the user's input; the message says what to fix."""

    def __init__(
        self,
        message: str | None = None,
        *,
        expected: str | None = None,
        got: object = None,
        file: str | None = None,
        key: str | None = None,
        fix: str | None = None,
    ) -> None:
        file, key = _printable(file), _printable(key)
        if message is None:
            parts = []
            if expected is not None:
                parts.append(f"expected {expected}, got {got!r}")
            where = []
            if file:
                where.append(str(file))
            if key:
                where.append(f"at {key}")
            if where:
                parts.append("in " + " ".join(where))
            message = " ".join(parts) if parts else "invalid input"
            if fix:
                message += f".\nFix: {fix}"
        elif fix:
            message += f"\nFix: {fix}"
        super().__init__(message)
        self.file = file
        self.key = key
        self.fix = fix


def _printable(text: str | None) -> str | None:
    """``text`` with control characters escaped (a name read from a file must
    not move the terminal's cursor or split a message line)."""
    if text is None or str(text).isprintable():
        return text
    return "".join(c if c.isprintable() else c.encode("unicode_escape").decode("ascii") for c in str(text))


class UserErrors(UserError):
    """Several problems found at once (``caseprep check`` reports them all)."""

    def __init__(self, errors: Iterable[UserError]) -> None:
        self.errors = list(errors)
        n = len(self.errors)
        head = f"{n} problem{'s' if n != 1 else ''} found:"
        body = "\n".join(f"  {i + 1}. " + str(e).replace("\n", "\n     ") for i, e in enumerate(self.errors))
        super().__init__(head + "\n" + body)


def did_you_mean(word: str, choices: Iterable[str]) -> str:
    """' Did you mean 'x'?' for the closest of ``choices``, or ''."""
    close = difflib.get_close_matches(word, list(choices), n=1, cutoff=0.6)
    return f" Did you mean {close[0]!r}?" if close else ""
