"""A byte-bounded cache of prepared shard operators, one per process (each dask worker has its own).

Streamed methods (the kernel polynomial method, Lanczos) sweep over every shard of a store hundreds
of times.  Rereading and decompressing each shard at every sweep costs more than the product itself,
so the task that prepares a shard's rows keeps them here, keyed by ``(group, shard)`` where ``group``
names the store (path and content digest).  Tasks of one shard are sent to the same worker
(:meth:`eigenfarm.farm.runner.Runner.submit_near`), so each worker holds its own share of the store.

Policy.  The sweep visits the shards cyclically, the access pattern for which least-recently-used
eviction is worst: with a budget smaller than the sweep it evicts every shard just before it is needed
again and never hits.  So entries of *other* groups (earlier stores) are evicted first, oldest first,
while a group never evicts its own entries: what fits stays, the rest is read from disk at every
sweep, and the hit rate is budget / working set.  :func:`forget` drops a group when its job ends.
"""

from __future__ import annotations

import threading
from collections import OrderedDict

#: fraction of the process's memory budget the cache may use by default
DEFAULT_FRACTION = 0.25

_entries: OrderedDict = OrderedDict()  # key -> (value, nbytes), oldest first
_lock = threading.Lock()
_counts = {"hits": 0, "misses": 0, "refused": 0}


def default_budget() -> int:
    """Bytes the cache may hold: a quarter of the dask worker's memory limit when called in a worker
    that has one, otherwise a quarter of the machine's physical memory."""
    try:
        from distributed import get_worker

        limit = get_worker().memory_manager.memory_limit
    except (ImportError, ValueError, AttributeError):
        limit = None
    if not limit:
        import psutil

        limit = psutil.virtual_memory().total
    return int(DEFAULT_FRACTION * limit)


def get(key):
    """The cached value for ``key`` = (group, shard), or None."""
    with _lock:
        entry = _entries.get(key)
        _counts["hits" if entry is not None else "misses"] += 1
        return None if entry is None else entry[0]


def put(key, value, nbytes: int, budget: int) -> bool:
    """Keep ``value`` (``nbytes`` bytes) under ``key`` = (group, shard) if it fits in ``budget`` bytes
    after evicting other groups' entries; returns whether it was kept."""
    group = key[0]
    with _lock:
        used = sum(size for _, size in _entries.values())
        for other in [k for k in _entries if k[0] != group]:
            if used + nbytes <= budget:
                break
            used -= _entries.pop(other)[1]
        if used + nbytes > budget:
            _counts["refused"] += 1
            return False
        _entries[key] = (value, int(nbytes))
        return True


def forget(group) -> int:
    """Drop every entry of ``group``; returns the bytes freed."""
    with _lock:
        keys = [k for k in _entries if k[0] == group]
        return sum(_entries.pop(k)[1] for k in keys)


def stats() -> dict:
    """This process's cache: entries, bytes held, and hits/misses/refused insertions so far."""
    with _lock:
        return {"entries": len(_entries), "bytes": sum(size for _, size in _entries.values()), **_counts}
