"""Fail logs: the failing compares a tester (or a BIST read-out, or a simulation) recorded.

CSV — exactly this header, then one row per failing compare::

    cycle,address,expected,observed
    1234,02a,00ff,00fb

JSON lines — one object per failing compare, the same four keys::

    {"cycle": 1234, "address": "02a", "expected": "00ff", "observed": "00fb"}

``cycle`` is a decimal number: the clock cycle of the compare, numbered as in
``marchkit export`` (0 is the first cycle of the test; a read is compared in its last cycle,
the one whose ``mask`` is not zero in the export).  ``address`` is the logical word address,
``expected`` and ``observed`` the data words, all three in hexadecimal as in the export (lower
or upper case, zero padding and a ``0x`` prefix optional; bit 0 of the word is the lowest bit
of the number).  In JSON lines a plain number is also accepted for them.  Blank lines and
lines starting with ``#`` are skipped.

Checks, each reported with the file, line and column: a cycle that is not a compare of the
test (a write, an idle cycle, a read that is not compared, beyond the end), an address out of
range, data wider than the word, a row whose observed word equals the expected one (it did
not fail), the same cycle twice, an empty log, and a log from another test (the cycle
compares a different address or expects different data).
"""

from __future__ import annotations

import bisect
import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import InputError, PositionedError, SourcePos

HEADER = ("cycle", "address", "expected", "observed")


class FailLogError(PositionedError):
    """A fail log that cannot be used, at a known line."""


@dataclass(frozen=True)
class Fail:
    """One failing compare of a log; ``line`` is its 1-based line in the file."""

    cycle: int
    address: int
    expected: int
    observed: int
    line: int = 0

    @property
    def bits(self) -> int:
        """The failing bits as a mask."""
        return self.expected ^ self.observed


@dataclass
class FailLog:
    name: str
    fails: list[Fail]

    def __len__(self) -> int:
        return len(self.fails)

    def cells(self, bits: int) -> list[tuple[int, int]]:
        """Failing cells (word, bit), sorted, each once."""
        out = set()
        for f in self.fails:
            d = f.bits
            for b in range(bits):
                if d >> b & 1:
                    out.add((f.address, b))
        return sorted(out)

    def words(self) -> list[int]:
        return sorted({f.address for f in self.fails})


# ---------------------------------------------------------------------------------------
# reading

def _err(msg, name, text, line, col=1, end=None):
    return FailLogError(msg, SourcePos(line, col, name, end), text)


def _number(raw, base, what, name, text, line, col):
    if isinstance(raw, bool) or raw is None:
        raise _err(f"{what} must be a number", name, text, line, col)
    if isinstance(raw, int):
        if raw < 0:
            raise _err(f"{what} must not be negative", name, text, line, col)
        return raw
    s = str(raw).strip()
    t = s[2:] if base == 16 and s[:2].lower() == "0x" else s
    try:
        if not t or not all(c in "0123456789abcdefABCDEF"[: 22 if base == 16 else 10] for c in t):
            raise ValueError
        return int(t, base)
    except ValueError:
        kind = "a hexadecimal number" if base == 16 else "a decimal number"
        raise _err(f"{what} {s!r} is not {kind}", name, text, line, col, col + max(1, len(s))) from None


def _rows_csv(name, text, lines):
    """(line number, {field: (raw, column)}) for each data row."""
    first = None
    for i, line in enumerate(lines, 1):
        s = line.strip()
        if s and not s.startswith("#"):
            first = i
            break
    if first is None:
        raise _err("the fail log is empty (no header, no failing compares)", name, text, 1)
    head = [h.strip().lower() for h in lines[first - 1].strip().split(",")]
    if tuple(head) != HEADER:
        raise _err(f"a fail log starts with the header {','.join(HEADER)} (or is JSON lines); "
                   f"this line is {lines[first - 1].strip()[:60]!r}", name, text, first)
    for i in range(first + 1, len(lines) + 1):
        line = lines[i - 1]
        s = line.strip()
        if not s or s.startswith("#"):
            continue
        parts = line.rstrip("\r").split(",")
        if len(parts) != 4:
            raise _err(f"a row has 4 fields ({','.join(HEADER)}), this one has {len(parts)}", name, text, i)
        cols, c = [], 1
        for p in parts:
            lead = len(p) - len(p.lstrip())
            cols.append(c + lead)
            c += len(p) + 1
        yield i, {k: (p.strip(), col) for k, p, col in zip(HEADER, parts, cols)}


def _rows_jsonl(name, text, lines):
    for i, line in enumerate(lines, 1):
        s = line.strip()
        if not s or s.startswith("#"):
            continue
        try:
            obj = json.loads(s)
        except json.JSONDecodeError as e:
            raise _err(f"not a JSON object: {e.msg}", name, text, i, e.colno) from None
        if not isinstance(obj, dict):
            raise _err("each line of a JSON-lines fail log is one object", name, text, i)
        missing = [k for k in HEADER if k not in obj]
        if missing:
            raise _err(f"missing key{'s' if len(missing) > 1 else ''} {', '.join(missing)}", name, text, i)
        extra = [k for k in obj if k not in HEADER]
        if extra:
            raise _err(f"unknown key {extra[0]!r} (the keys are {', '.join(HEADER)})", name, text, i)
        cols = {k: max(1, line.find(f'"{k}"') + 1) for k in HEADER}
        yield i, {k: (obj[k], cols[k]) for k in HEADER}


def parse_fail_log(text: str, name: str = "<fails>", words: int | None = None, bits: int | None = None,
                   check=None) -> FailLog:
    """Read a fail log (CSV or JSON lines, told apart by the first non-blank character).

    ``words`` / ``bits`` bound the address and the data; ``check`` (a :class:`CompareTable`)
    checks every cycle against the test.  Errors are :class:`FailLogError` with the line.
    """
    lines = text.split("\n")
    first = next((ln.strip() for ln in lines if ln.strip() and not ln.strip().startswith("#")), "")
    rows = _rows_jsonl(name, text, lines) if first.startswith("{") else _rows_csv(name, text, lines)
    fails: list[Fail] = []
    seen: dict[int, int] = {}
    for i, f in rows:
        cyc = _number(f["cycle"][0], 10, "cycle", name, text, i, f["cycle"][1])
        addr = _number(f["address"][0], 16, "address", name, text, i, f["address"][1])
        exp = _number(f["expected"][0], 16, "expected", name, text, i, f["expected"][1])
        obs = _number(f["observed"][0], 16, "observed", name, text, i, f["observed"][1])
        if words is not None and addr >= words:
            raise _err(f"address {addr:#x} is out of range: the memory has {words} words (0..{words - 1:#x})",
                       name, text, i, f["address"][1])
        if bits is not None:
            for key, v in (("expected", exp), ("observed", obs)):
                if v >> bits:
                    raise _err(f"{key} data {v:#x} is wider than the {bits}-bit word", name, text, i, f[key][1])
        if exp == obs:
            raise _err("observed equals expected: this compare passed (a fail log lists failing compares only)",
                       name, text, i, f["observed"][1])
        if cyc in seen:
            raise _err(f"cycle {cyc} is listed twice (first on line {seen[cyc]})", name, text, i, f["cycle"][1])
        seen[cyc] = i
        if check is not None:
            got = check.problem(cyc, addr, exp)
            if got:
                key, msg = got
                raise _err(msg, name, text, i, f[key][1])
        fails.append(Fail(cyc, addr, exp, obs, i))
    if not fails:
        raise _err("the fail log lists no failing compares (a passing chip has nothing to diagnose)",
                   name, text, len(lines) if lines[-1] else max(1, len(lines) - 1))
    fails.sort(key=lambda x: x.cycle)
    return FailLog(name, fails)


MAX_LOG_BYTES = 1 << 30      # a fail log or bitmap file larger than this is refused before reading


def read_text_file(path, what: str) -> str:
    """The UTF-8 text of the ``what`` file at ``path`` (``what`` names it in errors): a missing,
    special, huge or binary file is an :class:`InputError` with a one-line reason."""
    import os
    import stat

    try:
        st = os.stat(path)
    except FileNotFoundError:
        raise InputError(f"no {what} {path}") from None
    except OSError as e:
        raise InputError(f"cannot read the {what} {path}: {e.strerror}") from None
    if stat.S_ISDIR(st.st_mode):
        raise InputError(f"cannot read the {what} {path}: it is a directory")
    if not (stat.S_ISREG(st.st_mode) or stat.S_ISFIFO(st.st_mode)):    # a pipe, <(zcat …), is fine
        raise InputError(f"cannot read the {what} {path}: not a file or a pipe")
    too_big = f"the {what} {path} has more than {MAX_LOG_BYTES:,} bytes, the most read here"
    if st.st_size > MAX_LOG_BYTES:
        raise InputError(too_big)
    try:
        with open(path, "rb") as f:
            data = f.read(MAX_LOG_BYTES + 1)
    except OSError as e:
        raise InputError(f"cannot read the {what} {path}: {e.strerror}") from None
    if len(data) > MAX_LOG_BYTES:
        raise InputError(too_big)
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as e:
        raise InputError(f"the {what} {path} is not text: byte 0x{data[e.start]:02x} at offset {e.start} "
                         "is not UTF-8") from None


def read_fail_log(path, mem, test=None) -> FailLog:
    """Read and check the fail log at ``path`` for ``mem`` (and ``test`` when given)."""
    text = read_text_file(path, "fail log")
    check = CompareTable(test, mem) if test is not None else None
    return parse_fail_log(text, str(path), mem.words, mem.bits, check)


# ---------------------------------------------------------------------------------------
# what the test compares, cycle by cycle (from the schedule, as the export numbers cycles)

class CompareTable:
    """Which address each compare cycle of ``test`` on ``mem`` reads and what it expects."""

    def __init__(self, test, mem, sched=None):
        from ..model import address_order, background_stack, compared_reads, schedule

        self.test = test
        self.mem = mem
        self.sched = sched or schedule(test, mem)
        self.order = address_order(mem)
        self.n = mem.words
        bg = background_stack(mem)                                   # (runs, words, bits)
        weights = [1 << b for b in range(mem.bits)]
        if mem.bits <= 62:
            self.bgword = (bg.astype(np.int64) * np.array(weights, dtype=np.int64)).sum(axis=2)
        else:
            self.bgword = None
            self._bg = bg
        self.ones = (1 << mem.bits) - 1
        self.starts = [s.start for s in self.sched.segments]
        self.determined = compared_reads(self.sched)
        self.latency = getattr(mem, "read_latency", 0)     # compare cycle = read's last cycle + this

    def background_word(self, run: int, address: int) -> int:
        if self.bgword is not None:
            return int(self.bgword[run, address])
        return sum(int(b) << i for i, b in enumerate(self._bg[run, address]))

    def locate(self, cycle: int):
        """(segment index, position in the element's order, slot in the address visit)."""
        si = bisect.bisect_right(self.starts, cycle) - 1
        seg = self.sched.segments[si]
        if seg.element is None:
            return si, None, None
        off = cycle - seg.start
        return si, off // seg.per_address, off % seg.per_address

    def address_at(self, seg, pos: int) -> int:
        return int(self.order[self.n - 1 - pos] if seg.order == "down" else self.order[pos])

    def expected(self, cycle: int) -> tuple[int, int] | None:
        """(address, expected word) compared at ``cycle``, or None."""
        if not 0 <= cycle < self.sched.cycles:
            return None
        cycle -= self.latency             # a pipelined read is compared read_latency cycles later
        if cycle < 0:
            return None
        si, pos, slot = self.locate(cycle)
        seg = self.sched.segments[si]
        if pos is None:
            return None
        k = self._op_at(seg, slot)
        if seg.op_kinds[k] != "r" or (si, k) not in self.determined:
            return None
        if slot != seg.op_offsets[k] + self.mem.read_cycles - 1:
            return None
        a = self.address_at(seg, pos)
        d = self.background_word(seg.run, a)
        return a, d ^ (self.ones if seg.op_values[k] else 0)

    def _op_at(self, seg, slot):
        return bisect.bisect_right(seg.op_offsets, slot) - 1

    def problem(self, cycle: int, address: int, expected: int) -> tuple[str, str] | None:
        """(field at fault, why) when (cycle, address, expected) is not a compare of this
        test; None when it is."""
        got = self._problem(cycle, address, expected)
        if got is None:
            return None
        return ("address", got[1:]) if got[0] == "!" else ("expected", got[1:]) if got[0] == "$" else ("cycle", got)

    def _problem(self, cycle, address, expected):
        total = self.sched.cycles
        if cycle >= total:
            return f"cycle {cycle} is beyond the end of the test ({total} cycles, 0..{total - 1})"
        lat = self.latency
        if cycle < lat:
            return f"cycle {cycle} comes before the data of any read (read latency {lat} cycles)"
        si, pos, slot = self.locate(cycle - lat)
        seg = self.sched.segments[si]
        if pos is None:
            if lat:
                return (f"cycle {cycle} is not a compare: {lat} cycles earlier (read latency), cycle "
                        f"{cycle - lat} is an idle cycle (a delay)")
            return f"cycle {cycle} is an idle cycle (a delay), not a compare"
        k = self._op_at(seg, slot)
        # one numbering everywhere: M0, op 0, run 0 (as check, grade and the export's columns)
        what = f"{seg.op_kinds[k]}{seg.op_values[k]} (M{seg.element} op {k}"
        what += f", background run {seg.run})" if self.sched.runs > 1 else ")"
        at = f"cycle {cycle} is not a compare: {lat} cycles earlier (read latency), cycle {cycle - lat}" if lat \
            else f"cycle {cycle}"
        if seg.op_kinds[k] == "w":
            return f"{at} is a write, {what}" + ("" if lat else ", not a compare")
        if (si, k) not in self.determined:
            return f"{at} is a read before the test's first write, {what}; it is not compared"
        last = seg.op_offsets[k] + self.mem.read_cycles - 1
        if slot != last:
            where = f"{lat} cycles after its last cycle (read latency)" if lat else "in its last cycle"
            return (f"cycle {cycle} is not a compare: read {what} is compared {where}, "
                    f"cycle {cycle + last - slot}") if lat else (
                    f"cycle {cycle} is inside read {what}, which is compared in its last cycle, "
                    f"{cycle + last - slot}")
        a = self.address_at(seg, pos)
        exp = self.background_word(seg.run, a) ^ (self.ones if seg.op_values[k] else 0)
        if a != address:
            return (f"!cycle {cycle} of this test compares address {a:#x}, not {address:#x}: "
                    "is the log from another test, memory or address order?")
        if exp != expected:
            return (f"$cycle {cycle} of this test expects {exp:#x} at address {a:#x}, the log says {expected:#x}: "
                    "is the log from another test or data background?")
        return None


# ---------------------------------------------------------------------------------------
# writing (demo data, tests, and the simulated logs of `diagnose`)

def fail_log_csv(fails, mem) -> str:
    """CSV text of ``fails`` (objects with cycle, address, expected, observed)."""
    ha = max(1, (mem.address_bits + 3) // 4)
    hd = max(1, (mem.bits + 3) // 4)
    out = [",".join(HEADER)]
    for f in sorted(fails, key=lambda x: x.cycle):
        out.append(f"{f.cycle},{f.address:0{ha}x},{f.expected:0{hd}x},{f.observed:0{hd}x}")
    return "\n".join(out) + "\n"
