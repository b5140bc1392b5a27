"""Building text rows in blocks with numpy: a row is a template of fixed bytes with fields
filled in from lookup tables, for a whole block of rows at once.

This is what makes export run near the speed of the disk: no Python code runs per cycle.
Fields of varying width (a decimal number that grows) are written zero-padded and the
leading zeros are dropped afterwards with a mask (:func:`strip_mask`).
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

DIGITS = b"0123456789abcdef"


def table(strings) -> np.ndarray:
    """(len, width) uint8 array of equally long byte strings."""
    strings = [s.encode("ascii") if isinstance(s, str) else s for s in strings]
    if not strings:
        return np.zeros((0, 0), np.uint8)
    w = len(strings[0])
    assert all(len(s) == w for s in strings), "table rows must have one width"
    if w == 0:
        return np.zeros((len(strings), 0), np.uint8)
    return np.frombuffer(b"".join(strings), np.uint8).reshape(len(strings), w).copy()


def _digit_table(base: int, width: int, chars: bytes) -> np.ndarray:
    """(base**width, width) uint8: every number below base**width in ``width`` digits."""
    i = np.arange(base ** width, dtype=np.int64)
    powers = base ** np.arange(width - 1, -1, -1, dtype=np.int64)
    digits = (i[:, None] // powers[None, :]) % base
    return np.frombuffer(chars, np.uint8)[digits].astype(np.uint8)


@lru_cache(maxsize=None)
def dec4() -> np.ndarray:
    return _digit_table(10, 4, DIGITS)


@lru_cache(maxsize=None)
def hex4() -> np.ndarray:
    return _digit_table(16, 4, DIGITS)


@lru_cache(maxsize=None)
def bin8(chars: bytes = b"01") -> np.ndarray:
    return _digit_table(2, 8, chars)


@lru_cache(maxsize=None)
def _narrow(kind: str, chars: bytes, width: int) -> np.ndarray:
    full = {"dec": dec4, "hex": hex4}[kind]() if kind != "bin" else bin8(chars)
    return np.ascontiguousarray(full[:, full.shape[1] - width:])


class Row:
    """A row template: literal text and named fields (filled per block)."""

    def __init__(self):
        self._t = bytearray()
        self.off: dict[str, int] = {}
        self.width: dict[str, int] = {}
        self._buf: np.ndarray | None = None

    def lit(self, s: str | bytes) -> "Row":
        self._t += s.encode("ascii") if isinstance(s, str) else s
        return self

    def field(self, name: str, width: int, fill: bytes = b"0") -> "Row":
        self.off[name] = len(self._t)
        self.width[name] = width
        self._t += fill * width
        return self

    @property
    def size(self) -> int:
        return len(self._t)

    def template(self) -> np.ndarray:
        return np.frombuffer(bytes(self._t), np.uint8)

    def buffer(self, rows: int) -> np.ndarray:
        """``rows`` rows holding the template.  The same memory is handed out again on the
        next call (the literal bytes stay; every field must be filled each time)."""
        if self._buf is None or self._buf.shape[0] < rows:
            self._buf = np.empty((max(rows, 1024), self.size), np.uint8)
            self._buf[:] = self.template()
        return self._buf[:rows]

    def put(self, buf, name, tab, idx) -> None:
        put_rows(buf, self.off[name], tab, idx)

    def put_counter(self, buf, name, first: int) -> None:
        put_counter(buf, self.off[name], self.width[name], first)

    def put_dec(self, buf, name, values) -> None:
        put_digits(buf, self.off[name], self.width[name], values, "dec")

    def put_hex(self, buf, name, values) -> None:
        put_digits(buf, self.off[name], self.width[name], values, "hex")

    def put_bin(self, buf, name, values, chars: bytes = b"01") -> None:
        put_digits(buf, self.off[name], self.width[name], values, "bin", chars)


def put_rows(buf: np.ndarray, off: int, tab: np.ndarray, idx) -> None:
    """buf[r, off:off+w] = tab[idx[r]] for every row r (tab: (entries, w) uint8)."""
    w = tab.shape[1]
    if w == 0:
        return
    tv = np.ascontiguousarray(tab).view(f"V{w}").reshape(-1)
    dst = buf[:, off:off + w].view(f"V{w}")[:, 0]
    if np.isscalar(idx) or np.ndim(idx) == 0:
        dst[...] = tv[int(idx)]
    else:
        dst[...] = np.take(tv, idx)


def put_counter(buf: np.ndarray, off: int, width: int, first: int) -> None:
    """Write first, first + 1, ... (one per row) as zero-padded decimals of ``width`` digits,
    without index arrays: the low four digits come straight from the table, the digits above
    them are the same over runs of 10 000 rows."""
    n = buf.shape[0]
    g = min(4, width)
    low = _narrow("dec", b"01", g).view(f"V{g}").reshape(-1)
    i = 0
    while i < n:
        c = first + i
        lo = c % 10000
        m = min(n - i, 10000 - lo)
        buf[i:i + m, off + width - g:off + width].view(f"V{g}")[:, 0] = low[lo:lo + m]
        if width > 4:
            hi = str(c // 10000).rjust(width - 4, "0")[-(width - 4):]
            buf[i:i + m, off:off + width - 4] = np.frombuffer(hi.encode(), np.uint8)
        i += m


def put_digits(buf, off, width, values, kind, chars=b"01") -> None:
    """Write ``values`` (non-negative ints, fitting ``width`` digits) right-aligned, padded with
    zeros, in base 10 (``dec``), 16 (``hex``) or 2 (``bin``, with the two ``chars``)."""
    group = 8 if kind == "bin" else 4          # characters per table entry
    shift = 8 if kind == "bin" else 16         # bits per table entry (hex, bin)
    v = np.asarray(values, dtype=np.int64)
    pos = off + width
    left = width
    while left > 0:
        g = min(group, left)
        if left > group:
            if kind == "dec":
                q = v // 10000
                r = v - q * 10000
            else:
                q = v >> shift
                r = v & ((1 << shift) - 1)
        else:
            r, q = v, None
        tab = _narrow(kind, chars, g)
        put_rows(buf, pos - g, tab, r)
        pos -= g
        left -= g
        v = q


POW10 = np.array([10 ** i for i in range(1, 19)], dtype=np.int64)


def dec_widths(values) -> np.ndarray:
    """Number of decimal digits of each value (0 has one digit)."""
    return np.searchsorted(POW10, np.asarray(values, dtype=np.int64), side="right") + 1


def strip_mask(keep: np.ndarray, off: int, width: int, values) -> None:
    """In ``keep`` (rows × bytes, bool), drop the leading zeros of a zero-padded decimal field."""
    nd = dec_widths(values)
    cols = np.arange(width)
    keep[:, off:off + width] = cols[None, :] >= (width - nd)[:, None]


def hex_width(bits: int) -> int:
    return max(1, (bits + 3) // 4)


def hex_text(values, bits: int) -> list[bytes]:
    w = hex_width(bits)
    return [format(v, f"0{w}x").encode() for v in values]


def bin_text(values, bits: int, chars: bytes = b"01") -> list[bytes]:
    tr = bytes.maketrans(b"01", chars)
    return [format(v, f"0{bits}b").encode().translate(tr) for v in values]


# ---- filling fields of a block of cycles ------------------------------------------------------

def _by_visit(buf, b, off, w):
    """The (visits, cycles per visit) void view of a field of a block made of whole visits."""
    V, P = b.visits, b.seg.per_address
    return buf.reshape(V, P, buf.shape[1])[:, :, off:off + w].view(f"V{w}")[..., 0]


def put_slotwise(row: Row, buf, name: str, b, tab: np.ndarray) -> None:
    """Fill field ``name`` from a table with one entry per cycle of the address visit."""
    off, w = row.off[name], tab.shape[1]
    if w == 0:
        return
    if b.visits is not None:
        _by_visit(buf, b, off, w)[...] = np.ascontiguousarray(tab).view(f"V{w}").reshape(-1)[None, :]
    else:
        put_rows(buf, off, tab, 0 if b.slot is None else b.slot)


def put_address(row: Row, buf, name: str, b, kind: str, chars: bytes = b"01") -> None:
    """Fill field ``name`` with the block's addresses (written once per visit when it can)."""
    off, w = row.off[name], row.width[name]
    if b.visits is not None:
        tmp = np.empty((b.visits, w), np.uint8)
        put_digits(tmp, 0, w, b.vaddr, kind, chars)
        _by_visit(buf, b, off, w)[...] = tmp.view(f"V{w}")
    else:
        put_digits(buf, off, w, b.address, kind, chars)


def put_data(row: Row, buf, name: str, b, tab: np.ndarray) -> None:
    """Fill field ``name`` from a table of 6 entries per background class (w0 write, w0 read,
    w0 compared read, then the same for w1): entry 6·class + slot_data[slot]."""
    off, w = row.off[name], tab.shape[1]
    if b.visits is not None:
        tv = np.ascontiguousarray(tab).view(f"V{w}").reshape(-1)
        dst = _by_visit(buf, b, off, w)
        cls = b.vcls
        for s, k in enumerate(b.seg.slot_data):
            dst[:, s] = np.take(tv[int(k)::6], cls)
    else:
        put_rows(buf, off, tab, b.data_index())
