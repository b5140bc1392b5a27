"""Address orders for ⇑ elements; ⇓ is always the exact reverse of ⇑.

Names: ``linear`` (0, 1, 2, …), ``gray`` (binary-reflected Gray code), ``complement``
(0, n−1, 1, n−2, …: each address followed by its complement), ``stride:I`` (steps of 2^I,
then the next residue: the "2^i increment" order), ``random:SEED`` (a maximal-length LFSR
sequence, seeded, reproducible).
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

from ..errors import ModelError

# Maximal-length Fibonacci LFSR taps (1-based bit positions, XOR feedback), widths 2..32.
# Values as commonly tabulated for LFSR counters (from memory); tests check each width's
# period is 2^k - 1, which is what makes a tap set maximal.
LFSR_TAPS = {
    2: (2, 1), 3: (3, 2), 4: (4, 3), 5: (5, 3), 6: (6, 5), 7: (7, 6), 8: (8, 6, 5, 4),
    9: (9, 5), 10: (10, 7), 11: (11, 9), 12: (12, 6, 4, 1), 13: (13, 4, 3, 1),
    14: (14, 5, 3, 1), 15: (15, 14), 16: (16, 15, 13, 4), 17: (17, 14), 18: (18, 11),
    19: (19, 6, 2, 1), 20: (20, 17), 21: (21, 19), 22: (22, 21), 23: (23, 18),
    24: (24, 23, 22, 17), 25: (25, 22), 26: (26, 6, 2, 1), 27: (27, 5, 2, 1),
    28: (28, 25), 29: (29, 27), 30: (30, 6, 4, 1), 31: (31, 28), 32: (32, 22, 2, 1),
}


def lfsr_sequence(width: int, seed: int) -> np.ndarray:
    """The 2^width − 1 nonzero states of the maximal LFSR of ``width`` bits from ``seed``."""
    taps = LFSR_TAPS[width]
    period = (1 << width) - 1
    state = seed % period + 1
    mask = period
    out = np.empty(period, dtype=np.int64)
    # advance in blocks with Python ints: fast enough for the widths a memory needs
    shifts = [t - 1 for t in taps]
    for i in range(period):
        out[i] = state
        fb = 0
        for s in shifts:
            fb ^= state >> s
        state = ((state << 1) | (fb & 1)) & mask
    return out


def parse_order(spec: str) -> tuple[str, int | None]:
    s = spec.strip().lower()
    if s in ("linear", "gray", "complement"):
        return s, None
    for kind in ("stride", "random"):
        if s.startswith(kind + ":") or s == kind:
            arg = s.partition(":")[2] or ("1" if kind == "stride" else "1")
            try:
                if len(arg) > 24:
                    raise ValueError
                v = int(arg, 0)
            except ValueError:
                raise ModelError(f"address order {spec!r}: {arg!r} is not a whole number") from None
            if v < 0:
                raise ModelError(f"address order {spec!r}: the number must not be negative")
            if kind == "stride" and v > 26:
                raise ModelError(f"address order {spec!r}: stride 2^{v} is larger than any memory "
                                 "marchkit models (I at most 26)")
            if kind == "random" and v >= 1 << 64:
                raise ModelError(f"address order {spec!r}: the seed must be below 2^64")
            return kind, v
    raise ModelError(
        f"unknown address order {spec!r}; choose linear, gray, complement, stride:I or random:SEED"
    )


def address_order(mem, check_only: bool = False) -> np.ndarray:
    """The ⇑ sequence of logical addresses for ``mem`` (a permutation of 0..words−1)."""
    kind, arg = parse_order(mem.order)
    n = mem.words
    if kind == "stride":
        if (1 << arg) >= n:
            raise ModelError(f"stride 2^{arg} is not smaller than the {n} words")
    if check_only:
        return np.empty(0, np.int64)
    return _order(kind, arg, n).copy()


@lru_cache(maxsize=8)
def _order(kind: str, arg, n: int) -> np.ndarray:
    if kind == "linear":
        return np.arange(n, dtype=np.int64)
    if kind == "gray":
        k = max(1, (n - 1).bit_length())
        i = np.arange(1 << k, dtype=np.int64)
        g = i ^ (i >> 1)
        return g[g < n]
    if kind == "complement":
        lo = np.arange(n // 2, dtype=np.int64)
        hi = n - 1 - lo
        out = np.empty(n, dtype=np.int64)
        out[0:2 * (n // 2):2] = lo
        out[1:2 * (n // 2):2] = hi
        if n % 2:
            out[-1] = n // 2
        return out
    if kind == "stride":
        s = 1 << arg
        a = np.arange(n, dtype=np.int64)
        return a[np.lexsort((a, a % s))]
    if kind == "random":
        k = max(2, n.bit_length())   # 2^k - 1 >= n
        seq = lfsr_sequence(k, arg) - 1
        return seq[seq < n]
    raise AssertionError(kind)


def ranks(order: np.ndarray) -> np.ndarray:
    """rank[address] = position of the address in the ⇑ sequence."""
    r = np.empty_like(order)
    r[order] = np.arange(order.size, dtype=order.dtype)
    return r
