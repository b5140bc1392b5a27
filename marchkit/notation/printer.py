"""Canonical printing of march tests, in the published (Unicode) or the ASCII spelling.

``parse_notation(format_notation(t)) == t`` for every test ``t``.
"""

from __future__ import annotations

from decimal import Decimal

from .ast import Delay, Element, Hammer, MarchTest, Op

UNICODE_ORDER = {"up": "⇑", "down": "⇓", "any": "⇕"}
ASCII_ORDER = {"up": "up", "down": "down", "any": "any"}


def format_amount(a: Decimal) -> str:
    if a == 0:  # also -0, which the grammar cannot read
        return "0"
    s = format(a, "f")  # exact; Decimal.normalize() would round to the context's 28 digits
    return s.rstrip("0").rstrip(".") if "." in s else s


def format_op(op: Op, ascii: bool = False) -> str:
    s = f"{op.kind}{op.value}"
    if op.repeat > 1:
        s += ("*" if ascii else "^") + str(op.repeat)
    return s


def format_item(item, ascii: bool = False) -> str:
    if isinstance(item, Element):
        order = (ASCII_ORDER if ascii else UNICODE_ORDER)[item.order]
        return order + "(" + ",".join(format_op(o, ascii) for o in item.ops) + ")"
    if isinstance(item, Hammer):
        order = (ASCII_ORDER if ascii else UNICODE_ORDER)[item.order]
        rows = ",".join(f"{k:+d}" if k else "0" for k in item.offsets)
        rep = (("*" if ascii else "^") + str(item.count)) if item.count > 1 else ""
        return f"{order}{' ' if ascii else ''}hammer({rows}){rep}"
    assert isinstance(item, Delay)
    return ("del" if ascii else "Del") + f"({format_amount(item.amount)}{item.unit})"


def format_notation(test: MarchTest, ascii: bool = False) -> str:
    """The test in brace notation: ``{⇕(w0); ⇑(r0,w1); ...}``."""
    return "{" + "; ".join(format_item(i, ascii) for i in test.items) + "}"


def _quote(s: str) -> str:
    s = s.replace("\\", "\\\\").replace('"', '\\"')
    return '"' + s.replace("\n", "\\n").replace("\t", "\\t").replace("\r", "\\r") + '"'


def format_test_block(test: MarchTest, ascii: bool = False) -> str:
    lines = [f"test {_quote(test.name or 'unnamed')}"]
    if test.source:
        lines.append(f"  source  {_quote(test.source)}")
    if test.targets:
        lines.append("  targets " + ", ".join(test.targets))
    if test.length:
        lines.append(f"  length  {test.length}")
    if test.note:
        lines.append(f"  note    {_quote(test.note)}")
    lines.append("  " + format_notation(test, ascii))
    return "\n".join(lines)


def format_file(tests, ascii: bool = False) -> str:
    """A file of named tests that ``parse_file_text`` reads back to the same tests."""
    return "\n\n".join(format_test_block(t, ascii) for t in tests) + "\n"
