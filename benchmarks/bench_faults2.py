"""Benchmark of the families added for linked, two-cell dynamic and pattern-sensitive faults
(a script, not a test).

    python benchmarks/bench_faults2.py            # the target workload, 3 repeats, + per family
    python benchmarks/bench_faults2.py --quick    # one repeat, no per-family breakdown

Target (issue 10): ``marchkit grade "March SL" --words 65536 --bits 16 --faults all --pairs
neighbours`` in at most 10 s for the whole command on 2 cores and at most 1.5 GB.  The command
runs in a fresh process (``python -m marchkit`` with this checkout on the path); the script
prints its wall time, the peak resident set of the child, the ratios to the targets and the
machine's load average (the sandbox is shared: a loaded machine stretches wall times).  The
per-family breakdown grades each family alone in this process (one core, no fork).
"""

from __future__ import annotations

import argparse
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
CMD = ["grade", "March SL", "--words", "65536", "--bits", "16", "--faults", "all", "--pairs", "neighbours"]
TARGET_S = 10.0
TARGET_GB = 1.5


def run_cli():
    env = dict(os.environ, PYTHONPATH=str(ROOT), COLUMNS="120")
    before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    t0 = time.perf_counter()
    out = subprocess.run([sys.executable, "-m", "marchkit", *CMD], env=env, capture_output=True, text=True)
    wall = time.perf_counter() - t0
    peak_kb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    if out.returncode != 0:
        raise SystemExit(out.stderr)
    last = [line for line in out.stdout.splitlines() if "fault instances" in line]
    return wall, max(peak_kb, before) / 1024 / 1024, last[-1].strip() if last else ""


def per_family():
    sys.path.insert(0, str(ROOT))
    from marchkit.engine.fast import Engine
    from marchkit.faults import parse_pairs, select_faults
    from marchkit.model import make_memory
    from marchkit.notation import find_in_library

    mem = make_memory(65536, 16)
    eng = Engine(find_in_library("March SL"), mem)
    scope = parse_pairs("neighbours")
    groups: dict = {}
    for k in select_faults("all").kinds:
        sub = k.family
        groups.setdefault((k.family, sub), []).append(k)
    for (fam, label), kinds in groups.items():
        t0 = time.perf_counter()
        res = eng.grade_family(fam, kinds, scope)
        dt = time.perf_counter() - t0
        n = sum(r.instances for r in res.values())
        print(f"  {label:14s} {len(kinds):5d} kinds  {n:>16,} instances  {dt:6.2f} s")


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true")
    args = ap.parse_args()
    repeats = 1 if args.quick else 3
    print("marchkit " + " ".join(f'"{c}"' if " " in c else c for c in CMD))
    walls = []
    for i in range(repeats):
        wall, gb, line = run_cli()
        walls.append(wall)
        load = os.getloadavg()[0]
        print(f"  run {i + 1}: {wall:6.2f} s whole command (target {TARGET_S} s, ratio {wall / TARGET_S:.2f}); "
              f"peak {gb:.2f} GB (target {TARGET_GB} GB, ratio {gb / TARGET_GB:.2f}); load average {load:.1f}")
        print(f"         {line}")
    print(f"  best {min(walls):.2f} s, median {sorted(walls)[len(walls) // 2]:.2f} s")
    if not args.quick:
        print("per family, one process, one core:")
        per_family()


if __name__ == "__main__":
    main()
