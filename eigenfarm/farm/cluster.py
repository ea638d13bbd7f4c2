"""Connecting to a dask.distributed cluster: an existing scheduler or a local one.

Workers are processes with one thread each and one BLAS/OpenMP thread each, so N workers on N cores
do not oversubscribe (measured here: 2 OpenBLAS threads per worker under load made BLAS-heavy code
2–12× slower; ../shared/FACTS.md).
"""

from __future__ import annotations

import contextlib
import logging
import os
from typing import Iterator

from eigenfarm.errors import InputError

#: environment given to local workers so BLAS libraries start single-threaded
WORKER_ENV = {"OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}


def default_workers() -> int:
    """Worker processes for a local cluster: one per available core."""
    return max(1, len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count() or 1)


@contextlib.contextmanager
def open_client(workers: int | None = None, scheduler: str | None = None,
                memory_limit: str = "auto", quiet: bool = True) -> Iterator:
    """Yield a ``distributed.Client``.

    ``scheduler``: address of a running scheduler (e.g. ``tcp://10.0.0.5:8786``); otherwise a
    LocalCluster of ``workers`` single-threaded processes (default one per core) is started and torn
    down on exit.  An unreachable scheduler raises :class:`InputError` naming the address.
    """
    from distributed import Client, LocalCluster

    if quiet:
        for name in ("distributed", "distributed.worker", "distributed.scheduler", "distributed.nanny"):
            logging.getLogger(name).setLevel(logging.ERROR)
    if scheduler:
        try:
            client = Client(scheduler, timeout="10s")
        except (OSError, TimeoutError) as exc:
            raise InputError(f"scheduler {scheduler}: cannot connect ({exc})") from None
        with client:
            yield client
        return
    n = workers or default_workers()
    with LocalCluster(n_workers=n, threads_per_worker=1, processes=True, memory_limit=memory_limit,
                      dashboard_address=":0", env=dict(WORKER_ENV),
                      # task errors reach the caller as exceptions; the workers' own log of them
                      # ("Compute Failed" and a traceback) would break the one-line error contract
                      silence_logs=logging.CRITICAL if quiet else logging.WARN) as cluster, Client(cluster) as client:
        yield client
