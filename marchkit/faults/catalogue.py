"""Fault selections (``--faults``), pair scopes (``--pairs``) and the instances they give.

Selections: ``static`` (the 48 primitives), ``classic`` (SAF, TF, SOF, AF, CFin, CFid,
CFst), ``retention`` (DRF), ``dynamic`` (the 30 single-cell and 96 two-cell two-operation
primitives), ``linked`` (LF1, LF2aa, LF2av, LF2va, LF3), ``npsf`` (ANPSF, PNPSF, SNPSF),
``all``, any class name (``SAF``, ``CFds``, ``DRF`` …), one kind
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
from ..units import format_seconds  # noqa: F401  (re-exported)
from .registry import FAMILIES, family_of

DEFAULT_RETENTION = (Fraction(1, 1000),)
MAX_EXPLICIT_PAIRS = 48_000_000     # directed pairs listed as arrays (enumeration, mixed sampled scopes only)
GROUP_WORDS = ("static", "classic", "retention", "dynamic", "linked", "npsf", "all")


def _group(word: str, retention) -> tuple[FaultKind, ...]:
    """The kinds of a selection word, every family's contribution in slot order."""
    parts = []
    for i, f in enumerate(FAMILIES):
        for slot, kinds in f.groups(retention).get(word, []):
            parts.append((slot, i, kinds))
    out: dict[str, FaultKind] = {}
    for _, _, kinds in sorted(parts, key=lambda x: (x[0], x[1])):
        for k in kinds:
            out.setdefault(k.text, k)
    return tuple(out.values())


def all_classes() -> tuple[str, ...]:
    """Every class name, family by family in registry order."""
    out: dict[str, None] = {}
    for f in FAMILIES:
        for c in f.classes:
            out.setdefault(c, None)
    return tuple(out)


def _class_kinds(name: str, retention) -> tuple[FaultKind, ...] | None:
    every = all_classes()
    if name in every:              # exact spelling first: dRDF (dynamic) is not DRDF
        c = name
    else:                          # then any case, the earlier-registered names winning
        classes: dict[str, str] = {}
        for c in every:
            classes.setdefault(c.lower(), c)
        if name.lower() not in classes:
            return None
        c = classes[name.lower()]
    for f in FAMILIES:
        if c in f.classes:
            return tuple(f.class_kinds(c, retention))
    return None  # pragma: no cover


def all_kinds(retention=DEFAULT_RETENTION) -> tuple[FaultKind, ...]:
    return _group("all", retention)


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
        got = None
        if low == "disturb":
            got = disturb_kinds(thresholds)
        elif low == "dram":                 # retention with refresh and disturb
            got = retention_kinds(retention) + disturb_kinds(thresholds)
        elif low in GROUP_WORDS:
            got = _group(low, retention)
        else:
            for f in FAMILIES:
                k = f.parse_kind(part)
                if k is not None:
                    got = (k,)
                    break
        if got is None:
            got = _class_kinds(part, retention)
        if got is None:
            named = {}
            for f in FAMILIES:
                for k in f.kinds(retention):
                    named.setdefault(k.text.lower(), k)
            for k in disturb_kinds(thresholds):
                named.setdefault(k.text.lower(), k)
            if low in named:
                got = (named[low],)
            else:
                raise FaultSpecError(
                    f"unknown fault selection {part!r}; use {', '.join(GROUP_WORDS[:-1])}, disturb, dram, all, "
                    "a class (" + ", ".join(all_classes()) +
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


def _unique(x: np.ndarray) -> np.ndarray:
    """Sorted distinct values (as ``np.unique``, but sort-based: numpy's hash-based unique is
    slow on millions of distinct values)."""
    x = np.sort(np.asarray(x), kind="stable")
    if x.size == 0:
        return x
    keep = np.empty(x.size, dtype=bool)
    keep[0] = True
    keep[1:] = x[1:] != x[:-1]
    return x[keep]


def _sample_pairs(n: int, k: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    total = n * (n - 1)
    rng = np.random.default_rng(seed)
    if k >= total:
        idx = np.arange(total, dtype=np.int64)
    elif total < 50_000_000:
        idx = np.sort(rng.choice(total, size=k, replace=False))
    else:
        got = _unique(rng.integers(0, total, size=int(k * 1.1) + 16))
        while got.size < k:
            got = _unique(np.concatenate([got, rng.integers(0, total, size=k)]))
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
            f"lists at once ({MAX_EXPLICIT_PAIRS:,}); grading counts them without a list, but "
            "naming every instance (or mixing neighbours with sample:K) needs one"
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
        key = _unique(a * n + v)
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
            key = _unique(a[keep] * n + b[keep])
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
        key = _unique(a * n + b)
        a, b = key // n, key % n
    return a, b


def cell_pair_count(mem, scope: PairScope) -> int:
    """Number of ordered cell pairs in ``scope``, in closed form for ``all``, ``neighbours``
    and ``word`` (and their unions); sampled scopes are listed."""
    from ..model.geometry import neighbour_pair_count, same_word_neighbour_pair_count

    if scope.is_all:
        return mem.cells * (mem.cells - 1)
    kinds = {p[0] for p in scope.parts}
    if kinds <= {"neighbours", "word"}:
        nb = neighbour_pair_count(mem) if "neighbours" in kinds else 0
        if "word" in kinds:
            nb += mem.words * mem.bits * (mem.bits - 1)
            if "neighbours" in kinds:
                nb -= same_word_neighbour_pair_count(mem)
        return nb
    return int(cell_pairs(mem, scope)[0].size)


def word_pair_count(mem, scope: PairScope) -> int:
    """Number of ordered pairs of distinct words in ``scope`` (closed form but for samples)."""
    from ..model.geometry import neighbour_word_pair_count

    if scope.is_all:
        return mem.words * (mem.words - 1)
    kinds = {p[0] for p in scope.parts}
    if kinds <= {"neighbours", "word"}:
        return neighbour_word_pair_count(mem) if "neighbours" in kinds else 0
    return int(word_pairs(mem, scope)[0].size)


def instance_count(kind: FaultKind, mem, scope: PairScope) -> int:
    """Exact number of instances of ``kind`` on ``mem`` (no enumeration)."""
    return family_of(kind).instance_count(kind, mem, scope)


@dataclass(frozen=True)
class Instance:
    """One fault at one place: ``sites`` are cell indices (word·bits + bit), or words for
    families whose :attr:`~marchkit.faults.family.Family.site` is ``words``."""

    kind: FaultKind
    sites: tuple[int, ...]

    def text(self, mem) -> str:
        return family_of(self.kind).instance_text(self, mem)


def enumerate_instances(kind: FaultKind, mem, scope: PairScope) -> Iterator[Instance]:
    """Every instance of ``kind`` on ``mem``, in a fixed order (for audits and small arrays)."""
    return family_of(kind).enumerate_instances(kind, mem, scope)
