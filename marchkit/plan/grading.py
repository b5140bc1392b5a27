"""Grading the candidate tests of every memory type: pure tasks, an on-disk cache keyed by
content, and a runner that is either serial (in this process) or a Dask client's
``submit``/``gather`` (the client comes from :func:`marchkit.plan.cluster.open_client`; this
module never imports Dask).

A task is a pure function of plain values — the test's notation, the memory's description,
the fault selection, the retention times and the pair scope — so a result does not depend on
where it was computed: serial and distributed runs give the same numbers (tested).
"""

from __future__ import annotations

import hashlib
import json
import os
from dataclasses import dataclass
from fractions import Fraction
from pathlib import Path

CACHE_FORMAT = 1
CACHE_ENV = "MARCHKIT_CACHE"


@dataclass(frozen=True)
class Job:
    """One (test, memory) pair to grade, as plain values."""

    notation: str          # canonical notation of the test
    test_name: str
    memory: tuple          # sorted (key, value) pairs of the memory's description
    faults: str
    retention: tuple       # durations as "p/q" strings
    pairs: str

    @property
    def key(self) -> str:
        from .. import __version__

        blob = json.dumps({"format": CACHE_FORMAT, "marchkit": __version__, "notation": self.notation,
                           "memory": list(self.memory), "faults": self.faults,
                           "retention": list(self.retention), "pairs": self.pairs},
                          sort_keys=True, ensure_ascii=True)
        return hashlib.sha256(blob.encode()).hexdigest()


def make_job(test, mem, faults: str, retention, pairs: str) -> Job:
    from ..notation import format_notation

    desc = mem.describe()
    desc.pop("name", None)            # the name does not change a grade
    desc["clock_hz"] = str(Fraction(mem.clock_hz))
    return Job(format_notation(test), test.name, tuple(sorted((k, _freeze(v)) for k, v in desc.items())),
               faults, tuple(str(Fraction(t)) for t in retention), pairs)


def _freeze(v):
    return tuple(v) if isinstance(v, list) else v


def run_job(job: Job) -> dict:
    """Grade one job: the task every worker runs.  Returns plain values only."""
    from ..grade import grade
    from ..model import make_memory
    from ..notation import parse_notation

    test = parse_notation(job.notation, filename="<plan>")
    d = dict(job.memory)
    mem = make_memory(
        words=d["words"], bits=d["bits"], mux=d["mux"], order=d["order"],
        backgrounds=tuple(d["backgrounds"]), clock=Fraction(d["clock_hz"]),
        read_cycles=d["read_cycles"], write_cycles=d["write_cycles"], read_latency=d.get("read_latency", 0),
        scramble_bits=d["scramble_bits"], scramble_xor=d["scramble_xor"], neighbours=d["neighbours"],
    )
    res = grade(test, mem, job.faults, job.pairs, tuple(Fraction(t) for t in job.retention) or None)
    return {
        "key": job.key,
        "ops": res.ops,
        "cycles": res.cycles,
        "classes": [[c.cls, c.instances, c.detected] for c in res.classes],
        "empty": list(res.empty_classes),
    }


# ---- the cache --------------------------------------------------------------------------

def default_cache_dir() -> Path:
    if os.environ.get(CACHE_ENV):
        return Path(os.environ[CACHE_ENV])
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "marchkit" / "grades"


class Cache:
    """One JSON file per job, named by the job's content hash, written under a temporary
    name and renamed.  An entry that cannot be read, or that answers another key, is
    ignored (and overwritten by the recomputed result)."""

    def __init__(self, directory: Path | str | None):
        self.dir = Path(directory) if directory is not None else None

    def _path(self, key: str) -> Path:
        return self.dir / key[:2] / f"{key}.json"

    def get(self, job: Job) -> dict | None:
        if self.dir is None:
            return None
        key = job.key
        try:
            data = json.loads(self._path(key).read_text(encoding="utf-8"))
        except (OSError, ValueError, UnicodeDecodeError):
            return None
        if not _valid(data, key):
            return None
        return data

    def get_raw(self, key: str) -> dict | None:
        """Any cached record by key (None when missing or unreadable)."""
        if self.dir is None:
            return None
        try:
            data = json.loads(self._path(key).read_text(encoding="utf-8"))
        except (OSError, ValueError, UnicodeDecodeError):
            return None
        return data if isinstance(data, dict) and data.get("key") == key else None

    def put(self, job: Job, result: dict) -> None:
        self.put_raw(job.key, result)

    def put_raw(self, key: str, result: dict) -> None:
        if self.dir is None:
            return
        from ..files import write_file

        p = self._path(key)
        try:
            p.parent.mkdir(parents=True, exist_ok=True)
            write_file(p, json.dumps(result, sort_keys=True), force=True)
        except Exception:      # a cache that cannot be written only costs time
            pass


def _valid(data, key: str) -> bool:
    try:
        return (isinstance(data, dict) and data.get("key") == key and isinstance(data["ops"], int)
                and isinstance(data["cycles"], int)
                and all(isinstance(c, str) and isinstance(n, int) and isinstance(d, int) and 0 <= d <= n
                        for c, n, d in data["classes"])
                and isinstance(data["empty"], list))
    except (KeyError, TypeError, ValueError):
        return False


@dataclass
class GradeRun:
    results: dict          # job key -> result dict
    computed: int          # jobs graded in this run
    cached: int            # jobs answered by the cache
    where: str = "serial"  # "serial", "cache", or "N Dask workers"


def grade_jobs(jobs, client=None, cache: Cache | None = None, progress=None, connect=None) -> GradeRun:
    """Grade every distinct job once: from the cache, else on ``client`` (a Dask client:
    ``submit`` + ``gather``) or, without one, here, one after the other.

    ``connect``: a callable returning a context manager that yields a client, used (only
    when something is left to grade after the cache) if ``client`` is None — so a run the
    cache answers completely starts no cluster.
    ``progress(done, total)`` is called as results arrive.
    """
    cache = cache or Cache(None)
    todo: dict = {}
    results: dict = {}
    for j in jobs:
        k = j.key
        if k in results or k in todo:
            continue
        hit = cache.get(j)
        if hit is not None:
            results[k] = hit
        else:
            todo[k] = j
    cached = len(results)
    total = cached + len(todo)
    if progress:
        progress(cached, total)
    # biggest first, so the long tasks do not end up last on one worker
    order = sorted(todo.values(), key=lambda j: -_size(j))
    if order and client is None and connect is not None:
        with connect() as c:
            return _compute(order, c, cache, results, cached, total, progress)
    return _compute(order, client, cache, results, cached, total, progress)


def _compute(order, client, cache, results, cached, total, progress) -> GradeRun:
    if client is None:
        for n, j in enumerate(order, 1):
            res = run_job(j)
            cache.put(j, res)
            results[j.key] = res
            if progress:
                progress(cached + n, total)
    elif order:
        futures = [client.submit(run_job, j, key=f"marchkit-grade-{j.key}", pure=False) for j in order]
        by_key = {f.key: j for f, j in zip(futures, order)}
        done = 0
        for f in futures:                      # in submission order; they run in parallel
            res = f.result()
            j = by_key[f.key]
            if res.get("key") != j.key:         # never trust a worker's answer for another job
                raise RuntimeError(f"worker answered job {res.get('key')} for {j.key}")
            cache.put(j, res)
            results[j.key] = res
            done += 1
            if progress:
                progress(cached + done, total)
    return GradeRun(results, len(order), cached, _where(client) if order else "cache")


def _where(client) -> str:
    if client is None:
        return "serial"
    try:
        n = len(client.scheduler_info().get("workers", {}))
    except Exception:    # pragma: no cover
        return "Dask"
    return f"{n} Dask worker{'s' if n != 1 else ''}"


def _size(job: Job) -> int:
    d = dict(job.memory)
    return d["words"] * d["bits"] * max(1, len(d["backgrounds"]))
