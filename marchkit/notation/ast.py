"""Frozen dataclasses for march tests.

Positions (``pos``) are kept for messages but take no part in equality, so a test parsed
from its own printed form compares equal to the original.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from decimal import Decimal
from fractions import Fraction
from typing import Iterator, Union

from ..errors import SourcePos
from ..units import SECONDS_PER_UNIT

ORDERS = ("up", "down", "any")
UNITS = SECONDS_PER_UNIT
MAX_REPEAT = 1_000_000_000     # hammer-length repeats; graded and exported in closed form


@dataclass(frozen=True)
class Op:
    """One operation applied to each cell (word) an element visits.

    ``kind`` is ``"r"`` (read, expecting ``value``) or ``"w"`` (write ``value``).  In a
    word-oriented memory ``0`` means the data background and ``1`` its complement.
    ``repeat`` > 1 applies the same operation that many times in a row (hammering).
    """

    kind: str
    value: int
    repeat: int = 1
    pos: SourcePos | None = field(default=None, compare=False, repr=False)

    def __post_init__(self):
        if self.kind not in ("r", "w") or self.value not in (0, 1):
            raise ValueError(f"bad operation {self.kind}{self.value}")
        if not 1 <= self.repeat <= MAX_REPEAT:
            raise ValueError(f"repeat count {self.repeat} outside 1..{MAX_REPEAT}")

    @property
    def is_read(self) -> bool:
        return self.kind == "r"

    @property
    def text(self) -> str:
        return f"{self.kind}{self.value}"


@dataclass(frozen=True)
class Element:
    """A march element: an address order and the operations applied to each address."""

    order: str
    ops: tuple[Op, ...]
    pos: SourcePos | None = field(default=None, compare=False, repr=False)

    def __post_init__(self):
        if self.order not in ORDERS:
            raise ValueError(f"bad order {self.order!r}")
        if not self.ops:
            raise ValueError("an element needs at least one operation")

    @property
    def ops_per_cell(self) -> int:
        return sum(op.repeat for op in self.ops)

    def expanded(self) -> tuple[Op, ...]:
        """The operations with repeats spelled out (positions kept)."""
        out: list[Op] = []
        for op in self.ops:
            out.extend([op] * op.repeat)
        return tuple(out)


@dataclass(frozen=True)
class Delay:
    """A retention pause: no operation for ``amount`` ``unit``."""

    amount: Decimal
    unit: str = "ms"
    pos: SourcePos | None = field(default=None, compare=False, repr=False)

    def __post_init__(self):
        if self.unit not in UNITS:
            raise ValueError(f"bad time unit {self.unit!r}")
        if not isinstance(self.amount, Decimal):
            object.__setattr__(self, "amount", Decimal(str(self.amount)))
        if not self.amount.is_finite() or self.amount < 0:
            raise ValueError(f"a delay must be a finite amount >= 0, not {self.amount}")

    @property
    def seconds(self) -> Fraction:
        return Fraction(self.amount) * UNITS[self.unit]


MAX_HAMMER_ROWS = 16          # rows one hammer item cycles through
MAX_ROW_OFFSET = 1 << 20


@dataclass(frozen=True)
class Hammer:
    """A hammer item: ``⇑hammer(-1,+1)^N`` — for each physical row of the array (⇑ from row 0,
    ⇓ from the last row), ``count`` rounds, each round activating, one after the other, the
    rows at ``offsets`` from that row (the rows wrap around at the edges of the array).

    An activation opens a row and closes it again (one row cycle), with no column access:
    it reads and writes no cell, so it restores the row it opens (a DRAM refresh does the
    same) and disturbs the rows next to it.  With an open page, an activation of the row that
    is already open does nothing.  Refresh runs on during a hammer item (it is not a pause).
    """

    order: str
    offsets: tuple[int, ...]
    count: int = 1
    pos: SourcePos | None = field(default=None, compare=False, repr=False)

    def __post_init__(self):
        if self.order not in ("up", "down"):
            raise ValueError("a hammer item runs ⇑ or ⇓")
        if not 1 <= len(self.offsets) <= MAX_HAMMER_ROWS:
            raise ValueError(f"a hammer item cycles through 1 to {MAX_HAMMER_ROWS} rows")
        if any(abs(k) > MAX_ROW_OFFSET for k in self.offsets):
            raise ValueError(f"a row offset is at most {MAX_ROW_OFFSET:,} rows")
        if not 1 <= self.count <= MAX_REPEAT:
            raise ValueError(f"repeat count {self.count} outside 1..{MAX_REPEAT}")

    @property
    def activations_per_row(self) -> int:
        return len(self.offsets) * self.count


Item = Union[Element, Delay, Hammer]


@dataclass(frozen=True)
class MarchTest:
    """A march test: its items in order plus what the library knows about it."""

    items: tuple[Item, ...]
    name: str = ""
    source: str = ""
    targets: tuple[str, ...] = ()
    length: str = ""
    note: str = ""
    pos: SourcePos | None = field(default=None, compare=False, repr=False)
    text: str | None = field(default=None, compare=False, repr=False)  # the whole source parsed
    # where the name and each target were written (files only), for positioned warnings
    name_pos: SourcePos | None = field(default=None, compare=False, repr=False)
    target_pos: tuple[SourcePos | None, ...] = field(default=(), compare=False, repr=False)

    @property
    def elements(self) -> tuple[Element, ...]:
        return tuple(i for i in self.items if isinstance(i, Element))

    @property
    def delays(self) -> tuple[Delay, ...]:
        return tuple(i for i in self.items if isinstance(i, Delay))

    @property
    def hammers(self) -> tuple[Hammer, ...]:
        return tuple(i for i in self.items if isinstance(i, Hammer))

    @property
    def ops_per_cell(self) -> int:
        """Operations applied to each address: the k of the test's length k·n (hammer
        activations are not operations on the address; see :attr:`length_text`)."""
        return sum(e.ops_per_cell for e in self.elements)

    @property
    def delay_seconds(self) -> Fraction:
        return sum((d.seconds for d in self.delays), Fraction(0))

    @property
    def length_text(self) -> str:
        """The length as usually written, e.g. ``10n`` or ``12n + 2 Del``."""
        k = self.ops_per_cell
        d = len(self.delays)
        a = sum(h.activations_per_row for h in self.hammers)
        return f"{k}n" + (f" + {a} act/row" if a else "") + (f" + {d} Del" if d else "")

    def flat_ops(self) -> Iterator[tuple[int, int, Op]]:
        """(element index among elements, op index with repeats expanded, op)."""
        for ei, el in enumerate(self.elements):
            for oi, op in enumerate(el.expanded()):
                yield ei, oi, op

    @property
    def display_name(self) -> str:
        return self.name or "(unnamed test)"
