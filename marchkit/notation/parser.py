"""Parse march tests: lark grammar (``grammars/march.lark``) → frozen dataclasses."""

from __future__ import annotations

import re
from decimal import Decimal
from functools import lru_cache
from pathlib import Path

from ..errors import NotationError, NotationSyntaxError, SourcePos
from .ast import MAX_HAMMER_ROWS, MAX_REPEAT, MAX_ROW_OFFSET, Delay, Element, Hammer, MarchTest, Op

ORDER_WORDS = {
    "⇑": "up", "↑": "up", "up": "up",
    "⇓": "down", "↓": "down", "down": "down",
    "⇕": "any", "↕": "any", "⇅": "any", "any": "any",
}
UNIT_WORDS = {"ns": "ns", "us": "us", "µs": "us", "ms": "ms", "s": "s"}
DEFAULT_DELAY = (Decimal(100), "ms")   # a bare "Del", as most papers print it

FRIENDLY = {
    "ORDER": "an address order (⇑ ⇓ ⇕, or up / down / any)",
    "OPCODE": "an operation (r0, r1, w0 or w1)",
    "DEL": "a delay (Del)",
    "NUMBER": "a number",
    "COUNT": "a repeat count",
    "UNIT": "a time unit (ns, us, ms, s)",
    "STRING": 'a quoted string ("...")',
    "NAME": "a fault class name",
    "LENGTH": "a length such as 10n",
    "REPEAT_MARK": "a repeat mark (* ^ ×)",
    "HAMMER": "a hammer item (hammer)",
    "ROWOFF": "a row offset such as -1 or +1",
}


def grammar_path() -> Path:
    """The grammar file, installed beside the package or in a source checkout."""
    try:
        from importlib.resources import files

        p = files("marchkit.grammars").joinpath("march.lark")
        if p.is_file():
            return Path(str(p))
    except (ModuleNotFoundError, TypeError, FileNotFoundError):
        pass
    return Path(__file__).resolve().parents[2] / "grammars" / "march.lark"


@lru_cache(maxsize=1)
def _parser():
    import lark

    text = grammar_path().read_text(encoding="utf-8")
    return lark.Lark(text, parser="lalr", start=["file", "notation"], propagate_positions=True)


def _pos(meta_or_tok, filename: str) -> SourcePos | None:
    line = getattr(meta_or_tok, "line", None)
    col = getattr(meta_or_tok, "column", None)
    if line is None or col is None:
        return None
    end = getattr(meta_or_tok, "end_column", None)
    end_line = getattr(meta_or_tok, "end_line", line)
    return SourcePos(line, col, filename, end if end_line == line else None)


_ESCAPES = {"n": "\n", "t": "\t", "r": "\r"}

# Up-front limits (the parser runs at some tens of kB/s, linear in the input; these keep
# every parse under about a second and are stated in the message).  The published library
# is 15 kB; a long test is well under 1 kB.
MAX_NOTATION_CHARS = 64 * 1024
MAX_FILE_CHARS = 256 * 1024
MAX_STRING_CHARS = 4096
MAX_DELAY_SECONDS = 10_000             # the same bound as --retention (marchkit.model.timing)
_LONG_STRING = re.compile(r'"(?:[^"\\\n]|\\.){%d,}' % (MAX_STRING_CHARS + 1))


def _check_size(text: str, limit: int, what: str, filename: str) -> None:
    if len(text) > limit:
        raise NotationSyntaxError(
            f"{what} is {len(text):,} characters long; marchkit reads at most {limit:,} "
            f"(split it into several files)" if what.startswith("a file") else
            f"{what} is {len(text):,} characters long; marchkit reads at most {limit:,}",
            SourcePos(1, 1, filename), None)
    m = _LONG_STRING.search(text)
    if m:
        line = text.count("\n", 0, m.start()) + 1
        col = m.start() - (text.rfind("\n", 0, m.start()) + 1) + 1
        raise NotationSyntaxError(f"a quoted string longer than {MAX_STRING_CHARS:,} characters",
                                  SourcePos(line, col, filename, col + 1), text)


def _unquote(s: str) -> str:
    """A quoted string's text: ``\\n``, ``\\t``, ``\\r`` are control characters, any other
    ``\\x`` is ``x``."""
    body = s[1:-1]
    return re.sub(r"\\(.)", lambda m: _ESCAPES.get(m.group(1), m.group(1)), body)


def _describe(term: str) -> str:
    if term in FRIENDLY:
        return FRIENDLY[term]
    try:
        pat = _parser().get_terminal(term).pattern
        return repr(pat.value) if pat.type == "str" else term
    except Exception:
        return term


def _expected_text(names) -> str:
    # lark names a keyword whose upper-case name is taken ("length" beside LENGTH) __ANON_k:
    # such keywords are shown; other names starting with "_" are the grammar's own
    descs = sorted({_describe(n) for n in names if (n.startswith("__ANON") or not n.startswith("_")) and n != "$END"})
    if not descs:
        return "the end of the input"
    if len(descs) > 6:
        descs = descs[:6] + ["..."]
    return ", ".join(descs)


def _word_at(text: str, pos: int) -> str:
    m = re.compile(r"[^\s{}();,]+|.").match(text, pos)
    return m.group(0) if m else ""


def _short(word: str, limit: int = 40) -> str:
    """A word for a message: a very long one is cut (``…``), with its length."""
    return word if len(word) <= limit else f"{word[:limit]}… ({len(word):,} characters)"


def _end_pos(text: str) -> tuple[int, int]:
    """Line and column just after the last non-blank character; lines end at '\\n' only, as in lark."""
    lines = text.rstrip().split("\n")
    return len(lines), len(lines[-1]) + 1


def _convert_lark_error(err, text: str, filename: str) -> NotationSyntaxError:
    import lark

    line = getattr(err, "line", None) or 1
    col = getattr(err, "column", None) or 1
    if line == -1 or col == -1:  # lark's "end of input"
        line, col = _end_pos(text)
    if isinstance(err, lark.UnexpectedCharacters):
        word = _word_at(text, err.pos_in_stream)
        allowed = err.allowed or set()
        if word[:1] in "rRwW" and "OPCODE" in allowed:
            msg = f"unknown operation {_short(word)!r}; an operation is r0, r1, w0 or w1"
        elif "ORDER" in allowed and len(allowed) <= 3:
            msg = f"unexpected {_short(word)!r}; expected {_describe('ORDER')}"
        else:
            msg = f"unexpected {_short(word)!r}; expected {_expected_text(allowed)}"
        end = col + max(1, len(word))
    elif isinstance(err, lark.UnexpectedEOF):
        msg = f"unexpected end of input; expected {_expected_text(err.expected)}"
        end = None
    elif isinstance(err, lark.UnexpectedToken):
        tok = err.token
        if tok.type == "$END":
            msg = f"unexpected end of input; expected {_expected_text(err.expected)}"
            end = None
            line, col = _end_pos(text)
        else:
            shown = str(tok)
            msg = f"unexpected {_short(shown)!r}; expected {_expected_text(err.expected)}"
            if tok.type == "RBRACE" and "ORDER" in err.expected:
                msg = "a test needs at least one element, e.g. {⇕(w0)}" if str(tok) == "}" else msg
            end = col + max(1, len(shown))
    else:  # pragma: no cover - lark's other errors
        msg = str(err).splitlines()[0]
        end = None
    return NotationSyntaxError(msg, SourcePos(line, col, filename, end), text)


class _Builder:
    """Turns lark's tree into dataclasses; raises NotationError for values out of range."""

    def __init__(self, text: str, filename: str):
        self.text = text
        self.filename = filename

    def err(self, message, where):
        return NotationError(message, _pos(where, self.filename), self.text)

    def count(self, rep, what="repeats of one operation"):
        count_tok = rep.children[1]
        digits = str(count_tok).lstrip("0") or "0"
        # int() refuses very long digit strings; such a count is out of range anyway
        repeat = int(digits) if len(digits) <= len(str(MAX_REPEAT)) else MAX_REPEAT + 1
        if not 1 <= repeat <= MAX_REPEAT:
            shown = str(count_tok) if len(count_tok) <= 20 else f"{count_tok[:10]}... ({len(count_tok)} digits)"
            raise self.err(f"repeat count {shown} is out of range: 1 to {MAX_REPEAT} {what}", count_tok)
        return repeat

    def op(self, tree):
        tok = tree.children[0]
        kind, value = tok[0].lower(), int(tok[1])
        repeat = self.count(tree.children[1]) if len(tree.children) > 1 else 1
        return Op(kind, value, repeat, pos=_pos(tree.meta, self.filename))

    def hammer(self, tree):
        order_tok = tree.children[0]
        order = ORDER_WORDS[str(order_tok).lower() if str(order_tok).isascii() else str(order_tok)]
        if order == "any":
            raise self.err("a hammer item runs ⇑ or ⇓ (up or down), not ⇕", order_tok)
        offs = []
        count = 1
        for c in tree.children[2:]:
            if getattr(c, "data", None) == "repeat":
                count = self.count(c, "rounds of a hammer item")
                continue
            text = str(c)
            digits = text.lstrip("+-").lstrip("0") or "0"
            k = int(text[0] + digits if text[0] in "+-" else digits) if len(digits) <= 8 else MAX_ROW_OFFSET + 1
            if abs(k) > MAX_ROW_OFFSET:
                raise self.err(f"row offset {_short(text, 20)} is out of range: at most {MAX_ROW_OFFSET:,} rows "
                               "either way", c)
            offs.append(k)
        if len(offs) > MAX_HAMMER_ROWS:
            raise self.err(f"a hammer item cycles through at most {MAX_HAMMER_ROWS} rows (got {len(offs)})",
                           tree.meta)
        return Hammer(order, tuple(offs), count, pos=_pos(tree.meta, self.filename))

    def element(self, tree):
        order_tok = tree.children[0]
        order = ORDER_WORDS[str(order_tok).lower() if str(order_tok).isascii() else str(order_tok)]
        ops = tuple(self.op(c) for c in tree.children[1:])
        return Element(order, ops, pos=_pos(tree.meta, self.filename))

    def delay(self, tree):
        if len(tree.children) == 1:
            amount, unit = DEFAULT_DELAY
        else:
            dur = tree.children[1]
            amount = Decimal(str(dur.children[0]))      # exact, whatever its length or exponent
            unit = UNIT_WORDS[str(dur.children[1])]
            secs = amount * {"ns": Decimal("1e-9"), "us": Decimal("1e-6"), "ms": Decimal("1e-3"), "s": Decimal(1)}[unit]
            if not secs.is_finite() or secs > MAX_DELAY_SECONDS:
                raise self.err(f"a delay lasts at most {MAX_DELAY_SECONDS:,} s (a retention pause of hours is "
                               "not a march test)", dur.meta)
        return Delay(amount, unit, pos=_pos(tree.meta, self.filename))

    def notation(self, tree, **meta):
        items = []
        for c in tree.children:
            if c.data == "element":
                items.append(self.element(c))
            elif c.data == "delay":
                items.append(self.delay(c))
            elif c.data == "hammer":
                items.append(self.hammer(c))
        if not any(isinstance(i, Element) for i in items):
            raise self.err("a test needs at least one element, e.g. {⇕(w0)}", tree.meta)
        start = _pos(tree.meta, self.filename)
        return MarchTest(tuple(items), pos=start, text=self.text, **meta)

    def test_block(self, tree):
        name = _unquote(str(tree.children[0]))
        if not name.strip():
            raise self.err("a test needs a name", tree.children[0])
        meta: dict = {"name": name, "name_pos": _pos(tree.children[0], self.filename)}
        seen = set()
        notation_tree = None
        for c in tree.children[1:]:
            if c.data == "notation":
                notation_tree = c
                continue
            if c.data in seen:
                raise self.err(f"field {c.data!r} given twice for test {name!r}", c.meta)
            seen.add(c.data)
            if c.data == "source":
                meta["source"] = _unquote(str(c.children[0]))
            elif c.data == "note":
                meta["note"] = _unquote(str(c.children[0]))
            elif c.data == "targets":
                meta["targets"] = tuple(str(t.children[0]) for t in c.children)
                meta["target_pos"] = tuple(_pos(t.children[0], self.filename) for t in c.children)
            elif c.data == "length":
                meta["length"] = re.sub(r"\s+", " ", str(c.children[0]).strip())
        t = self.notation(notation_tree)
        return MarchTest(
            t.items, pos=_pos(tree.meta, self.filename), text=t.text, **meta
        )


def parse_notation(text: str, filename: str = "<string>", name: str = "") -> MarchTest:
    """Parse one test in brace notation (Unicode or ASCII spelling)."""
    import lark

    _check_size(text, MAX_NOTATION_CHARS, "a notation", filename)
    try:
        tree = _parser().parse(text, start="notation")
    except lark.exceptions.UnexpectedInput as err:
        raise _convert_lark_error(err, text, filename) from None
    t = _Builder(text, filename).notation(tree)
    if name:
        t = MarchTest(t.items, name=name, pos=t.pos, text=t.text)
    return t


def parse_file_text(text: str, filename: str = "<string>") -> list[MarchTest]:
    """Parse a file of march tests: named test blocks, or one bare notation."""
    import lark

    _check_size(text, MAX_FILE_CHARS, "a file of tests", filename)
    try:
        tree = _parser().parse(text, start="file")
    except lark.exceptions.UnexpectedInput as err:
        raise _convert_lark_error(err, text, filename) from None
    b = _Builder(text, filename)
    tests: list[MarchTest] = []
    names: dict[str, SourcePos | None] = {}
    for c in tree.children:
        if c.data == "notation":
            stem = Path(filename).stem if filename and not filename.startswith("<") else ""
            tests.append(MarchTest(b.notation(c).items, name=stem, pos=_pos(c.meta, filename), text=text))
        else:
            t = b.test_block(c)
            key = t.name.casefold()
            if key in names:
                raise NotationError(f"test {t.name!r} is defined twice in this file (first at {names[key]})", t.pos, text)
            names[key] = t.pos
            tests.append(t)
    return tests


def parse_file(path: str | Path) -> list[MarchTest]:
    from ..errors import InputError

    p = Path(path)
    try:
        if p.is_file() and p.stat().st_size > 4 * MAX_FILE_CHARS:
            raise InputError(f"{p}: a file of tests is {p.stat().st_size:,} bytes; marchkit reads at most "
                             f"{MAX_FILE_CHARS:,} characters (split it into several files)")
        text = p.read_text(encoding="utf-8-sig")       # a leading byte-order mark is allowed
    except UnicodeDecodeError as e:
        raise InputError(f"{p}: not a UTF-8 text file ({e.reason} at byte {e.start})") from None
    except OSError as e:
        raise InputError(f"{p}: cannot read: {e.strerror}") from None
    return parse_file_text(text, str(p))
