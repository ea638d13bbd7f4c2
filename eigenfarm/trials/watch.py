"""Running a command in a child process and measuring its wall time and memory.

Memory is resident set size polled every ``interval`` seconds over the child and all its descendants
(dask workers are child processes): the peak of the largest single process and the peak of their sum.
Polling can miss a spike shorter than the interval; the numbers are lower bounds at that resolution.
"""

from __future__ import annotations

import os
import subprocess
import tempfile
import time
from dataclasses import dataclass

import psutil

MIB = 2**20


@dataclass(frozen=True)
class Watched:
    """``status`` exit code; ``seconds`` wall; ``peak_process_mib``/``peak_total_mib``; ``stderr`` tail."""

    status: int
    seconds: float
    peak_process_mib: float
    peak_total_mib: float
    stderr: str


def _sample(root: psutil.Process) -> tuple[float, float]:
    sizes = []
    for proc in [root, *root.children(recursive=True)]:
        try:
            sizes.append(proc.memory_info().rss)
        except (psutil.NoSuchProcess, psutil.AccessDenied):
            continue
    return (max(sizes, default=0) / MIB, sum(sizes) / MIB)


def run_watched(argv: list[str], interval: float = 0.05, env: dict | None = None) -> Watched:
    """Run ``argv`` to completion, polling its process tree's memory."""
    with tempfile.TemporaryFile("w+") as errors:  # a file, not a pipe: progress output cannot block it
        started = time.perf_counter()
        child = psutil.Popen(argv, stdout=subprocess.DEVNULL, stderr=errors, text=True,
                             env={**os.environ, **(env or {})})
        peak_one = peak_all = 0.0
        while child.poll() is None:
            one, total = _sample(child)
            peak_one, peak_all = max(peak_one, one), max(peak_all, total)
            time.sleep(interval)
        seconds = time.perf_counter() - started
        errors.seek(0)
        tail = errors.read()[-2000:]
    return Watched(child.returncode, seconds, peak_one, peak_all, tail)
