"""The fail bitmap on the physical array, and its classification.

A failing cell ``(word, bit)`` sits at ``(row, column)`` of the physical array
(:meth:`marchkit.model.Memory.place`: scrambling, then the column mux).  The classes are the
usual ones of failure analysis (common practice, no source):

* ``single cell`` — one failing cell;
* ``cell pair`` — two failing cells (``adjacent`` tells whether they touch);
* ``word`` — several bits of one logical word and nothing else;
* ``row`` / ``column`` — three or more failing cells, all in one physical row (column);
* ``cluster`` — failing cells forming one connected blob (8-neighbourhood, gaps of one cell
  bridged) that is neither a line nor a word;
* ``whole array`` — a quarter of the cells or more fail, or half of the rows (columns) are
  failing lines, or the cells outside lines reach half of the rows and half of the columns;
* ``multiple`` — none of the above: the parts (lines and blobs) are listed.

Every classification also lists its parts: rows and columns holding three or more failing
cells (``row``/``column`` lines), then the remaining cells grouped into blobs (single cells,
pairs, clusters).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

LINE_MIN = 3


@dataclass
class Part:
    kind: str                   # 'row', 'column', 'single cell', 'cell pair', 'cluster'
    cells: int
    rows: tuple[int, int]       # first and last row
    cols: tuple[int, int]

    def to_json(self) -> dict:
        return {"class": self.kind, "cells": self.cells, "rows": list(self.rows), "columns": list(self.cols)}


@dataclass
class Bitmap:
    """Failing cells of an array of ``rows`` × ``cols`` (``r``, ``c``: int64 arrays, one entry
    per failing cell, no repeats)."""

    rows: int
    cols: int
    r: np.ndarray
    c: np.ndarray
    mux: int = 1
    words: np.ndarray | None = None     # logical word of each failing cell, when known
    kind: str = ""
    detail: str = ""
    parts: list = field(default_factory=list)

    @property
    def count(self) -> int:
        return int(self.r.size)

    def to_json(self, cells_limit: int = 10_000) -> dict:
        out = {"class": self.kind, "detail": self.detail, "rows": self.rows, "columns": self.cols,
               "mux": self.mux, "failing_cells": self.count,
               "parts": [p.to_json() for p in self.parts]}
        n = min(self.count, cells_limit)
        out["cells"] = [[int(a), int(b)] for a, b in zip(self.r[:n], self.c[:n])]
        if n < self.count:
            out["cells_listed"] = n
        return out


def bitmap_from_cells(mem, cells) -> Bitmap:
    """The bitmap of failing logical cells ``[(word, bit), ...]`` on ``mem``'s physical array."""
    if len(cells):
        a = np.asarray(cells, dtype=np.int64).reshape(-1, 2)
        r, c = mem.place(a[:, 0], a[:, 1])
        words = a[:, 0]
    else:
        r = c = words = np.empty(0, np.int64)
    bm = Bitmap(mem.rows, mem.columns, np.asarray(r, np.int64), np.asarray(c, np.int64), mem.mux, words)
    return classify(bm)


def bitmap_from_rc(rows: int, cols: int, r, c) -> Bitmap:
    key = np.unique(np.asarray(r, np.int64) * cols + np.asarray(c, np.int64))
    return classify(Bitmap(rows, cols, key // cols, key % cols))


def _blobs(r, c):
    """Connected groups of cells (cells within two rows and two columns of each other are
    joined: 8-neighbourhood with a one-cell gap bridged).  Returns a label per cell."""
    n = r.size
    parent = list(range(n))

    def find(i):
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    if n > 1:
        order = np.lexsort((c, r))
        rs, cs = r[order], c[order]
        # sweep: compare each cell with the cells of the previous two rows within ±2 columns
        index = {}
        for k in range(n):
            i = int(order[k])
            rr, cc = int(rs[k]), int(cs[k])
            for dr in (0, 1, 2):
                for dc in range(-2, 3):
                    j = index.get((rr - dr, cc + dc))
                    if j is not None and (dr or dc):
                        a, b = find(i), find(j)
                        if a != b:
                            parent[a] = b
            index[(rr, cc)] = i
    return np.array([find(i) for i in range(n)], dtype=np.int64)


def classify(bm: Bitmap) -> Bitmap:
    r, c = bm.r, bm.c
    n = r.size
    bm.parts = []
    if n == 0:
        bm.kind, bm.detail = "none", "no failing cells"
        return bm
    ur, uc = np.unique(r), np.unique(c)
    # a dense block (two or more rows and columns, at least half its box failing) is a cluster,
    # not a bundle of short rows and columns: its cells are set aside before lines are counted
    dense = np.zeros(n, dtype=bool)
    blocks = []
    if 3 <= n <= 200_000:
        lab = _blobs(r, c)
        for u in np.unique(lab):
            idx = np.nonzero(lab == u)[0]
            h = int(r[idx].max() - r[idx].min()) + 1
            w = int(c[idx].max() - c[idx].min()) + 1
            # (a block spanning a quarter of the array's width or height stays lines: two
            # shorted rows fail side by side over the whole row and are two rows)
            if 2 <= h < bm.rows / 4 and 2 <= w < bm.cols / 4 and 2 * idx.size >= h * w:
                dense[idx] = True
                blocks.append(idx)
    # lines: rows / columns with LINE_MIN or more failing cells outside dense blocks
    rows_cnt = np.bincount(r[~dense], minlength=bm.rows)
    cols_cnt = np.bincount(c[~dense], minlength=bm.cols)
    line_rows = np.nonzero(rows_cnt >= LINE_MIN)[0]
    line_cols = np.nonzero(cols_cnt >= LINE_MIN)[0]
    in_line = (np.isin(r, line_rows) | np.isin(c, line_cols)) & ~dense
    for x in line_rows:
        m = r == x
        bm.parts.append(Part("row", int(m.sum()), (int(x), int(x)), (int(c[m].min()), int(c[m].max()))))
    for x in line_cols:
        m = c == x
        bm.parts.append(Part("column", int(m.sum()), (int(r[m].min()), int(r[m].max())), (int(x), int(x))))
    for idx in blocks:
        bm.parts.append(Part("cluster", int(idx.size), (int(r[idx].min()), int(r[idx].max())),
                             (int(c[idx].min()), int(c[idx].max()))))
    rest = np.nonzero(~in_line & ~dense)[0]
    if rest.size and rest.size <= 200_000:
        lab = _blobs(r[rest], c[rest])
        for u in np.unique(lab):
            idx = rest[lab == u]
            k = idx.size
            kind = "single cell" if k == 1 else "cell pair" if k == 2 else "cluster"
            bm.parts.append(Part(kind, k, (int(r[idx].min()), int(r[idx].max())),
                                 (int(c[idx].min()), int(c[idx].max()))))
    elif rest.size:
        bm.parts.append(Part("scattered", int(rest.size), (int(r[rest].min()), int(r[rest].max())),
                             (int(c[rest].min()), int(c[rest].max()))))

    one_word = bm.words is not None and np.unique(bm.words).size == 1
    if n == 1:
        bm.kind, bm.detail = "single cell", f"row {int(r[0])}, column {int(c[0])}"
    elif one_word:
        bm.kind = "word"
        bm.detail = f"{n} bits of word {int(bm.words[0])} (row {int(r[0])})"
    elif n == 2:
        adj = abs(int(r[0]) - int(r[1])) <= 1 and abs(int(c[0]) - int(c[1])) <= 1
        bm.kind = "cell pair"
        bm.detail = (f"({int(r[0])}, {int(c[0])}) and ({int(r[1])}, {int(c[1])}), "
                     + ("adjacent" if adj else "not adjacent"))
    elif ur.size == 1:
        bm.kind = "row"
        bm.detail = f"{n} failing cells in row {int(ur[0])}" + (" (the whole row)" if n == bm.cols else "")
    elif uc.size == 1:
        bm.kind = "column"
        bm.detail = f"{n} failing cells in column {int(uc[0])}" + (" (the whole column)" if n == bm.rows else "")
    elif _whole(bm, r, c, in_line, line_rows, line_cols):
        bm.kind = "whole array"
        bm.detail = f"{n} failing cells in {ur.size} of {bm.rows} rows and {uc.size} of {bm.cols} columns"
    elif len(bm.parts) == 1 and bm.parts[0].kind == "cluster":
        bm.kind = "cluster"
        p = bm.parts[0]
        bm.detail = f"{n} failing cells within rows {p.rows[0]}–{p.rows[1]}, columns {p.cols[0]}–{p.cols[1]}"
    else:
        bm.kind = "multiple"
        counts: dict[str, int] = {}
        for p in bm.parts:
            counts[p.kind] = counts.get(p.kind, 0) + 1
        bm.detail = ", ".join(f"{v} {k}{'s' if v > 1 else ''}" for k, v in counts.items())
    if bm.words is not None and bm.kind not in ("single cell", "word"):
        uw = np.unique(bm.words)
        if 1 < uw.size <= 4:
            bm.detail += f" (in words {', '.join(str(int(w)) for w in uw)})"
    return bm


def _whole(bm, r, c, in_line, line_rows, line_cols) -> bool:
    if r.size >= max(3, bm.rows * bm.cols / 4):
        return True
    if line_rows.size >= max(2, bm.rows / 2) or line_cols.size >= max(2, bm.cols / 2):
        return True
    rest = ~in_line
    return (np.unique(r[rest]).size >= max(2, bm.rows / 2)
            and np.unique(c[rest]).size >= max(2, bm.cols / 2))
