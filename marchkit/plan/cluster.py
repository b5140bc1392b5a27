"""The one place marchkit imports Dask: open a ``dask.distributed`` client.

Callers (``plan``, and ``generate`` through the command line) get a client and use only its
``submit``/``map``/``gather`` methods, so nothing else in marchkit imports Dask.

* ``scheduler=None``: a :class:`~dask.distributed.LocalCluster` on the loopback address with
  ``workers`` single-threaded worker processes (default: the number of cores).
* ``scheduler="tcp://HOST:PORT"``: connect to a running scheduler (``dask scheduler`` plus
  ``dask worker`` processes); the cluster is left running afterwards.
"""

from __future__ import annotations

import os
from contextlib import contextmanager

from ..errors import InputError

MAX_LOCAL_WORKERS = 64
CONNECT_TIMEOUT_S = 10


class ClusterError(InputError):
    """A scheduler that cannot be reached, or a worker count out of range."""


def _check(workers, scheduler):
    if workers is not None and not (1 <= int(workers) <= MAX_LOCAL_WORKERS):
        raise ClusterError(f"--workers must be between 1 and {MAX_LOCAL_WORKERS} (got {workers})")
    if scheduler is not None:
        s = str(scheduler)
        if not s.startswith(("tcp://", "tls://", "inproc://")) or len(s) > 300:
            raise ClusterError(f"--scheduler must be an address such as tcp://127.0.0.1:8786 (got {s!r})")


@contextmanager
def open_client(workers: int | None = None, scheduler: str | None = None):
    """Yield a connected ``dask.distributed.Client``; close what was opened on exit."""
    _check(workers, scheduler)
    import logging

    from dask.distributed import Client, LocalCluster

    for name in ("distributed", "distributed.scheduler", "distributed.nanny", "distributed.worker"):
        logging.getLogger(name).setLevel(logging.CRITICAL)
    if scheduler is not None:
        try:
            client = Client(scheduler, timeout=CONNECT_TIMEOUT_S)
        except (OSError, TimeoutError) as e:
            raise ClusterError(f"cannot reach the Dask scheduler at {scheduler}: {e}") from None
        try:
            yield client
        finally:
            client.close()
        return
    n = int(workers) if workers is not None else (os.cpu_count() or 1)
    # Ctrl-C goes to the whole process group: worker processes started while SIGINT is ignored
    # inherit that, so only this process sees it, closes the cluster and reports "interrupted"
    # (without this every worker printed its own KeyboardInterrupt traceback).
    import signal
    import threading

    main = threading.current_thread() is threading.main_thread()
    before = signal.signal(signal.SIGINT, signal.SIG_IGN) if main else None
    try:
        cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True, host="127.0.0.1",
                               dashboard_address=":0", silence_logs=logging.CRITICAL)
    finally:
        if main:
            signal.signal(signal.SIGINT, before)
    client = Client(cluster)
    try:
        yield client
    finally:
        client.close()
        cluster.close()
