"""Forked workers for the fast engine: the same pure function over a few parts, on both cores.

Used only when it pays (large arrays), where ``fork`` exists, the machine has two cores or
more and no other thread runs (forking a threaded process is unsafe); otherwise the parts run
one after the other in this process.  A failing part cancels the others: pending parts are
cancelled, running workers are terminated, and the error is raised here.
"""

from __future__ import annotations

_JOB: dict = {}
FORK_MIN_CELLS = 1 << 18


def can_fork(cells: int, min_cells: int = FORK_MIN_CELLS) -> int:
    """How many workers to use for work on ``cells`` cells (1: none)."""
    import multiprocessing
    import os
    import threading

    if cells < min_cells or (os.cpu_count() or 1) < 2:
        return 1
    if "fork" not in multiprocessing.get_all_start_methods() or threading.active_count() > 1:
        return 1
    if _JOB:                       # already inside a worker (or a map): no nesting
        return 1
    return 2


def _call(i):
    fn, parts = _JOB["job"]
    return fn(parts[i])


def map_forked(fn, parts, workers: int = 2, on_done=None) -> list:
    """``[fn(p) for p in parts]``, in forked workers when ``workers`` > 1.  ``on_done(i)`` is
    called in this process as each part finishes."""
    parts = list(parts)
    if workers < 2 or len(parts) < 2:
        out = []
        for i, p in enumerate(parts):
            out.append(fn(p))
            if on_done:
                on_done(i)
        return out
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor, as_completed

    _JOB["job"] = (fn, parts)
    out = [None] * len(parts)
    try:
        with ProcessPoolExecutor(max_workers=workers, mp_context=multiprocessing.get_context("fork")) as pool:
            futs = {pool.submit(_call, i): i for i in range(len(parts))}
            try:
                for fut in as_completed(futs):
                    out[futs[fut]] = fut.result()
                    if on_done:
                        on_done(futs[fut])
            except BaseException:
                for f in futs:               # a failing worker cancels the others
                    f.cancel()
                for proc in list(getattr(pool, "_processes", {}).values()):
                    proc.terminate()
                raise
    finally:
        _JOB.clear()
    return out
