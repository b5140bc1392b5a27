"""Spare allocation: which rows and columns to replace so that no failing cell is left.

The problem — cover every failing cell by a replaced row or a replaced column, with at most
``R`` spare rows and ``C`` spare columns — is NP-complete (Kuo & Fuchs, "Efficient spare
allocation for reconfigurable arrays", IEEE Design & Test 4(1), 1987).  Spares are few, so an
exact search is affordable.  This module follows Kuo & Fuchs:

1. **Must-repair**: a row with more failing cells than spare columns left can only be
   repaired by a spare row (and a column with more failing cells than spare rows left only by
   a spare column); repeat until nothing changes.
2. **Early abort**: after must-repair every row has at most ``C`` failing cells and every
   column at most ``R``, so ``R`` rows and ``C`` columns cover at most ``2·R·C`` cells; more
   left means the array cannot be repaired.
3. **Branch and bound** on what is left: take the row with the most failing cells; either
   replace it, or replace every column of its failing cells (if the row is not replaced,
   each of its cells needs its column).  A lower bound prunes: a set of failing cells no two
   of which share a row or a column (a matching) needs one spare each, so the size of a
   maximum matching (König: it equals the minimum number of lines covering all the cells)
   bounds the spares still needed.

The result is optimal: the fewest spares in total among all allocations within the budget
(ties broken towards fewer spare rows, then the lowest numbered lines).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError


@dataclass
class RepairPlan:
    repairable: bool
    rows: list[int]                   # rows to replace (physical row numbers), sorted
    cols: list[int]                   # columns to replace, sorted
    spare_rows: int                   # spares available
    spare_cols: int
    fails: int                        # failing cells
    must_rows: list[int] = field(default_factory=list)
    must_cols: list[int] = field(default_factory=list)
    reason: str = ""                  # why not repairable
    nodes: int = 0                    # branch-and-bound nodes visited

    @property
    def spares_used(self) -> int:
        return len(self.rows) + len(self.cols)

    def to_json(self) -> dict:
        return {
            "repairable": self.repairable,
            "rows": self.rows,
            "cols": self.cols,
            "spares_used": {"rows": len(self.rows), "cols": len(self.cols), "total": self.spares_used},
            "spares": {"rows": self.spare_rows, "cols": self.spare_cols},
            "must_repair": {"rows": self.must_rows, "cols": self.must_cols},
            "failing_cells": self.fails,
            "optimal": self.repairable,
            "reason": self.reason,
        }


def _must_repair_numpy(r, c, R, C):
    """Must-repair on arrays: (rows taken, cols taken, remaining r, c, R, C) or None."""
    rows_taken: list[int] = []
    cols_taken: list[int] = []
    while r.size:
        changed = False
        ur, cnt = np.unique(r, return_counts=True)
        must = ur[cnt > C]
        if must.size:
            if must.size > R:
                return rows_taken + must.tolist(), cols_taken, None, None, R - must.size, C
            rows_taken += must.tolist()
            R -= must.size
            keep = ~np.isin(r, must)
            r, c = r[keep], c[keep]
            changed = True
        uc, cnt = np.unique(c, return_counts=True)
        must = uc[cnt > R]
        if must.size:
            if must.size > C:
                return rows_taken, cols_taken + must.tolist(), None, None, R, C - must.size
            cols_taken += must.tolist()
            C -= must.size
            keep = ~np.isin(c, must)
            r, c = r[keep], c[keep]
            changed = True
        if not changed:
            break
    return rows_taken, cols_taken, r, c, R, C


def _max_matching(cells) -> int:
    """Size of a maximum matching of the bipartite graph rows–columns with an edge per cell."""
    adj: dict[int, list[int]] = {}
    for r, c in cells:
        adj.setdefault(r, []).append(c)
    match_col: dict[int, int] = {}

    def augment(r, seen):
        for c in adj[r]:
            if c in seen:
                continue
            seen.add(c)
            if c not in match_col or augment(match_col[c], seen):
                match_col[c] = r
                return True
        return False

    n = 0
    for r in adj:
        if augment(r, set()):
            n += 1
    return n


class _Search:
    def __init__(self):
        self.best = None          # (total, rows, cols)
        self.nodes = 0

    def solve(self, cells: frozenset, R: int, C: int, rows: tuple, cols: tuple):
        self.nodes += 1
        # must-repair on this node
        cells = set(cells)
        rows, cols = list(rows), list(cols)
        while True:
            by_row: dict[int, int] = {}
            by_col: dict[int, int] = {}
            for r, c in cells:
                by_row[r] = by_row.get(r, 0) + 1
                by_col[c] = by_col.get(c, 0) + 1
            mr = [r for r, k in by_row.items() if k > C]
            mc = [c for c, k in by_col.items() if k > R]
            if not mr and not mc:
                break
            if mr:
                if len(mr) > R:
                    return
                R -= len(mr)
                rows += mr
                s = set(mr)
                cells = {x for x in cells if x[0] not in s}
            else:
                if len(mc) > C:
                    return
                C -= len(mc)
                cols += mc
                s = set(mc)
                cells = {x for x in cells if x[1] not in s}
        used = len(rows) + len(cols)
        if not cells:
            cand = (used, len(rows), sorted(rows), sorted(cols))
            if self.best is None or cand < self.best:
                self.best = cand
            return
        if len(cells) > 2 * R * C:
            return
        lb = _max_matching(cells)
        if lb > R + C:
            return
        if self.best is not None and used + lb > self.best[0]:
            return
        # the row with the most failing cells (lowest number on ties)
        r0 = min(by_row, key=lambda r: (-by_row[r], r))
        row_cols = sorted(c for r, c in cells if r == r0)
        # branch 1: replace row r0
        if R >= 1:
            self.solve(frozenset(x for x in cells if x[0] != r0), R - 1, C, tuple(rows) + (r0,), tuple(cols))
        # branch 2: keep row r0, replace every column of its cells
        if len(row_cols) <= C:
            s = set(row_cols)
            self.solve(frozenset(x for x in cells if x[1] not in s), R, C - len(row_cols),
                       tuple(rows), tuple(cols) + tuple(row_cols))


def plan_repair(r, c, rows: int, cols: int, spare_rows: int, spare_cols: int) -> RepairPlan:
    """The optimal repair of the failing cells at ``(r[i], c[i])`` (int arrays, any repeats)
    of a ``rows`` × ``cols`` array with ``spare_rows`` spare rows and ``spare_cols`` spare
    columns."""
    if spare_rows < 0 or spare_cols < 0:
        raise InputError("the numbers of spare rows and columns must not be negative")
    r = np.asarray(r, dtype=np.int64).ravel()
    c = np.asarray(c, dtype=np.int64).ravel()
    if r.size != c.size:
        raise InputError("rows and columns of the failing cells differ in number")
    if r.size and (r.min() < 0 or r.max() >= rows or c.min() < 0 or c.max() >= cols):
        raise InputError(f"a failing cell lies outside the {rows} × {cols} array")
    if r.size:
        key = np.unique(r * cols + c)
        r, c = key // cols, key % cols
    nfails = int(r.size)
    R, C = spare_rows, spare_cols
    mr, mc, r2, c2, R2, C2 = _must_repair_numpy(r, c, R, C)
    plan = RepairPlan(False, [], [], spare_rows, spare_cols, nfails, sorted(mr), sorted(mc))
    if r2 is None:
        plan.reason = ("more rows need a spare row than there are spare rows (must-repair)" if R2 < 0
                       else "more columns need a spare column than there are spare columns (must-repair)")
        return plan
    if r2.size > 2 * R2 * C2:
        plan.reason = (f"after must-repair {r2.size} failing cells are left, more than "
                       f"{R2} spare rows and {C2} spare columns can cover ({2 * R2 * C2} at most)")
        return plan
    s = _Search()
    s.solve(frozenset(zip(r2.tolist(), c2.tolist())), R2, C2, tuple(mr), tuple(mc))
    plan.nodes = s.nodes
    if s.best is None:
        plan.reason = "no allocation of the spares covers every failing cell (exhaustive search)"
        return plan
    plan.repairable = True
    plan.rows, plan.cols = s.best[2], s.best[3]
    return plan


def read_bitmap(path, rows: int, cols: int):
    """(r, c) int arrays from a CSV with header ``row,col`` (errors name the line)."""
    from pathlib import Path

    from ..errors import SourcePos
    from .faillog import FailLogError

    from .faillog import read_text_file

    name = str(path)
    text = read_text_file(path, "bitmap file")
    lines = text.split("\n")
    rr, cc = [], []
    header = False
    for i, line in enumerate(lines, 1):
        s = line.strip()
        if not s or s.startswith("#"):
            continue
        if not header:
            if [h.strip().lower() for h in s.split(",")] != ["row", "col"]:
                raise FailLogError("a bitmap file starts with the header row,col", SourcePos(i, 1, name), text)
            header = True
            continue
        parts = s.split(",")
        if len(parts) != 2:
            raise FailLogError(f"a row has 2 fields (row,col), this one has {len(parts)}", SourcePos(i, 1, name), text)
        try:
            a, b = int(parts[0]), int(parts[1])
        except ValueError:
            raise FailLogError("row and col are decimal numbers", SourcePos(i, 1, name), text) from None
        if not 0 <= a < rows:
            raise FailLogError(f"row {a} is outside the array (0..{rows - 1})", SourcePos(i, 1, name), text)
        if not 0 <= b < cols:
            col = len(parts[0]) + 2
            raise FailLogError(f"column {b} is outside the array (0..{cols - 1})", SourcePos(i, col, name), text)
        rr.append(a)
        cc.append(b)
    if not header:
        raise FailLogError("the bitmap file is empty (no header row,col)", SourcePos(1, 1, name), text)
    return np.array(rr, dtype=np.int64), np.array(cc, dtype=np.int64)
