"""Running shard tasks in this process or on a dask cluster, behind one small interface.

A task is a module-level function and its arguments; arguments may be handles of earlier tasks (or
lists of them), which are resolved before the call — locally by evaluating them, on dask by passing
futures so the data stays on the workers.  :meth:`Runner.gather` waits with progress and re-raises the
first task error; :meth:`Runner.settle` waits until nothing submitted is still running (used after a
failure, before deleting a half-written store).
"""

from __future__ import annotations

import uuid
from abc import ABC, abstractmethod
from typing import Callable

from eigenfarm.errors import InputError

#: progress callback: (stage name, tasks done, tasks in the stage)
Progress = Callable[[str, int, int], None]


class Runner(ABC):
    """Submit tasks, gather their results, release them."""

    @abstractmethod
    def submit(self, fn, *args):
        """Schedule ``fn(*args)``; returns a handle."""

    @abstractmethod
    def scatter(self, value):
        """A handle for a large argument shared by many tasks."""

    @abstractmethod
    def gather(self, handles: list, stage: str = "", progress: Progress | None = None) -> list:
        """Results of ``handles`` in order; calls ``progress`` as tasks finish; raises a task's error."""

    #: whether submitted tasks run while the caller goes on (dask), so a handle may be released as soon
    #: as the tasks that need it are submitted; False: tasks run only when gathered (in this process)
    concurrent = False

    @property
    def slots(self) -> int:
        """How many places tasks can be kept apart in (dask workers; 1 in this process)."""
        return 1

    def submit_near(self, slot: int, fn, *args):
        """Like :meth:`submit`, preferring place ``slot`` (modulo :attr:`slots`), so tasks that share state
        cached in a worker process (see eigenfarm.analysis.shardcache) meet it again; the default ignores it."""
        return self.submit(fn, *args)

    def everywhere(self, fn, *args) -> list:
        """Call ``fn(*args)`` now in every process that runs tasks (here: this one); their results."""
        return [fn(*args)]

    def release(self, handles: list) -> None:
        """Forget results no longer needed (frees their memory)."""

    def settle(self, timeout: float = 300.0) -> None:
        """Wait until no submitted task is still running."""


class _Deferred:
    """A local task evaluated on first use and kept until released."""

    __slots__ = ("call", "value")

    def __init__(self, fn, args):
        self.call = (fn, args)
        self.value = None

    def result(self):
        if self.call is not None:
            fn, args = self.call
            self.value = fn(*(_resolve(a) for a in args))
            self.call = None
        return self.value


def _resolve(arg):
    if isinstance(arg, _Deferred):
        return arg.result()
    if isinstance(arg, list):
        return [_resolve(a) for a in arg]
    return arg


class LocalRunner(Runner):
    """Evaluate tasks in this process, one at a time, when their results are gathered."""

    def submit(self, fn, *args):
        return _Deferred(fn, args)

    def scatter(self, value):
        return value

    def gather(self, handles, stage="", progress=None):
        out = []
        for done, handle in enumerate(handles, 1):
            out.append(handle.result())
            if progress:
                progress(stage, done, len(handles))
        return out

    def release(self, handles):
        for handle in handles:
            if isinstance(handle, _Deferred):
                handle.value = None


class Refused:
    """An :class:`InputError` a task raised, returned as its result so that dask does not retry it (a
    retry cannot mend bad input; ``retries`` are for transient failures).  :meth:`DaskRunner.gather`
    raises it; a task given it as an argument returns it unchanged."""

    def __init__(self, error: InputError):
        self.error = error


def _refusing(fn, *args):
    """``fn(*args)``, an InputError (its own, or one an argument's task refused) returned as :class:`Refused`."""
    for arg in args:
        for item in arg if isinstance(arg, list) else [arg]:
            if isinstance(item, Refused):
                return item
    try:
        return fn(*args)
    except InputError as exc:
        return Refused(exc)


class DaskRunner(Runner):
    """Run tasks on a ``distributed.Client``; results stay on the workers until gathered.  A task that
    raises is retried ``retries`` times, except for an :class:`InputError` (see :class:`Refused`)."""

    concurrent = True

    def __init__(self, client, retries: int = 2):
        self.client = client
        self.retries = retries
        self.submitted = []
        self._workers = None

    def submit(self, fn, *args):
        return self.submit_near(None, fn, *args)

    def _addresses(self) -> list:
        if not self._workers:  # fixed at first use: a slot keeps meaning the same worker
            self._workers = sorted(self.client.nthreads())
        return self._workers

    @property
    def slots(self) -> int:
        return max(1, len(self._addresses()))

    def submit_near(self, slot, fn, *args):
        """Prefer the worker of ``slot``; a loose restriction, so if that worker has gone another runs the
        task (work stealing may also move one now and then)."""
        workers = self._addresses() if slot is not None else []
        place = {"workers": [workers[slot % len(workers)]], "allow_other_workers": True} if workers else {}
        key = f"{getattr(fn, '__name__', 'task')}-{uuid.uuid4().hex}"  # the dashboard names the task, not the wrapper
        future = self.client.submit(_refusing, fn, *args, key=key, retries=self.retries, **place)
        self.submitted.append(future)
        return future

    def scatter(self, value):
        future = self.client.scatter(value, broadcast=True, hash=False)
        self.submitted.append(future)
        return future

    def everywhere(self, fn, *args):
        """On every worker, outside the task graph (``Client.run``)."""
        return list(self.client.run(fn, *args).values())

    def gather(self, handles, stage="", progress=None):
        from distributed import as_completed

        for done, future in enumerate(as_completed(handles), 1):
            if future.status == "error":
                future.result()
            if progress:
                progress(stage, done, len(handles))
        results = self.client.gather(handles)
        for result in results:
            if isinstance(result, Refused):
                raise result.error
        return results

    def release(self, handles):
        drop = {id(h) for h in handles}
        self.submitted = [f for f in self.submitted if id(f) not in drop]
        for future in handles:
            future.release()

    def settle(self, timeout=300.0):
        from distributed import wait

        try:
            wait(self.submitted, timeout=timeout)
        except TimeoutError:
            pass


def runner_for(client) -> Runner:
    """A :class:`DaskRunner` on ``client`` (a task that fails or loses its worker is retried twice), or a
    :class:`LocalRunner` when it is None."""
    return LocalRunner() if client is None else DaskRunner(client)
