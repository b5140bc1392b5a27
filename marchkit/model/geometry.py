"""Array geometry: words × bits, rows × columns with a column mux, address scrambling,
physical placement of cells and their neighbours.

Placement (documented in DEVELOPERS.md): logical address ``a`` is first scrambled to a
physical word address ``p`` (address-bit permutation, then XOR with a mask).  The physical
row is ``p // mux`` and the word's slot in the row is ``p % mux``.  Bits are interleaved, as
behind a column multiplexer: bit ``b`` of the word sits in physical column ``b * mux + slot``.
So with ``mux = 1`` the bits of one word are side by side; with ``mux = 4`` the same bit of
four consecutive words is side by side.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from fractions import Fraction

import numpy as np

from ..errors import ModelError

MAX_WORDS = 1 << 26
MAX_BITS = 1024
MAX_OP_CYCLES = 1024     # clock cycles one read or write may take
MAX_READ_LATENCY = 64    # clock cycles from a read to its data (pipelined memories)


def _is_pow2(n: int) -> bool:
    return n > 0 and n & (n - 1) == 0


@dataclass(frozen=True)
class Memory:
    """A memory to grade a test on.  All fields are plain values; see :func:`make_memory`."""

    words: int
    bits: int = 1
    mux: int = 1
    scramble_bits: tuple[int, ...] | None = None   # physical bit i takes logical bit scramble_bits[i]
    scramble_xor: int = 0
    order: str = "linear"
    backgrounds: tuple[str, ...] = ("solid",)
    clock_hz: Fraction = Fraction(100_000_000)
    read_cycles: int = 1
    write_cycles: int = 1
    neighbours: int = 8            # 4: N/S/E/W; 8: and the diagonals
    name: str = ""
    # pipelined reads: the data of a read is valid this many cycles after the read's last
    # cycle, while the next operations are issued (model/timing.py: the final drain)
    read_latency: int = 0
    # ---- DRAM (see model/dram.py); refresh 0 = no refresh, an SRAM ----------------------
    refresh: Fraction = Fraction(0)          # refresh period, seconds
    refresh_scheme: str = "distributed"      # distributed | burst
    refresh_during_delays: bool = False      # a delay of the test normally suspends refresh
    page: str = "closed"                     # closed | open

    @property
    def dram(self) -> bool:
        return bool(self.refresh)

    # ---- derived geometry -------------------------------------------------------------
    @property
    def rows(self) -> int:
        return self.words // self.mux

    @property
    def columns(self) -> int:
        return self.bits * self.mux

    @property
    def cells(self) -> int:
        return self.words * self.bits

    @property
    def address_bits(self) -> int:
        return max(1, (self.words - 1).bit_length())

    @property
    def word_oriented(self) -> bool:
        return self.bits > 1

    def validate(self) -> "Memory":
        if not isinstance(self.words, int) or self.words < 2:
            raise ModelError(f"a memory needs at least 2 words (got {self.words})")
        if self.words > MAX_WORDS:
            raise ModelError(f"{self.words} words is more than marchkit models ({MAX_WORDS})")
        if not 1 <= self.bits <= MAX_BITS:
            raise ModelError(f"bits per word must be 1 to {MAX_BITS} (got {self.bits})")
        if self.mux < 1 or self.words % self.mux:
            raise ModelError(
                f"column mux {self.mux} does not divide {self.words} words into whole rows"
            )
        if self.scramble_bits is not None:
            k = self.address_bits
            if not _is_pow2(self.words):
                raise ModelError("address-bit scrambling needs a power-of-two number of words")
            if sorted(self.scramble_bits) != list(range(k)):
                raise ModelError(
                    f"scramble bit order must be a permutation of 0..{k - 1} "
                    f"({k} address bits for {self.words} words), got {list(self.scramble_bits)}"
                )
        if self.scramble_xor:
            if not _is_pow2(self.words):
                raise ModelError("XOR scrambling needs a power-of-two number of words")
            if not 0 <= self.scramble_xor < self.words:
                raise ModelError(f"XOR mask {self.scramble_xor:#x} has bits beyond the {self.address_bits} address bits")
        if self.clock_hz <= 0:
            raise ModelError("the clock frequency must be positive")
        if self.read_cycles < 1 or self.write_cycles < 1:
            raise ModelError("reads and writes take at least one clock cycle")
        if self.read_cycles > MAX_OP_CYCLES or self.write_cycles > MAX_OP_CYCLES:
            raise ModelError(f"reads and writes take at most {MAX_OP_CYCLES} clock cycles "
                             f"(got read {self.read_cycles}, write {self.write_cycles})")
        if (not isinstance(self.read_latency, int) or isinstance(self.read_latency, bool)
                or not 0 <= self.read_latency <= MAX_READ_LATENCY):
            raise ModelError(f"read latency must be 0 to {MAX_READ_LATENCY} clock cycles (got {self.read_latency})")
        if self.neighbours not in (4, 8):
            raise ModelError("neighbours must be 4 (N/S/E/W) or 8 (with diagonals)")
        # orders and backgrounds check themselves
        from .orders import address_order
        from .backgrounds import background_names

        address_order(self, check_only=True)
        background_names(self)
        from .dram import check_dram

        check_dram(self)
        return self

    # ---- address map ------------------------------------------------------------------
    def physical_word(self, logical: np.ndarray | int):
        """Physical word address of logical address(es)."""
        a = np.asarray(logical, dtype=np.int64)
        if self.scramble_bits is not None:
            p = np.zeros_like(a)
            for i, src in enumerate(self.scramble_bits):
                p |= ((a >> src) & 1) << i
            a = p
        if self.scramble_xor:
            a = a ^ self.scramble_xor
        return a

    def logical_word(self, physical: np.ndarray | int):
        """Inverse of :meth:`physical_word`."""
        p = np.asarray(physical, dtype=np.int64)
        if self.scramble_xor:
            p = p ^ self.scramble_xor
        if self.scramble_bits is not None:
            a = np.zeros_like(p)
            for i, src in enumerate(self.scramble_bits):
                a |= ((p >> i) & 1) << src
            p = a
        return p

    def place(self, word, bit):
        """(row, column) of cell(s) (logical word, bit)."""
        p = self.physical_word(word)
        row = p // self.mux
        col = np.asarray(bit, dtype=np.int64) * self.mux + p % self.mux
        return row, col

    def cell_at(self, row, col):
        """Logical (word, bit) of physical cell(s) (row, column)."""
        row = np.asarray(row, dtype=np.int64)
        col = np.asarray(col, dtype=np.int64)
        bit = col // self.mux
        p = row * self.mux + col % self.mux
        return self.logical_word(p), bit

    def describe(self) -> dict:
        return {
            "name": self.name,
            "words": self.words,
            "bits": self.bits,
            "mux": self.mux,
            "rows": self.rows,
            "columns": self.columns,
            "order": self.order,
            "backgrounds": list(self.backgrounds),
            "scramble_bits": list(self.scramble_bits) if self.scramble_bits is not None else None,
            "scramble_xor": self.scramble_xor,
            "clock_hz": float(self.clock_hz),
            "read_cycles": self.read_cycles,
            "write_cycles": self.write_cycles,
            "neighbours": self.neighbours,
            **({"read_latency": self.read_latency} if self.read_latency else {}),
            **({"refresh_s": float(self.refresh), "refresh_scheme": self.refresh_scheme,
                "refresh_during_delays": self.refresh_during_delays, "page": self.page}
               if self.dram else {}),
        }


DIRECTIONS_4 = ((-1, 0), (1, 0), (0, -1), (0, 1))
DIRECTIONS_8 = DIRECTIONS_4 + ((-1, -1), (-1, 1), (1, -1), (1, 1))


def neighbour_edges(mem: Memory) -> tuple[np.ndarray, np.ndarray]:
    """Ordered pairs (cell a, cell b) of physical neighbours, as flat cell indices
    ``word * bits + bit``; each unordered neighbour pair appears in both directions."""
    rows, cols = mem.rows, mem.columns
    r = np.repeat(np.arange(rows, dtype=np.int64), cols)
    c = np.tile(np.arange(cols, dtype=np.int64), rows)
    w, b = mem.cell_at(r, c)
    idx = np.empty((rows, cols), dtype=np.int64)
    idx[r, c] = w * mem.bits + b
    src, dst = [], []
    dirs = DIRECTIONS_8 if mem.neighbours == 8 else DIRECTIONS_4
    for dr, dc in dirs:
        r0, r1 = max(0, -dr), rows - max(0, dr)
        c0, c1 = max(0, -dc), cols - max(0, dc)
        if r1 <= r0 or c1 <= c0:
            continue
        src.append(idx[r0:r1, c0:c1].ravel())
        dst.append(idx[r0 + dr:r1 + dr, c0 + dc:c1 + dc].ravel())
    if not src:
        return np.empty(0, np.int64), np.empty(0, np.int64)
    return np.concatenate(src), np.concatenate(dst)


def neighbour_graph(mem: Memory):
    """The physical neighbour graph of the cells (networkx), nodes ``(word, bit)``, each
    edge with its ``direction`` (``N S E W NE NW SE SW``) from the first to the second node.

    Meant for inspection and for small arrays; the engine uses :func:`neighbour_edges`.
    """
    import networkx as nx

    names = {(-1, 0): "N", (1, 0): "S", (0, -1): "W", (0, 1): "E",
             (-1, -1): "NW", (-1, 1): "NE", (1, -1): "SW", (1, 1): "SE"}
    g = nx.Graph()
    for word in range(mem.words):
        for bit in range(mem.bits):
            row, col = mem.place(word, bit)
            g.add_node((word, bit), row=int(row), column=int(col))
    dirs = DIRECTIONS_8 if mem.neighbours == 8 else DIRECTIONS_4
    for word in range(mem.words):
        for bit in range(mem.bits):
            row, col = (int(x) for x in mem.place(word, bit))
            for dr, dc in dirs:
                rr, cc = row + dr, col + dc
                if 0 <= rr < mem.rows and 0 <= cc < mem.columns:
                    w2, b2 = (int(x) for x in mem.cell_at(rr, cc))
                    if not g.has_edge((word, bit), (w2, b2)):
                        g.add_edge((word, bit), (w2, b2), direction=names[(dr, dc)])
    return g


def neighbour_directions(mem: Memory) -> tuple[tuple[int, int], ...]:
    """(row step, column step) of the physical neighbours: N/S/E/W, and the diagonals with
    ``neighbours = 8``."""
    return DIRECTIONS_8 if mem.neighbours == 8 else DIRECTIONS_4


def neighbour_pair_count(mem: Memory) -> int:
    """Number of ordered neighbour cell pairs (what :func:`neighbour_edges` lists), in closed
    form: for each direction, the cells whose neighbour that way is inside the array."""
    rows, cols = mem.rows, mem.columns
    return sum(max(0, rows - abs(dr)) * max(0, cols - abs(dc)) for dr, dc in neighbour_directions(mem))


def same_word_neighbour_pair_count(mem: Memory) -> int:
    """Ordered neighbour cell pairs inside one word: with ``mux = 1`` the bits of a word sit
    side by side (E/W neighbours, and diagonal ones never share a row); otherwise none."""
    if mem.mux != 1:
        return 0
    return 2 * mem.rows * max(0, mem.columns - 1)


def neighbour_word_offsets(mem: Memory) -> tuple[tuple[int, int], ...]:
    """(row step, slot step) from a word to the words it has a neighbour cell in.

    A word sits in row ``p // mux`` at slot ``p % mux``, its bit ``b`` in column
    ``b·mux + slot``; cells of two words are neighbours when their rows differ by ``dr`` and
    their columns by a ``dc`` allowed for ``dr``.  Two words at (dr, ds) have such cells iff
    ``db·mux + ds = dc`` for some bit difference ``|db| < bits`` — so only ds ∈ {0, ±1,
    ±(mux−1)} can occur.  Distinct offsets reach distinct words (|ds| < mux), so the word
    pairs ``(p, p + dr·mux + ds)`` over these offsets (row and slot in range) are exactly the
    distinct word pairs with a neighbouring cell pair, each once."""
    mux, bits = mem.mux, mem.bits
    dcs: dict[int, set] = {}
    for dr, dc in neighbour_directions(mem):
        dcs.setdefault(dr, set()).add(dc)
    out = []
    for dr in sorted(dcs):
        for ds in sorted({0, 1, -1, mux - 1, 1 - mux}):
            if (dr, ds) == (0, 0) or abs(ds) >= mux:
                continue
            if any((dc - ds) % mux == 0 and abs((dc - ds) // mux) <= bits - 1 for dc in dcs[dr]):
                out.append((dr, ds))
    return tuple(out)


def neighbour_word_pair_count(mem: Memory) -> int:
    """Number of ordered pairs of distinct words with a neighbouring cell pair (closed form
    over :func:`neighbour_word_offsets`)."""
    return sum(max(0, mem.rows - abs(dr)) * (mem.mux - abs(ds)) for dr, ds in neighbour_word_offsets(mem))


def neighbour_word_pairs_at(mem: Memory, dr: int, ds: int, row0: int, row1: int):
    """Physical word pairs ``(p, q)`` at offset (dr, ds) with ``p`` in rows [row0, row1),
    both inside the array: two (m,) int64 arrays."""
    r0, r1 = max(row0, -dr), min(row1, mem.rows - dr)
    s0, s1 = max(0, -ds), mem.mux - max(0, ds)
    if r1 <= r0 or s1 <= s0:
        return np.empty(0, np.int64), np.empty(0, np.int64)
    r = np.arange(r0, r1, dtype=np.int64)[:, None]
    s = np.arange(s0, s1, dtype=np.int64)[None, :]
    p = (r * mem.mux + s).ravel()
    return p, p + dr * mem.mux + ds
