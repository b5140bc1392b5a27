"""Figures for `marchkit generate`: time to first solution and to proof, lengths, Dask speed-up.

    PYTHONPATH=. python benchmarks/bench_generate.py [--quick] [--static-time S] [--skip-dask]

Targets (the issue): classic set → 10n proven in ≤ 30 s (March C-, van de Goor 1991); the 48
static primitives → ≤ 18n in ≤ 10 min (March MSS, Harutyunyan, Vardanian, Zorian VTS 2005,
from memory); static + dynamic: compared with every library test; word-oriented 8-bit with
intra-word coupling; Dask 2 workers vs 1: same test, speed-up.
"""

from __future__ import annotations

import argparse
import time


def line(label, g, t_total):
    from marchkit.notation import format_notation

    proof = "proven minimal" if g.proven_minimal else f"not proven (bound {g.lower_bound}n reached{', ' + g.stopped if g.stopped else ''})"
    print(f"{label:<28} {g.length:>3}n  {proof}")
    print(f"{'':<28} first solution {g.first_solution_seconds:7.2f} s   total {t_total:7.2f} s   "
          f"nodes {g.nodes:,}   keys {g.keys}   coverage {100 * g.grade.total.coverage:.2f} %")
    print(f"{'':<28} {format_notation(g.test)}")
    if g.excluded:
        print(f"{'':<28} excluded (no march test detects them): {len(g.excluded)} kind/structure pairs, e.g. "
              f"{g.excluded[0][0]} ({g.excluded[0][1]})")


def run(label, *args, **kw):
    from marchkit.generate import generate

    t = time.perf_counter()
    g = generate(*args, **kw)
    line(label, g, time.perf_counter() - t)
    return g


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true", help="short time limits")
    ap.add_argument("--static-time", type=float, default=120.0)
    ap.add_argument("--skip-dask", action="store_true")
    ap.add_argument("--only-dask", action="store_true")
    a = ap.parse_args()
    from marchkit.grade import grade
    from marchkit.model import make_memory
    from marchkit.notation import format_notation, library

    lim = 20.0 if a.quick else None
    mem = make_memory(64)
    if a.only_dask:
        return dask_part()
    print("== classic set (SAF, TF, AF, CFin, CFid, CFst), 64 × 1, serial; target 10n proven ≤ 30 s")
    run("classic", "SAF,TF,AF,CFin,CFid,CFst", mem)

    print(f"\n== 48 static primitives, 64 × 1; target ≤ 18n within 10 min (time limit {lim or a.static_time:g} s)")
    run("static", "static", mem, time_limit=lim or a.static_time)

    print("\n== 48 static + 30 single-cell dynamic primitives, 64 × 1")
    g = run("static + dynamic", "static,dynamic", mem, time_limit=lim or 60.0)
    print("   library tests on the same faults (this memory):")
    for t in library():
        if t.delays:
            continue
        r = grade(t, mem, "static,dynamic")
        dyn = sum(k.detected for k in r.kinds if k.kind.cls.startswith("d"))
        dyn_n = sum(k.instances for k in r.kinds if k.kind.cls.startswith("d"))
        print(f"   {t.name:<12} {t.ops_per_cell:>3}n  all {100 * r.total.coverage:6.2f} %   dynamic {100 * dyn / dyn_n:6.2f} %"
              + ("   detects all" if r.total.detected == r.total.instances else ""))
    print(f"   generated    {g.length:>3}n  all {100 * g.grade.total.coverage:6.2f} %")

    print("\n== word-oriented: 32 words × 8 bits, intra-word backgrounds, pairs word + neighbours, static")
    wmem = make_memory(32, bits=8, backgrounds="word")
    run("static, 8-bit words", "static", wmem, "word,neighbours", time_limit=lim or 60.0)

    if not a.skip_dask:
        dask_part()


def dask_part():
    from marchkit.generate import generate
    from marchkit.model import make_memory
    from marchkit.notation import format_notation
    from marchkit.plan.cluster import open_client

    sel = "SAF,TF,CFin,CFid,CFst,WDF,DRDF"
    print(f"\n== Dask: exact search for {sel} (proof at 14n), 16 × 1, every bound on the cluster")
    smem = make_memory(16)
    times, tests = {}, {}
    t = time.perf_counter()
    g = generate(sel, smem, local_nodes=0)
    print(f"   serial     {g.length}n  proven {g.proven_minimal}  {time.perf_counter() - t:7.2f} s  "
          f"{format_notation(g.test)}  (one transposition table for all chunks)")
    for n in (1, 2):
        with open_client(workers=n) as client:
            t = time.perf_counter()
            g = generate(sel, smem, executor=client, local_nodes=0)
            times[n] = time.perf_counter() - t
            tests[n] = format_notation(g.test)
            print(f"   {n} worker{'s' if n > 1 else ' '}  {g.length}n  proven {g.proven_minimal}  {times[n]:7.2f} s  {tests[n]}")
    print(f"   same test: {tests[1] == tests[2]}   speed-up 2 vs 1 workers: {times[1] / times[2]:.2f}×")


if __name__ == "__main__":
    main()
