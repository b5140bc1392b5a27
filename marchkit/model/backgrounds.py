"""Data backgrounds: what ``w0`` writes to each cell (``w1`` writes the complement).

Names: ``solid`` (all 0), ``checkerboard`` ((row + column) mod 2 of the cell's physical
place), ``rows`` (row stripe: row mod 2), ``columns`` (column stripe: column mod 2),
``word`` (the ⌈log₂B⌉+1 intra-word backgrounds of van de Goor & Tlili, IEEE Trans.
Computers 52(10), 2003: for B = 8 the words 0x00, 0x55, 0x33, 0x0F), and a hex word such as
``0xA5`` (the same data word at every address).  A memory lists one or more; the test is run
once per background, one after the other.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import ModelError

MAX_RUNS = 64    # background runs of one test (each one is a full run of the test)
NAMES = ("solid", "checkerboard", "rows", "columns", "word")


def intra_word_words(bits: int) -> list[int]:
    """The intra-word background set as data words (bit i of the word is bit i of the int)."""
    out = [0]
    for j in range(math.ceil(math.log2(bits)) if bits > 1 else 0):
        w = 0
        for b in range(bits):
            if not (b >> j) & 1:
                w |= 1 << b
        out.append(w)
    return out


def background_names(mem) -> list[str]:
    """The backgrounds of ``mem``, with ``word`` expanded into its members."""
    out: list[str] = []
    for name in mem.backgrounds:
        s = name.strip().lower()
        if s == "word":
            out.extend(f"{w:#0{2 + (mem.bits + 3) // 4}x}" for w in intra_word_words(mem.bits))
        elif s in NAMES:
            out.append(s)
        elif s.startswith("0x"):
            try:
                v = int(s, 16)
            except ValueError:
                raise ModelError(f"background {name!r} is not a hex word") from None
            if v >> mem.bits:
                raise ModelError(f"background {name!r} has more bits than the {mem.bits}-bit word")
            out.append(s)
        else:
            raise ModelError(
                f"unknown background {name!r}; choose solid, checkerboard, rows, columns, word or a hex word like 0x55"
            )
    if not out:
        raise ModelError("at least one data background is needed")
    if len(out) > MAX_RUNS:
        raise ModelError(f"{len(out)} data backgrounds is more than marchkit runs in one grade "
                         f"({MAX_RUNS}); list fewer")
    return out


def background_array(mem, name: str) -> np.ndarray:
    """bg[word, bit] ∈ {0, 1}: the value ``w0`` writes to each cell under ``name``."""
    words = np.arange(mem.words, dtype=np.int64)
    bits = np.arange(mem.bits, dtype=np.int64)
    if name == "solid":
        return np.zeros((mem.words, mem.bits), dtype=np.uint8)
    if name.startswith("0x"):
        v = int(name, 16)           # may be wider than 64 bits: shift Python ints, not int64
        row = np.array([(v >> b) & 1 for b in range(mem.bits)], dtype=np.uint8)
        return np.broadcast_to(row, (mem.words, mem.bits)).copy()
    # parities only: row = p // mux, column = b·mux + p % mux (see geometry), so
    # (row + column) % 2 = (row + slot) % 2 ⊕ (b·mux) % 2 — per word and per bit, not per cell
    p = mem.physical_word(words)
    row_par = ((p // mem.mux) & 1).astype(np.uint8)[:, None]          # (n, 1)
    slot_par = ((p % mem.mux) & 1).astype(np.uint8)[:, None]          # (n, 1)
    bit_par = ((bits * mem.mux) & 1).astype(np.uint8)[None, :]        # (1, B)
    if name == "checkerboard":
        return row_par ^ slot_par ^ bit_par
    if name == "rows":
        return np.broadcast_to(row_par, (mem.words, mem.bits)).copy()
    if name == "columns":
        return slot_par ^ bit_par
    raise ModelError(f"unknown background {name!r}")


def background_stack(mem) -> np.ndarray:
    """bg[run, word, bit] for every background run of ``mem``."""
    return np.stack([background_array(mem, n) for n in background_names(mem)])
