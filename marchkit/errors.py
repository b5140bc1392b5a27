"""One exception tree for the whole library.

Every error marchkit raises on purpose derives from :class:`MarchkitError` and carries the
process exit status the command line uses for it.  Only :mod:`marchkit.cli` prints them.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class SourcePos:
    """A place in a source text: 1-based line and column, plus the file's name."""

    line: int
    column: int
    file: str = "<string>"
    end_column: int | None = None

    def __str__(self) -> str:
        return f"{self.file}:{self.line}:{self.column}"


class MarchkitError(Exception):
    """Base of every error marchkit raises on purpose."""

    exit_code = 1

    def __init__(self, message: str):
        super().__init__(message)
        self.message = message

    def render(self) -> str:
        """Text for a person: what the command line prints."""
        return f"error: {self.message}"


class InputError(MarchkitError):
    """The user's input (a file, a notation, an option) is wrong.  Exit status 2."""

    exit_code = 2


class PositionedError(InputError):
    """An input error at a known place in a source text; renders with the line and a caret."""

    def __init__(self, message: str, pos: SourcePos | None = None, source: str | None = None):
        super().__init__(message)
        self.pos = pos
        self.source = source

    def source_line(self) -> str | None:
        if self.pos is None or self.source is None:
            return None
        # lines end at "\n" only, as the parser counts them (str.splitlines also breaks at
        # form feeds, lone CRs, U+2028, ... and would show the wrong line)
        lines = self.source.split("\n")
        if 1 <= self.pos.line <= len(lines):
            return lines[self.pos.line - 1]
        return None

    def render(self) -> str:
        if self.pos is None:
            return f"error: {self.message}"
        out = [f"{self.pos}: error: {self.message}"]
        line = self.source_line()
        if line is not None:
            # one column per character: tabs and other blanks (CR, form feed, ...) show as a space
            col = max(1, self.pos.column)
            width = 1
            if self.pos.end_column and self.pos.end_column > col:
                width = self.pos.end_column - col
            line, col, width = _window(line, col, width)
            line = "".join(" " if c.isspace() else c for c in line)
            out.append(f"    {line}")
            out.append("    " + " " * (col - 1) + "^" * width)
        return "\n".join(out)


WINDOW = 60      # characters shown on each side of the caret in a long line


def _window(line: str, col: int, width: int) -> tuple[str, int, int]:
    """A long line cut to a window around the caret (``…`` marks the cuts); the column and
    the caret width follow the cut."""
    width = min(width, WINDOW)
    if len(line) <= 2 * WINDOW + 20:
        return line, col, width
    lo = max(0, col - 1 - WINDOW)
    hi = min(len(line), col - 1 + width + WINDOW)
    head = "…" if lo > 0 else ""
    tail = "…" if hi < len(line) else ""
    return head + line[lo:hi] + tail, col - lo + len(head), width


class NotationSyntaxError(PositionedError):
    """The text is not a march test (or a file of march tests) at all."""


class NotationError(PositionedError):
    """The text parses, but what it says is wrong (an absurd repeat count, a bad field, ...)."""


class ConsistencyError(PositionedError):
    """A fault-free memory would fail the test (a read expects a value that cannot be there)."""


class UnknownTestError(InputError):
    """A test name that is neither in the library, nor a file, nor a notation."""


class ModelError(InputError):
    """An impossible memory geometry, address order, background or timing."""


class FaultSpecError(InputError):
    """A fault selection or pair scope that marchkit does not know."""


class OutputError(InputError):
    """An output cannot be written as asked (exists without --force, bad format, ...)."""


class EngineLimitError(InputError):
    """A run that the chosen engine refuses because it would be far too large."""


@dataclass(frozen=True)
class Diagnostic:
    """A warning or error found by the checks on a test; ``severity`` is 'error' or 'warning'."""

    severity: str
    message: str
    pos: SourcePos | None = None

    def render(self, source: str | None = None) -> str:
        err = PositionedError(self.message, self.pos, source)
        text = err.render()
        return text.replace("error:", f"{self.severity}:", 1)
