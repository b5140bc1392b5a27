"""Diagnosis and repair speed on 1 Mbit: a script, not a test.

    python benchmarks/bench_diagnose.py [--repeat 3]

Diagnosis: for single faults of several families on a 1 Mbit array (131,072 words × 8 bits,
mux 8; March SS and March C-), the fail log is simulated, written as CSV and the whole
diagnosis is timed: reading and checking the log against the test, candidates, ranking,
equivalence classes, bitmap class and the split hint.  Target ≤ 2 s each.

Repair: a 1 Mbit bitmap (1024 × 1024) with 10,000 failing cells and 8 + 8 spares — three
shapes: lines plus scattered cells (repairable), the same with one line too many (must-repair
runs out), and 10^4 cells at random (unrepairable).  Target ≤ 1 s each.  The ratio column is
the time over the target.
"""

from __future__ import annotations

import argparse
from fractions import Fraction
import statistics
import tempfile
import time
from pathlib import Path


def bench_diagnose(repeat: int) -> list[tuple[str, float]]:
    from marchkit.diagnose import diagnose, fail_log_csv, read_fail_log
    from marchkit.engine.trace import Tracer
    from marchkit.faults import Instance, select_faults
    from marchkit.model import make_memory
    from marchkit.notation import resolve_test

    mem = make_memory(words=131072, bits=8, mux=8, clock="100MHz")
    cases = [
        ("March SS", "SA1", (777_777,), (), "neighbours"),
        ("March C-", "CFid<↑;1>", (5, 900_001), (0, 0), "all"),
        ("March SS", "<0w1/0/->", (123_457,), (0,), "neighbours"),
        ("March C-", "CFid<↑;1>", None, (0, 0), "neighbours"),
        ("March C-", "AF:multi", (4000, 4001), (), "neighbours"),
        ("March B", "SOF", (500_001,), (), "neighbours"),
        ("IFA-13", "DRF1(τ=1ms)", (300_003,), (), "neighbours"),
        ("March C-", "<1;0w1/0/->", None, (1, 0), "neighbours"),
    ]
    out = []
    with tempfile.TemporaryDirectory() as d:
        for test_name, kind_text, sites, inits, pairs in cases:
            test = resolve_test(test_name)
            kind = select_faults(kind_text, retention=(Fraction(1, 1000),)).kinds[0]
            if sites is None:        # a physical neighbour pair in the middle of the array
                from marchkit.diagnose.diagnosis import _neighbour_cells

                v = 65_536 * 8 + 3
                sites = (_neighbour_cells(mem, v)[0], v)
            inst = Instance(kind, sites)
            from marchkit.engine.core import n_init_cells

            inits = tuple(inits) + (0,) * (n_init_cells(kind) - len(inits))
            tr = Tracer(test, mem)
            comps = [c for c in tr.compares(inst, inits) if c.definite]
            if not comps:
                print(f"(skipped: {test_name} does not detect {inst.text(mem)} from {inits})")
                continue
            path = Path(d) / "fails.csv"
            path.write_text(fail_log_csv(comps, mem))
            times = []
            for _ in range(repeat):
                t0 = time.perf_counter()
                log = read_fail_log(path, mem, test)
                res = diagnose(test, mem, log, pairs=pairs)
                times.append(time.perf_counter() - t0)
            found = any((inst.kind.text, inst.sites) in {(k.text, s) for k, s in c.members()}
                        for c in res.consistent)
            label = (f"diagnose {test_name}, {kind_text} ({len(comps)} fails, pairs {pairs}): "
                     f"{len(res.candidates)} classes, injected fault at rank 1: {found}")
            out.append((label, statistics.median(times)))
    return out


def bench_repair(repeat: int) -> list[tuple[str, float]]:
    import numpy as np

    from marchkit.diagnose.repair import plan_repair

    rng = np.random.default_rng(2026)
    n = 1024

    def lines_plus(rows_k, cols_k, extra):
        rows = rng.choice(n, rows_k, replace=False)
        cols = rng.choice(n, cols_k, replace=False)
        per = (10_000 - extra) // (rows_k + cols_k)        # distinct cells along each line
        along = lambda: rng.choice(n, per, replace=False)  # noqa: E731
        r = np.concatenate([np.repeat(rows, per)] + [along() for _ in cols] + [rng.integers(0, n, extra)])
        c = np.concatenate([along() for _ in rows] + [np.repeat(cols, per)] + [rng.integers(0, n, extra)])
        return r, c

    def block_plus():
        r, c = lines_plus(5, 5, 0)
        br, bc = np.nonzero(rng.random((6, 6)) < 0.2)
        return np.concatenate([r, 300 + br * 7]), np.concatenate([c, 200 + bc * 5])

    cases = [
        ("5 rows + 5 columns + 4 cells", lines_plus(5, 5, 4)),
        ("9 rows + 5 columns + 4 cells", lines_plus(9, 5, 4)),
        ("8 rows + 8 columns", lines_plus(8, 8, 0)),
        ("10^4 random cells", (rng.integers(0, n, 10_000), rng.integers(0, n, 10_000))),
        ("5 rows + 5 columns + a 6×6 block at 20 % (branch and bound)", block_plus()),
    ]
    out = []
    for label, (r, c) in cases:
        times = []
        for _ in range(repeat):
            t0 = time.perf_counter()
            plan = plan_repair(r, c, n, n, 8, 8)
            times.append(time.perf_counter() - t0)
        verdict = (f"repairable with {plan.spares_used} spares" if plan.repairable else "not repairable")
        out.append((f"repair 1024², {plan.fails} fails, 8+8, {label}: {verdict} ({plan.nodes} nodes)",
                    statistics.median(times)))
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    print(f"{'case':<100} {'seconds':>8} {'target':>7} {'ratio':>6}")
    for label, t in bench_diagnose(args.repeat):
        print(f"{label:<100} {t:8.3f} {2.0:7.1f} {t / 2.0:6.2f}")
    for label, t in bench_repair(args.repeat):
        print(f"{label:<100} {t:8.3f} {1.0:7.1f} {t / 1.0:6.2f}")


if __name__ == "__main__":
    main()
