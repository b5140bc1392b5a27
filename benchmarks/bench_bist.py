"""Area of the generated BIST controllers: a script, not a test.

    python benchmarks/bench_bist.py [--tests "MATS+,March C-,March SS,March RAW"]
                                    [--sizes 1Kx8,16Kx16,256Kx32,1Mx64] [--quick]

For each style (``fsm``, ``program``) it synthesizes the controller with yosys (generic cells,
``synth -flatten``; see marchkit/bist/area.py) and prints cells and flip-flops

* per test on a 1K × 8 memory (solid background, linear order);
* per memory size for March C- (the ``program`` controller does not depend on the test: its
  instruction memory is counted apart, as PROG_DEPTH × 40 bits);
* per option (address order, backgrounds, multi-cycle operations, read latency, transparent
  test) for March C- on 1K × 8.

It also prints the ratio of the two styles and the generation time.  Needs yosys.
"""

from __future__ import annotations

import argparse
import re
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))


def size(text: str) -> tuple[int, int]:
    m = re.fullmatch(r"(\d+)([KM]?)x(\d+)", text.strip(), re.I)
    if not m:
        raise SystemExit(f"bad size {text!r}: write 1Kx8, 1Mx64, ...")
    n = int(m.group(1)) * {"": 1, "K": 1024, "M": 1 << 20}[m.group(2).upper()]
    return n, int(m.group(3))


def main() -> None:
    from marchkit.bist import generate
    from marchkit.bist.area import have_yosys, synth_area
    from marchkit.model import make_memory
    from marchkit.notation import resolve_test

    ap = argparse.ArgumentParser()
    ap.add_argument("--tests", default="MATS+,March C-,March SS,March RAW")
    ap.add_argument("--sizes", default="1Kx8,16Kx16,256Kx32,1Mx64")
    ap.add_argument("--quick", action="store_true", help="only the first test and the first size")
    args = ap.parse_args()
    if not have_yosys():
        raise SystemExit("yosys is not installed")
    tests = [t for t in args.tests.split(",") if t.strip()]
    sizes = [size(s) for s in args.sizes.split(",") if s.strip()]
    if args.quick:
        tests, sizes = tests[:1], sizes[:1]

    def row(label, test, mem, **kw):
        out = {}
        for style in ("fsm", "program"):
            t0 = time.perf_counter()
            ir, files, depth = generate(resolve_test(test), mem, style, "mbist", **kw)
            gen = time.perf_counter() - t0
            t0 = time.perf_counter()
            a = synth_area(files, "mbist", style, depth)
            out[style] = (a, gen, time.perf_counter() - t0, ir)
        f, p = out["fsm"][0], out["program"][0]
        ir = out["fsm"][3]
        print(f"{label:<22} {ir.cycles:>12,} {f['cells']:>7} {f['flip_flops']:>6} "
              f"{p['cells']:>7} {p['flip_flops']:>6} {p['program_bits']:>7} "
              f"{p['cells'] / f['cells']:>6.2f} {out['fsm'][1] * 1e3:>6.0f} {out['fsm'][2]:>6.1f}")

    head = (f"{'':<22} {'cycles':>12} {'fsm':>7} {'':>6} {'program':>7} {'':>6} {'prog':>7} "
            f"{'ratio':>6} {'gen':>6} {'synth':>6}\n"
            f"{'':<22} {'':>12} {'cells':>7} {'FFs':>6} {'cells':>7} {'FFs':>6} {'bits':>7} "
            f"{'p/f':>6} {'ms':>6} {'s':>6}")
    print("Per test, 1K x 8, solid background, linear order (yosys generic synthesis)")
    print(head)
    mem = make_memory(1024, 8, name="bench_1k8")
    for t in tests:
        row(t, t, mem)
    print()
    print("Per memory size, March C-")
    print(head)
    for n, b in sizes:
        mem = make_memory(n, b, name="bench")
        row(f"{n // 1024}K x {b}" if n < (1 << 20) else f"{n >> 20}M x {b}", "March C-", mem)
    if args.quick:
        return
    print()
    print("Options, March C- on 1K x 8")
    print(head)
    for label, mkw, kw in (
        ("linear, solid", {}, {}),
        ("gray", {"order": "gray"}, {}),
        ("complement", {"order": "complement"}, {}),
        ("random:1 (LFSR)", {"order": "random:1"}, {}),
        ("checkerboard, mux 4", {"backgrounds": "checkerboard", "mux": 4}, {}),
        ("word backgrounds (4)", {"backgrounds": "word"}, {}),
        ("read/write 2 cycles", {"read_cycles": 2, "write_cycles": 2}, {}),
        ("read latency 2", {"read_cycles": 2, "write_cycles": 2}, {"lat": 2}),
        ("transparent", {}, {"transparent": True}),
    ):
        row(label, "March C-", make_memory(1024, 8, name="bench", **mkw), **kw)


if __name__ == "__main__":
    main()
