"""Every independent syntax error of a text, not only the first (for ``marchkit check``).

The parser stops at the first error.  To go on, the text is cut into independent pieces —
each ``test "…"`` block of a file, and inside a notation each element between ``;`` — and
each piece is parsed alone, in a copy of the text where everything else is blanked out
(spaces; line breaks kept), so that the line and column of every error are those of the
original text.  A piece that parses alone but not in place (a missing ``;`` between two
elements) is reported by the piece that contains the fault.
"""

from __future__ import annotations

import re

from ..errors import PositionedError

_TEST_START = re.compile(r'^[ \t]*test[ \t]+"', re.M)


def _blank(text: str, keep: list[tuple[int, int]], put: dict[int, str] | None = None) -> str:
    """``text`` with every character outside the ``keep`` ranges turned into a space (line
    breaks stay), then the characters of ``put`` (index → character) placed."""
    chars = [c if c == "\n" else " " for c in text]
    for a, b in keep:
        chars[a:b] = text[a:b]
    for i, c in (put or {}).items():
        if 0 <= i < len(chars) and chars[i] != "\n":
            chars[i] = c
    return "".join(chars)


def _blocks(text: str) -> list[tuple[int, int]]:
    starts = [m.start() for m in _TEST_START.finditer(text)]
    if not starts:
        return [(0, len(text))]
    if text[:starts[0]].strip() and not text[:starts[0]].lstrip().startswith("#"):
        starts.insert(0, 0)
    return [(a, b) for a, b in zip(starts, starts[1:] + [len(text)])]


def _elements(text: str, lo: int, hi: int) -> tuple[int, int, list[tuple[int, int]]] | None:
    """The braces of the first notation in text[lo:hi] and its element ranges."""
    open_at = text.find("{", lo, hi)
    if open_at < 0:
        return None
    depth, parts, start = 0, [], open_at + 1
    close_at = None
    for i in range(open_at + 1, hi):
        c = text[i]
        if c == '"':
            return None
        if c == "(":
            depth += 1
        elif c == ")":
            depth = max(0, depth - 1)
        elif c == ";" and depth == 0:
            parts.append((start, i))
            start = i + 1
        elif c == "}" and depth == 0:
            close_at = i
            break
    end = close_at if close_at is not None else hi
    parts.append((start, end))
    return open_at, end, [(a, b) for a, b in parts if text[a:b].strip()]


def all_errors(text: str, filename: str, as_file: bool = True) -> list[PositionedError]:
    """The syntax errors of ``text``, one per independent piece, in text order (empty when
    the text parses)."""
    from .parser import parse_file_text, parse_notation

    parse = (lambda t: parse_file_text(t, filename)) if as_file else (lambda t: parse_notation(t, filename))
    try:
        parse(text)
        return []
    except PositionedError as first:
        if first.source is None:          # a size limit: nothing to recover
            return [first]
    errors: list[PositionedError] = []
    for lo, hi in _blocks(text):
        try:
            parse(_blank(text, [(lo, hi)]))
            continue
        except PositionedError as e:
            block_error = e
        found = []
        el = _elements(text, lo, hi)
        if el is not None:
            open_at, close_at, parts = el
            for a, b in parts:
                cand = _blank(text, [(a, b)], {a - 1: "{", b: "}"})
                try:
                    parse_notation(cand, filename)
                except PositionedError as e:
                    if e.message.startswith("a test needs at least one element"):
                        continue          # a delay or a hammer item alone: fine as a piece
                    if e.source is not None:
                        e.source = text
                    found.append(e)
        inside = el is not None and block_error.pos is not None and _offset(text, block_error) is not None \
            and el[0] <= _offset(text, block_error) <= el[1]
        if found and inside:
            errors.extend(found)
        else:
            block_error.source = text
            errors.append(block_error)
            if not inside:
                errors.extend(found)
    seen, out = set(), []
    for e in sorted(errors, key=lambda e: (e.pos.line, e.pos.column) if e.pos else (0, 0)):
        key = (e.pos.line, e.pos.column) if e.pos else e.message
        if key not in seen:
            seen.add(key)
            out.append(e)
    return out or [first]


def _offset(text: str, e: PositionedError) -> int | None:
    if e.pos is None:
        return None
    lines = text.split("\n")
    if not 1 <= e.pos.line <= len(lines):
        return None
    return sum(len(x) + 1 for x in lines[:e.pos.line - 1]) + e.pos.column - 1
