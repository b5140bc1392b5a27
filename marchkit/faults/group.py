"""Faults on groups of more than two cells, as data: three-cell linked faults (LF3) and
neighbourhood pattern-sensitive faults (NPSF) — the ``group`` family.

A group kind names its cells by *role* (``a1 a2 v`` for LF3, ``b N S E W`` for NPSF) and
acts through :class:`GRule` s, a generalised primitive: required values of any roles (judged
just before the operation, or continuously for a state rule), at most one operation on one
role, then the victim holds ``f`` and a read of the victim returns ``r``.

NPSF (type-1 neighbourhood: the base cell b and its physical neighbours north, south, east
and west in the cell grid of the array, whatever ``neighbours`` says for coupling pairs):

* ``ANPSF`` active: a transition write to one neighbour (the aggressor) while the other
  three neighbours hold a pattern flips the base (base value y → ȳ): 4 aggressors × 2
  transitions × 8 patterns × 2 base values = 128 kinds;
* ``PNPSF`` passive: a transition write to the base fails while the four neighbours hold a
  pattern: 2 × 16 = 32 kinds;
* ``SNPSF`` static: the base cannot hold y while the four neighbours hold a pattern (it flips,
  as a state fault): 2 × 16 = 32 kinds.

(Definitions as in van de Goor, Testing Semiconductor Memories, 1991, from memory.)  At the
edge of the array a base cell has 2 or 3 neighbours; its neighbourhood is the neighbours it
has, and a kind applies to it when its aggressor exists and its pattern asks 0 of every
missing neighbour (one kind stands for each pattern of the neighbours present).  So a base
with k neighbours has k·2^(k+1) ANPSF, 2^(k+1) PNPSF and 2^(k+1) SNPSF instances.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .linked import LF3_PAIRS
from .primitives import FaultKind, Rule

NPSF_CLASSES = ("ANPSF", "PNPSF", "SNPSF")
NPSF_ROLES = ("b", "N", "S", "E", "W")
LF3_ROLES = ("a1", "a2", "v")


def roles(kind) -> tuple:
    """The role names of a group kind's sites (``Instance.sites`` order)."""
    return kind.params[0]


def grules(kind) -> tuple:
    """The :class:`GRule` s of a group kind."""
    return kind.params[1]
_DIRS = {"N": (-1, 0), "S": (1, 0), "E": (0, 1), "W": (0, -1)}


@dataclass(frozen=True)
class GRule:
    """``need[i]`` the value role i must hold (None: any); ``op`` None for a state rule, else
    (role, 'w' or 'r', value written or None); the victim role then holds ``f``; a read of
    the victim returns ``r``."""

    need: tuple
    op: tuple | None
    victim: int
    f: int
    r: int | None = None


def _grule(rule: Rule, agg_role: int, victim: int, k: int) -> GRule:
    need = [None] * k
    op = None
    need[victim] = rule.vic.pre
    if rule.agg is not None:
        need[agg_role] = rule.agg.pre
        if rule.agg.op is not None:
            op = (agg_role, rule.agg.op, rule.agg.val if rule.agg.op == "w" else None)
    if rule.vic.op is not None:
        op = (victim, rule.vic.op, rule.vic.val if rule.vic.op == "w" else None)
    return GRule(tuple(need), op, victim, rule.f, rule.r)


def _lf3_kind(fp1: Rule, fp2: Rule) -> FaultKind:
    return FaultKind(
        f"a1{fp1.text}→a2{fp2.text}", "LF3", "linked3", 3,
        params=(LF3_ROLES, (_grule(fp1, 0, 2, 3), _grule(fp2, 1, 2, 3))),
        description=f"{fp1.text} with aggressor a1, then {fp2.text} with aggressor a2, same victim; "
                    "the second can undo the first")


LF3 = tuple(_lf3_kind(a, b) for a, b in LF3_PAIRS)


def _pattern(names, bits) -> str:
    return " ".join(f"{n}{b}" for n, b in zip(names, bits))


def _npsf_kinds() -> tuple[FaultKind, ...]:
    out = []
    nb = NPSF_ROLES[1:]
    for d in nb:                                   # active
        others = [x for x in nb if x != d]
        for x in (0, 1):
            for pat in range(8):
                bits = [(pat >> (2 - i)) & 1 for i in range(3)]
                for y in (0, 1):
                    need = [None] * 5
                    need[0] = y
                    need[NPSF_ROLES.index(d)] = x
                    for o, bt in zip(others, bits):
                        need[NPSF_ROLES.index(o)] = bt
                    arrow = "↑" if x == 0 else "↓"
                    out.append(FaultKind(
                        f"ANPSF({d}{arrow} {_pattern(others, bits)} b{y})", "ANPSF", "npsf", 5,
                        params=(NPSF_ROLES, (GRule(tuple(need), (NPSF_ROLES.index(d), "w", 1 - x), 0, 1 - y),)),
                        description=f"writing {1 - x} to neighbour {d} (holding {x}) while "
                                    f"{_pattern(others, bits)} flips the base cell from {y} to {1 - y}"))
    for y in (0, 1):                               # passive
        for pat in range(16):
            bits = [(pat >> (3 - i)) & 1 for i in range(4)]
            need = (y,) + tuple(bits)
            arrow = "↑" if y == 0 else "↓"
            out.append(FaultKind(
                f"PNPSF(b{arrow} {_pattern(nb, bits)})", "PNPSF", "npsf", 5,
                params=(NPSF_ROLES, (GRule(need, (0, "w", 1 - y), 0, y),)),
                description=f"writing {1 - y} to the base cell (holding {y}) fails while the neighbours hold "
                            f"{_pattern(nb, bits)}"))
    for y in (0, 1):                               # static
        for pat in range(16):
            bits = [(pat >> (3 - i)) & 1 for i in range(4)]
            need = (y,) + tuple(bits)
            out.append(FaultKind(
                f"SNPSF(b{y} {_pattern(nb, bits)})", "SNPSF", "npsf", 5,
                params=(NPSF_ROLES, (GRule(need, None, 0, 1 - y),)),
                description=f"the base cell cannot hold {y} while the neighbours hold {_pattern(nb, bits)}: "
                            f"it becomes {1 - y}"))
    return tuple(out)


NPSF = _npsf_kinds()


def npsf_applies(kind: FaultKind, present) -> bool:
    """Whether ``kind`` has an instance at a base whose neighbours ``present`` (bool per role
    N S E W) exist: its aggressor exists and it asks 0 of every missing neighbour."""
    g = grules(kind)[0]
    if g.op is not None and g.op[0] != 0 and not present[g.op[0] - 1]:
        return False
    return all(present[i - 1] or g.need[i] == 0 for i in range(1, 5))


def npsf_neighbourhoods(mem) -> np.ndarray:
    """(cells, 5) int64: for each base cell (flat index ``word·bits + bit``) itself and its
    N, S, E, W neighbours in the physical grid, -1 where the array ends."""
    rows, cols = mem.rows, mem.columns
    r = np.repeat(np.arange(rows, dtype=np.int64), cols)
    c = np.tile(np.arange(cols, dtype=np.int64), rows)
    w, b = mem.cell_at(r, c)
    grid = np.empty((rows, cols), dtype=np.int64)
    grid[r, c] = w * mem.bits + b
    out = np.full((mem.cells, 5), -1, dtype=np.int64)
    base = grid[r, c]
    out[base, 0] = base
    for i, d in enumerate(NPSF_ROLES[1:], start=1):
        dr, dc = _DIRS[d]
        rr, cc = r + dr, c + dc
        ok = (rr >= 0) & (rr < rows) & (cc >= 0) & (cc < cols)
        out[base[ok], i] = grid[rr[ok], cc[ok]]
    return out


def npsf_presence_counts(mem) -> np.ndarray:
    """(16,) number of base cells per presence mask (bit i: neighbour N S E W [i] exists)."""
    nb = npsf_neighbourhoods(mem)
    mask = ((nb[:, 1:] >= 0).astype(np.int64) << np.arange(4)).sum(axis=1)
    return np.bincount(mask, minlength=16)


def npsf_count(kind: FaultKind, mem) -> int:
    counts = npsf_presence_counts(mem)
    return int(sum(counts[m] for m in range(16)
                   if counts[m] and npsf_applies(kind, [(m >> i) & 1 for i in range(4)])))


# ---- LF3 cell triples (a1, a2, v) --------------------------------------------------------

MAX_TRIPLES = 40_000_000


def _neighbour_table(mem) -> np.ndarray:
    """(cells, D) neighbours of each cell (physical, as ``--pairs neighbours``), -1 padded."""
    from ..model import neighbour_edges

    a, v = neighbour_edges(mem)
    order = np.argsort(v, kind="stable")
    a, v = a[order], v[order]
    deg = np.bincount(v, minlength=mem.cells)
    D = int(deg.max()) if deg.size else 0
    start = np.concatenate([[0], np.cumsum(deg)[:-1]])
    slot = np.arange(a.size) - start[v]
    out = np.full((mem.cells, max(D, 1)), -1, dtype=np.int64)
    out[v, slot] = a
    return out


def lf3_triple_chunks(mem, scope):
    """Yield (a1, a2, v) int64 arrays covering every LF3 triple of the pair scope once:
    ``neighbours`` a1 ≠ a2 both physical neighbours of v; ``word`` a1 ≠ a2 other bits of v's
    word; ``all`` every ordered triple of distinct cells; ``sample:K[:SEED]`` K ordered triples
    drawn without replacement.  A union of scopes is listed once (deduplicated)."""
    from ..errors import EngineLimitError

    parts = scope.parts
    if len(parts) > 1:
        keys = []
        n = mem.cells
        total = 0
        for p in parts:
            sub = type(scope)((p,), p[0])
            for a1, a2, v in lf3_triple_chunks(mem, sub):
                total += a1.size
                if total > MAX_TRIPLES:
                    raise EngineLimitError(f"more than {MAX_TRIPLES:,} LF3 cell triples in the union of pair "
                                           "scopes; grade one scope at a time")
                keys.append((a1 * n + a2) * n + v)
        key = np.unique(np.concatenate(keys)) if keys else np.empty(0, np.int64)
        yield key // (n * n), (key // n) % n, key % n
        return
    p = parts[0]
    n, B = mem.cells, mem.bits
    if p[0] == "neighbours":
        tab = _neighbour_table(mem)
        cells = np.arange(n, dtype=np.int64)
        for i in range(tab.shape[1]):
            for j in range(tab.shape[1]):
                if i == j:
                    continue
                ok = (tab[:, i] >= 0) & (tab[:, j] >= 0)
                yield tab[ok, i], tab[ok, j], cells[ok]
    elif p[0] == "word":
        cells = np.arange(n, dtype=np.int64)
        w, b = cells // B, cells % B
        for i in range(1, B):
            for j in range(1, B):
                if i != j:
                    yield w * B + (b + i) % B, w * B + (b + j) % B, cells
    elif p[0] == "all":
        if n * (n - 1) * (n - 2) > MAX_TRIPLES:
            raise EngineLimitError(
                f"{n:,} cells have {n * (n - 1) * (n - 2):,} ordered cell triples for LF3, more than "
                f"marchkit lists ({MAX_TRIPLES:,}); use --pairs neighbours (LF3 aggressors are realistic "
                "next to the victim), word or sample:K, or leave LF3 out of --faults")
        for v in range(n):
            others = np.delete(np.arange(n, dtype=np.int64), v)
            a1, a2 = np.meshgrid(others, others, indexing="ij")
            keep = a1 != a2
            yield a1[keep], a2[keep], np.full(int(keep.sum()), v, dtype=np.int64)
    else:
        k, seed = p[1], p[2]
        total = n * (n - 1) * (n - 2)
        rng = np.random.default_rng(seed)
        k = min(k, total)
        got = np.empty(0, np.int64)
        while got.size < k:
            draw = rng.integers(0, n, size=(2 * (k - got.size) + 16, 3))
            ok = (draw[:, 0] != draw[:, 1]) & (draw[:, 0] != draw[:, 2]) & (draw[:, 1] != draw[:, 2])
            key = (draw[ok, 0] * n + draw[ok, 1]) * n + draw[ok, 2]
            got = np.unique(np.concatenate([got, key]))
        key = np.sort(rng.permutation(got)[:k])
        yield key // (n * n), (key // n) % n, key % n


def check_triples(kinds, mem, scope) -> None:
    """Refuse, before any work, an LF3 selection whose ``all`` scope has too many triples."""
    from ..errors import EngineLimitError

    from ..model import background_names

    n = mem.cells
    listed = len(scope.parts) > 1 or len(background_names(mem)) > 4   # else counted in closed form
    if (any(k.cls == "LF3" for k in kinds) and ("all",) in scope.parts and listed
            and n * (n - 1) * (n - 2) > MAX_TRIPLES):
        raise EngineLimitError(
            f"{n:,} cells have {n * (n - 1) * (n - 2):,} ordered cell triples for LF3, more than "
            f"marchkit lists ({MAX_TRIPLES:,}); use --pairs neighbours (LF3 aggressors are realistic "
            "next to the victim), word or sample:K, or leave LF3 out of --faults")


def lf3_count(mem, scope) -> int:
    parts = scope.parts
    n, B = mem.cells, mem.bits
    if len(parts) == 1:
        p = parts[0]
        if p[0] == "all":
            return n * (n - 1) * (n - 2)
        if p[0] == "word":
            return n * (B - 1) * (B - 2)
        if p[0] == "neighbours":
            deg = (_neighbour_table(mem) >= 0).sum(axis=1)
            return int((deg * (deg - 1)).sum())
        return min(p[1], n * (n - 1) * (n - 2))
    return sum(int(c[0].size) for c in lf3_triple_chunks(mem, scope))


# ---- the family --------------------------------------------------------------------------

from .family import Family, order_pattern, pattern_name  # noqa: E402


class GroupFamily(Family):
    """Kinds on three or more cells by role (group rules).  Two families share this code and
    the engine modules: ``linked3`` (LF3) and ``npsf`` (type-1 NPSF) — registered apart so
    that the engine can grade them in parallel."""

    name = "group"
    classes = ("LF3",) + NPSF_CLASSES
    labels = LF3_ROLES
    short_labels = LF3_ROLES
    needs = {
        "LF3": "needs each aggressor's primitive sensitised alone and the victim read before the other undoes it",
        "ANPSF": "needs each neighbour's transition under each pattern of the other neighbours, base in each "
                 "state, then a base read (tiling or multi-background tests; march tests miss most)",
        "PNPSF": "needs each base transition under each of the 16 neighbour patterns, then a base read "
                 "(march tests with solid data reach only the all-equal patterns)",
        "SNPSF": "needs each base value read under each of the 16 neighbour patterns "
                 "(march tests with solid data reach only a few)",
    }
    where = {}

    def __init__(self, name, classes):
        self.name = name
        self.classes = classes
        self.needs = {c: GroupFamily.needs[c] for c in classes}

    def groups(self, retention):
        if self.name == "linked3":
            return {"linked": [(1, LF3)], "all": [(12, LF3)]}
        return {"npsf": [(0, NPSF)], "all": [(13, NPSF)]}

    def class_kinds(self, cls, retention):
        return LF3 if cls == "LF3" else tuple(k for k in NPSF if k.cls == cls)

    def test_kinds(self, retention):
        return LF3[::24] if self.name == "linked3" else NPSF[::8]

    def instance_count(self, kind, mem, scope) -> int:
        return npsf_count(kind, mem) if kind.cls in NPSF_CLASSES else lf3_count(mem, scope)

    def enumerate_instances(self, kind, mem, scope):
        """NPSF sites are (base, N, S, E, W), -1 for a neighbour the array's edge cuts off
        (the ``--pairs`` scope does not apply: the neighbourhood is physical); LF3 sites are
        (a1, a2, v) from the pair scope (see :func:`lf3_triple_chunks`)."""
        from .catalogue import Instance

        if kind.cls in NPSF_CLASSES:
            for row in npsf_neighbourhoods(mem).tolist():
                if npsf_applies(kind, [c >= 0 for c in row[1:]]):
                    yield Instance(kind, tuple(row))
            return
        for a1, a2, v in lf3_triple_chunks(mem, scope):
            for t in zip(a1.tolist(), a2.tolist(), v.tolist()):
                yield Instance(kind, t)

    def init_values(self, kind):
        return kind.arity

    def site_words(self, inst, mem):
        return tuple(s // mem.bits for s in inst.sites if s >= 0)

    def structure(self, inst, mem, rank) -> str:
        names = [r for r, s in zip(roles(inst.kind), inst.sites) if s >= 0]
        words = [s // mem.bits for s in inst.sites if s >= 0]
        return pattern_name(order_pattern(words, rank), names)

    def instance_text(self, inst, mem) -> str:
        def cell(c):
            w, b = divmod(c, mem.bits)
            return f"w{w}" if mem.bits == 1 else f"w{w}.b{b}"

        return f"{inst.kind.text} " + " ".join(
            f"{r}={cell(c)}" for r, c in zip(roles(inst.kind), inst.sites) if c >= 0)

    def site_counts(self, kind):
        return (kind.arity, 0)


LINKED3 = GroupFamily("linked3", ("LF3",))
NPSF_FAMILY = GroupFamily("npsf", NPSF_CLASSES)
