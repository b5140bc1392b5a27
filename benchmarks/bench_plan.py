"""Figures for `marchkit plan` on the example SoC (examples/soc.toml: 204 memories, 20 types).

* cold: empty cache, a local Dask cluster of 2 workers (start-up included), grading, choice
  and schedule (CP-SAT within the file's time limit) — target ≤ 60 s on 2 cores;
* warm: the same again, answered by the cache (no cluster is started) — target ≤ 2 s;
* grading on 1 worker against 2 (each from an empty cache): the speed-up.

    python benchmarks/bench_plan.py [SOC.toml] [--skip-one]

The machine's load is printed too: on a shared machine the figures move with it.
"""

from __future__ import annotations

import os
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))


def _cpu():
    import time as _t

    return _t.process_time()


def run(soc_path, cache_dir, workers):
    """(wall seconds, plan, data, CPU seconds the workers spent grading)."""
    from marchkit.plan.cluster import open_client
    from marchkit.plan.planner import make_plan
    from marchkit.plan.soc import read_soc

    t0 = time.perf_counter()
    soc = read_soc(soc_path)
    cpu = {"s": 0.0}
    clients = []

    class Connect:
        def __enter__(self):
            self.cm = open_client(workers=workers)
            c = self.cm.__enter__()
            self.before = c.run(_cpu)
            clients.append(c)
            return c

        def __exit__(self, *exc):
            after = clients[-1].run(_cpu)
            cpu["s"] = sum(after[k] - self.before.get(k, 0.0) for k in after)
            return self.cm.__exit__(*exc)

    plan = make_plan(soc, cache_dir=cache_dir, connect=Connect)
    data = plan.to_json()
    return time.perf_counter() - t0, plan, data, cpu["s"]


def main():
    args = [a for a in sys.argv[1:] if not a.startswith("--")]
    soc_path = args[0] if args else str(ROOT / "examples" / "soc.toml")
    print(f"SoC file: {soc_path}   cores: {os.cpu_count()}   load: {os.getloadavg()[0]:.1f}")
    with tempfile.TemporaryDirectory() as tmp:
        c2 = Path(tmp) / "two"
        cold, plan, data, cpu2 = run(soc_path, c2, 2)
        print(f"{len(data['instances'])} memories, {len(data['types'])} (type, clock) pairs, "
              f"{data['graded']['jobs']} test × memory pairs graded")
        print(f"cold, 2 workers:  {cold:7.2f} s  (grading {plan.grade_seconds:.2f} s, "
              f"schedule {data['schedule']['solve_seconds']:.2f} s: {data['schedule']['status']}, "
              f"gap {100 * data['schedule']['gap']:.1f} %)   target ≤ 60 s")
        warm, plan_w, data_w, _ = run(soc_path, c2, 2)
        assert data_w["graded"]["computed"] == 0
        assert data_w["total_test_time_s"] == data["total_test_time_s"]
        print(f"warm (cache):     {warm:7.2f} s  (no cluster started)   target ≤ 2 s   "
              f"cold/warm = {cold / warm:.0f}×")
        print(f"total test time of the plan: {data['total_test_time_s'] * 1e3:.4g} ms")
        if "--skip-one" in sys.argv:
            return
        c1 = Path(tmp) / "one"
        _, plan1, data1, cpu1 = run(soc_path, c1, 1)
        assert [t["candidates"] for t in data1["types"]] == [t["candidates"] for t in data["types"]]
        print(f"grading on 1 worker: {plan1.grade_seconds:7.2f} s; on 2 workers: {plan.grade_seconds:7.2f} s; "
              f"speed-up of 2 workers over 1: {plan1.grade_seconds / plan.grade_seconds:.2f}×")
        # on a machine shared with other work the wall-clock speed-up says little: the CPU
        # the workers actually got tells how much of the two cores the grading had
        print(f"CPU seconds spent grading in the workers: 1 worker {cpu1:.1f} s "
              f"({cpu1 / plan1.grade_seconds:.2f} cores busy on average), 2 workers {cpu2:.1f} s "
              f"({cpu2 / plan.grade_seconds:.2f} cores busy)")
        print(f"load at the end: {os.getloadavg()[0]:.1f}")


if __name__ == "__main__":
    main()
