"""DRAM facts of a memory: periodic refresh, its suspension during pauses, page policy.

A memory is a DRAM when its refresh period is not 0.  Rows are the physical rows of the
geometry (``physical word // mux``).  Everything is counted in clock cycles from the start of
the test (cycle 0), on the clock of the memory.

Refresh (``refresh``: the period P, rounded up to whole cycles):

* ``distributed`` — row ``r`` is refreshed at cycles ``⌊r·P/rows⌋ + k·P`` (k = 0, 1, …):
  one row every P/rows, every row once per period;
* ``burst`` — all rows back to back at the start of every period: row ``r`` at
  ``r·row_cycle + k·P``.

A refresh takes no cycle of the test (the controller hides it between operations); it
restores the row it refreshes and, one bank holding one row at a time, closes the open row:
with an open page the next access activates its row again (for read disturb a refresh resets
the refreshed row's own counts and does not count as an activation of a neighbour).  With
``refresh_during_delays`` off
(the default, as in a retention test) a refresh that falls inside a delay of the test does
not happen; slots outside delays are unchanged.

Row cycle: ``max(read_cycles, write_cycles)`` cycles, the time of one row activation; the
period must leave room to refresh every row (``P ≥ rows × row cycle``).

Page policy (``page``): ``closed`` — every access activates its row (precharge after each
access); ``open`` — the row stays open after an access, and an access activates its row only
when another row (or none: at the start, after a refresh) is open.  One bank: the whole array.
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np

from ..errors import ModelError

SCHEMES = ("distributed", "burst")
PAGES = ("closed", "open")

# The DRAM keys of a memory file (and flags of the same names): key → accepted TOML types.
DRAM_KEYS = {
    "refresh": (str, int, float),          # a duration such as "64ms"; 0 = no refresh (SRAM)
    "refresh_scheme": str,                 # distributed | burst
    "refresh_during_delays": (bool, str),  # yes | no (or true / false)
    "page": str,                           # closed | open
}


def parse_yes_no(value, what: str) -> bool:
    if isinstance(value, bool):
        return value
    s = str(value).strip().lower()
    if s in ("yes", "true", "on", "1"):
        return True
    if s in ("no", "false", "off", "0"):
        return False
    raise ModelError(f"{what} must be yes or no (got {value!r})")


def parse_refresh(value) -> Fraction:
    """``64ms`` / ``0`` / a number of seconds → seconds (0 = no refresh)."""
    from .timing import parse_duration

    if isinstance(value, Fraction):
        return value
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        f = Fraction(str(value))
    else:
        s = str(value).strip()
        f = Fraction(0) if s in ("0", "none", "off") else parse_duration(s)
    if f < 0:
        raise ModelError("the refresh period must not be negative")
    return f


def seconds_text(s: Fraction) -> str:
    s = Fraction(s)
    for unit, scale in (("s", 1), ("ms", 1000), ("us", 10**6), ("ns", 10**9)):
        v = s * scale
        if v >= 1 or unit == "ns":
            return f"{float(v):g}{unit}"
    return f"{float(s)}s"  # pragma: no cover


def row_cycle(mem) -> int:
    return max(mem.read_cycles, mem.write_cycles)


def refresh_period_cycles(mem) -> int:
    """P in clock cycles (0 when the memory has no refresh)."""
    from .timing import seconds_to_cycles

    return seconds_to_cycles(mem.refresh, mem.clock_hz) if mem.refresh else 0


def check_dram(mem) -> None:
    """Validate the DRAM fields of ``mem`` (called by ``Memory.validate``)."""
    if mem.refresh_scheme not in SCHEMES:
        raise ModelError(f"unknown refresh scheme {mem.refresh_scheme!r}; choose distributed or burst")
    if mem.page not in PAGES:
        raise ModelError(f"unknown page policy {mem.page!r}; choose open or closed")
    if mem.refresh < 0:
        raise ModelError("the refresh period must not be negative")
    if mem.refresh:
        P = refresh_period_cycles(mem)
        need = mem.rows * row_cycle(mem)
        if P < need:
            raise ModelError(
                f"refresh period {seconds_text(mem.refresh)} is {P:,} clock cycle{'s' * (P != 1)}, shorter than "
                f"refreshing the {mem.rows:,} rows takes ({mem.rows:,} × a row cycle of "
                f"{row_cycle(mem)} cycle{'s' * (row_cycle(mem) != 1)} = {need:,}); use a longer period or a faster clock"
            )


def refresh_offsets(mem) -> np.ndarray:
    """Cycle of each row's first refresh slot (int64, shape (rows,))."""
    P = refresh_period_cycles(mem)
    r = np.arange(mem.rows, dtype=np.int64)
    if mem.refresh_scheme == "burst":
        return r * row_cycle(mem)
    return (r * P) // mem.rows


def suspended_windows(mem, sched) -> list[tuple[int, int]]:
    """[start, end) cycle windows in which refresh does not happen (the test's delays,
    unless ``refresh_during_delays``)."""
    if mem.refresh_during_delays:
        return []
    return [(s.start, s.start + s.cycles) for s in sched.segments if s.is_delay and s.cycles]


class RefreshPlan:
    """Closed-form questions about the refresh of a memory under one schedule.

    ``offsets`` (rows,) int64, ``period`` P (0: no refresh), ``windows`` suspended [start, end).
    """

    def __init__(self, mem, sched):
        self.period = refresh_period_cycles(mem)
        self.rows, self.rc, self.scheme = mem.rows, row_cycle(mem), mem.refresh_scheme
        self.offsets = refresh_offsets(mem) if self.period else np.zeros(mem.rows, np.int64)
        self.windows = suspended_windows(mem, sched) if self.period else []
        # the active stretches between suspended windows: [a, b)
        edges = [0]
        for s, e in self.windows:
            edges += [s, e]
        edges.append(1 << 62)
        self.active = [(edges[i], edges[i + 1]) for i in range(0, len(edges), 2) if edges[i + 1] > edges[i]]

    def _first_at_or_after(self, off, t):
        """First slot ≥ t (ignoring suspension)."""
        P = self.period
        k = np.maximum(0, -((off - t) // P))      # ceil((t - off) / P), at least 0
        return off + k * P

    def _last_at_or_before(self, off, t):
        """Last slot ≤ t (ignoring suspension), or -1."""
        P = self.period
        k = (t - off) // P
        return np.where(t >= off, off + k * P, -1)

    def max_gap(self, rows, ta, tb) -> np.ndarray:
        """Longest stretch without a restore of each row between ``ta`` and ``tb`` (both
        restore events), counting the refreshes that happen strictly between them.

        Arrays of equal shape (int64).  Exact, O(number of suspended windows + 1) numpy steps.
        """
        rows = np.asarray(rows, np.int64)
        ta = np.asarray(ta, np.int64)
        tb = np.asarray(tb, np.int64)
        if not self.period:
            return tb - ta
        off = self.offsets[rows]
        P = self.period
        prev = ta.copy()
        gap = np.zeros(np.broadcast(ta, tb).shape, np.int64)
        for a, b in self.active:
            lo = np.maximum(ta + 1, a)
            hi = np.minimum(tb - 1, b - 1)
            first = self._first_at_or_after(off, lo)
            last = self._last_at_or_before(off, hi)
            has = (first <= hi) & (lo <= hi)
            gap = np.where(has, np.maximum(gap, first - prev), gap)
            gap = np.where(has & (last > first), np.maximum(gap, P), gap)
            prev = np.where(has, last, prev)
        return np.maximum(gap, tb - prev)

    def last_refresh(self, rows, t) -> np.ndarray:
        """Latest refresh of each row at or before cycle ``t`` that happens (-1 if none)."""
        rows = np.asarray(rows, np.int64)
        t = np.asarray(t, np.int64)
        if not self.period:
            return np.full(np.broadcast(rows, t).shape, -1, np.int64)
        off = self.offsets[rows]
        out = np.full(np.broadcast(rows, t).shape, -1, np.int64)
        for a, b in self.active:
            hi = np.minimum(t, b - 1)
            last = self._last_at_or_before(off, hi)
            ok = (last >= a) & (hi >= a)
            out = np.where(ok, np.maximum(out, last), out)
        return out

    def _all_upto(self, t):
        """Refresh slots of every row at or before cycle ``t`` (ignoring suspension); 0 for
        t < 0.  Distributed: the slots of all rows are ⌊k·P/rows⌋, k ≥ 0; burst: r·row cycle
        + k·P, r < rows."""
        t = np.asarray(t, np.int64)
        P, R = self.period, self.rows
        if self.scheme == "burst":
            full = (t // P) * R
            part = np.minimum(R, (t % P) // self.rc + 1)
            out = full + part
        else:
            out = -(-((t + 1) * R) // P)            # ceil((t + 1)·R / P)
        return np.where(t >= 0, out, 0)

    def count_all(self, ta, tb) -> np.ndarray:
        """Refresh slots of any row that happen in (ta, tb] (int64, broadcast shape)."""
        ta = np.asarray(ta, np.int64)
        tb = np.asarray(tb, np.int64)
        if not self.period:
            return np.zeros(np.broadcast(ta, tb).shape, np.int64)
        total = np.zeros(np.broadcast(ta, tb).shape, np.int64)
        for a, b in self.active:
            hi = np.minimum(tb, b - 1)
            lo = np.maximum(ta, a - 1)
            total += np.where(hi > lo, self._all_upto(hi) - self._all_upto(lo), 0)
        return total

    def slots(self, row: int, t0: int, t1: int) -> list[int]:
        """Every refresh of ``row`` in [t0, t1), in order (literal; for small spans)."""
        if not self.period:
            return []
        out = []
        off, P = int(self.offsets[row]), self.period
        t = off + max(0, -((off - t0) // P)) * P
        while t < t1:
            if t >= t0 and not any(s <= t < e for s, e in self.windows):
                out.append(t)
            t += self.period
        return out
