"""Fault selections (``--faults``), pair scopes (``--pairs``) and the instances they give.

Selections: ``static`` (the 48 primitives), ``classic`` (SAF, TF, SOF, AF, CFin, CFid,
CFst), ``retention`` (DRF), ``dynamic`` (the 30 single-cell two-operation primitives), ``all``, any class name (``SAF``, ``CFds``, ``DRF`` …), one kind
(``SA0``, ``AF:alias``) or one primitive in ``<S/F/R>`` form — combined as a comma list.

Pair scopes, for the two-cell kinds (cells) and the two-address AF kinds (words):
``all`` every ordered pair; ``neighbours`` physical neighbours (both directions);
``word`` pairs of bits inside one word (intra-word coupling; no AF pairs);
``sample:K[:SEED]`` K ordered pairs drawn without replacement (seeded).  A comma list is
the union.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from fractions import Fraction
from typing import Iterator

import numpy as np

from ..errors import FaultSpecError
from .primitives import (AF, CFID, CFIN, CFST, CLASSIC_CLASSES, DYNAMIC, DYNAMIC_CLASSES, SAF,
                         SINGLE_CLASSES, SOF, STATIC, STATIC_CLASSES, TF, FaultKind, drf_kinds,
                         primitive)

DEFAULT_RETENTION = (Fraction(1, 1000),)
MAX_EXPLICIT_PAIRS = 48_000_000     # directed pairs held as arrays (~3 GB at peak while grading)


def format_seconds(s: Fraction) -> str:
    s = Fraction(s)
    for unit, scale in (("s", 1), ("ms", 1000), ("us", 10**6), ("ns", 10**9)):
        v = s * scale
        if v >= 1 or unit == "ns":
            if v.denominator == 1:
                return f"{v.numerator}{unit}"
            return f"{float(v):.15g}{unit}"
    return f"{float(s)}s"  # pragma: no cover


def _class_kinds(name: str, retention) -> tuple[FaultKind, ...] | None:
    low = name.lower()
    every = STATIC_CLASSES + CLASSIC_CLASSES + ("DRF",) + DYNAMIC_CLASSES
    if name in every:              # exact spelling first: dRDF (dynamic) is not DRDF
        c = name
    else:                          # then any case, the static and classic names winning
        classes: dict[str, str] = {}
        for c in every:
            classes.setdefault(c.lower(), c)
        if low not in classes:
            return None
        c = classes[low]
    if c in STATIC_CLASSES:
        return tuple(k for k in STATIC if k.cls == c)
    if c in DYNAMIC_CLASSES:
        return tuple(k for k in DYNAMIC if k.cls == c)
    return {"SAF": SAF, "TF": TF, "SOF": SOF, "AF": AF, "CFin": CFIN, "CFid": CFID,
            "CFst": CFST, "DRF": drf_kinds(retention)}[c]


def all_kinds(retention=DEFAULT_RETENTION) -> tuple[FaultKind, ...]:
    return STATIC + SAF + SOF + AF + CFIN + CFID + drf_kinds(retention) + DYNAMIC


@dataclass(frozen=True)
class FaultSelection:
    kinds: tuple[FaultKind, ...]
    spec: str

    @property
    def classes(self) -> tuple[str, ...]:
        seen: dict[str, None] = {}
        for k in self.kinds:
            seen.setdefault(k.cls, None)
        return tuple(seen)


def select_faults(spec: str = "static", retention=DEFAULT_RETENTION, thresholds=None) -> FaultSelection:
    from .dram import DEFAULT_THRESHOLD, disturb_kinds, parse_thresholds, retention_kinds

    retention = tuple(Fraction(t) for t in retention)
    thresholds = parse_thresholds(thresholds if thresholds is not None else DEFAULT_THRESHOLD)
    kinds: dict[str, FaultKind] = {}
    for raw in _split(spec):
        part = raw.strip()
        low = part.lower()
        if low == "static":
            got = STATIC
        elif low == "classic":
            got = SAF + TF + SOF + AF + CFIN + CFID + CFST
        elif low == "retention":
            got = drf_kinds(retention)
        elif low == "dynamic":
            got = DYNAMIC
        elif low == "disturb":
            got = disturb_kinds(thresholds)
        elif low == "dram":                 # retention with refresh and disturb
            got = retention_kinds(retention) + disturb_kinds(thresholds)
        elif low == "all":
            got = all_kinds(retention)
        elif part.startswith("<"):
            got = (primitive(part),)
        else:
            got = _class_kinds(part, retention)
            if got is None:
                named = {k.text.lower(): k for k in all_kinds(retention) + disturb_kinds(thresholds)}
                if low in named:
                    got = (named[low],)
                else:
                    raise FaultSpecError(
                        f"unknown fault selection {part!r}; use static, classic, retention, dynamic, disturb, dram, all, "
                        "a class (" + ", ".join(STATIC_CLASSES + ("SAF", "SOF", "AF", "CFin", "CFid", "DRF") + DYNAMIC_CLASSES) +
                        "), a kind such as SA0 or AF:alias, or a primitive such as <0w1/0/->"
                    )
        for k in got:
            kinds.setdefault(k.text, k)
    if not kinds:
        raise FaultSpecError("the fault selection is empty")
    return FaultSelection(tuple(kinds.values()), spec)


def _split(spec: str) -> list[str]:
    # commas inside <...> belong to nothing (primitives use ';'), so a plain split works
    parts = [p for p in re.split(r",(?![^<]*>)", spec) if p.strip()]
    if not parts:
        raise FaultSpecError("the fault selection is empty")
    return parts


# ---- pair scopes -------------------------------------------------------------------------

@dataclass(frozen=True)
class PairScope:
    parts: tuple[tuple, ...]     # ('all',) ('neighbours',) ('word',) ('sample', K, seed)
    spec: str

    @property
    def is_all(self) -> bool:
        return ("all",) in self.parts


def parse_pairs(spec: str = "neighbours") -> PairScope:
    parts = []
    for raw in spec.split(","):
        p = raw.strip().lower()
        if not p:
            continue
        if p in ("all", "neighbours", "neighbors", "word"):
            parts.append(("neighbours",) if p == "neighbors" else (p,))
        elif p.startswith("sample:"):
            bits = p.split(":")
            try:
                k = int(bits[1])
                seed = int(bits[2]) if len(bits) > 2 else 1
            except (ValueError, IndexError):
                raise FaultSpecError(f"pair scope {raw!r}: write sample:K or sample:K:SEED") from None
            if len(bits) > 3:
                raise FaultSpecError(f"pair scope {raw!r}: write sample:K or sample:K:SEED")
            if k < 1:
                raise FaultSpecError(f"pair scope {raw!r}: K must be a positive whole number")
            parts.append(("sample", k, seed))
        else:
            raise FaultSpecError(f"unknown pair scope {raw!r}; use all, neighbours, word or sample:K[:SEED]")
    if not parts:
        raise FaultSpecError("the pair scope is empty")
    return PairScope(tuple(dict.fromkeys(parts)), spec)


def _sample_pairs(n: int, k: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    total = n * (n - 1)
    rng = np.random.default_rng(seed)
    if k >= total:
        idx = np.arange(total, dtype=np.int64)
    elif total < 50_000_000:
        idx = np.sort(rng.choice(total, size=k, replace=False))
    else:
        got = np.unique(rng.integers(0, total, size=int(k * 1.1) + 16))
        while got.size < k:
            got = np.unique(np.concatenate([got, rng.integers(0, total, size=k)]))
        idx = np.sort(rng.permutation(got)[:k])
    a = idx // (n - 1)
    r = idx % (n - 1)
    v = r + (r >= a)
    return a, v


def _check_pair_budget(mem) -> None:
    n = mem.cells
    if n * mem.neighbours > MAX_EXPLICIT_PAIRS:
        from ..errors import EngineLimitError

        raise EngineLimitError(
            f"{n:,} cells have about {n * mem.neighbours:,} neighbour pairs, more than marchkit "
            f"lists at once ({MAX_EXPLICIT_PAIRS:,}); grade a sub-array, or use --pairs sample:K or all"
        )


def cell_pairs(mem, scope: PairScope) -> tuple[np.ndarray, np.ndarray] | None:
    """Explicit (aggressor cell, victim cell) arrays, or None for all ordered pairs."""
    if scope.is_all:
        return None
    from ..model import neighbour_edges

    n, bits = mem.cells, mem.bits
    a_parts, v_parts = [], []
    for part in scope.parts:
        if part[0] == "neighbours":
            _check_pair_budget(mem)
            a, v = neighbour_edges(mem)
        elif part[0] == "word":
            bb = np.arange(bits)
            ba, bv = np.meshgrid(bb, bb, indexing="ij")
            keep = ba != bv
            ba, bv = ba[keep], bv[keep]
            w = np.arange(mem.words, dtype=np.int64)[:, None]
            a = (w * bits + ba[None, :]).ravel()
            v = (w * bits + bv[None, :]).ravel()
        else:
            a, v = _sample_pairs(n, part[1], part[2])
        a_parts.append(a)
        v_parts.append(v)
    a = np.concatenate(a_parts)
    v = np.concatenate(v_parts)
    if len(scope.parts) > 1:
        key = np.unique(a * n + v)
        a, v = key // n, key % n
    return a, v


def word_pairs(mem, scope: PairScope) -> tuple[np.ndarray, np.ndarray] | None:
    """(address a, address b) arrays for the two-address AF kinds, or None for all pairs."""
    if scope.is_all:
        return None
    n = mem.words
    a_parts, b_parts = [], []
    for part in scope.parts:
        if part[0] == "neighbours":
            from ..model import neighbour_edges

            _check_pair_budget(mem)
            ca, cv = neighbour_edges(mem)
            a, b = ca // mem.bits, cv // mem.bits
            keep = a != b
            key = np.unique(a[keep] * n + b[keep])
            a, b = key // n, key % n
        elif part[0] == "word":
            continue
        else:
            a, b = _sample_pairs(n, part[1], part[2])
        a_parts.append(a)
        b_parts.append(b)
    if not a_parts:
        return np.empty(0, np.int64), np.empty(0, np.int64)
    a = np.concatenate(a_parts)
    b = np.concatenate(b_parts)
    if len(a_parts) > 1:
        key = np.unique(a * n + b)
        a, b = key // n, key % n
    return a, b


def instance_count(kind: FaultKind, mem, scope: PairScope) -> int:
    """Exact number of instances of ``kind`` on ``mem`` (no enumeration)."""
    if kind.family == "af":
        if kind.arity == 1:
            return mem.words
        pairs = word_pairs(mem, scope)
        return mem.words * (mem.words - 1) if pairs is None else int(pairs[0].size)
    if kind.arity == 1:
        return mem.cells
    pairs = cell_pairs(mem, scope)
    return mem.cells * (mem.cells - 1) if pairs is None else int(pairs[0].size)


@dataclass(frozen=True)
class Instance:
    """One fault at one place: ``sites`` are cell indices (word·bits + bit), or for AF words."""

    kind: FaultKind
    sites: tuple[int, ...]

    def text(self, mem) -> str:
        if self.kind.family == "af":
            names = "ab"
            return f"{self.kind.text} " + " ".join(f"{names[i]}={s}" for i, s in enumerate(self.sites))

        def cell(c):
            w, b = divmod(c, mem.bits)
            return f"w{w}" if mem.bits == 1 else f"w{w}.b{b}"

        if len(self.sites) == 1:
            return f"{self.kind.text} v={cell(self.sites[0])}"
        return f"{self.kind.text} a={cell(self.sites[0])} v={cell(self.sites[1])}"


def enumerate_instances(kind: FaultKind, mem, scope: PairScope) -> Iterator[Instance]:
    """Every instance of ``kind`` on ``mem``, in a fixed order (for audits and small arrays)."""
    if kind.family == "af" and kind.arity == 1:
        for w in range(mem.words):
            yield Instance(kind, (w,))
        return
    if kind.arity == 1:
        for c in range(mem.cells):
            yield Instance(kind, (c,))
        return
    if kind.family == "af":
        pairs = word_pairs(mem, scope)
        n = mem.words
    else:
        pairs = cell_pairs(mem, scope)
        n = mem.cells
    if pairs is None:
        for a in range(n):
            for v in range(n):
                if a != v:
                    yield Instance(kind, (a, v))
    else:
        for a, v in zip(pairs[0].tolist(), pairs[1].tolist()):
            yield Instance(kind, (a, v))
