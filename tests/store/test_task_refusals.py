"""Task failures on dask: bad input is raised once, not retried; other errors are retried.

Common practice (dask.distributed ``retries`` are meant for transient failures; an error in the input
comes back on every try)."""

from __future__ import annotations

from pathlib import Path

import pytest

from eigenfarm.errors import InputError
from eigenfarm.farm.runner import DaskRunner


def _refuse_and_note(path: str) -> int:
    with open(path, "a") as handle:
        handle.write("called\n")
    raise InputError("H.zarr: shard 3: blocks missing")


def _plus_one(x: int) -> int:
    return x + 1


def _fails_once(path: str) -> int:
    marker = Path(path)
    if not marker.exists():
        marker.write_text("failed once")
        raise OSError("transient: file system hiccup")
    return 42


def test_input_error_in_a_task_is_raised_once_and_passed_on_by_dependent_tasks(client, tmp_path):
    runner = DaskRunner(client)
    calls = tmp_path / "calls.txt"
    refused = runner.submit(_refuse_and_note, str(calls))
    dependent = runner.submit(_plus_one, refused)
    listed = runner.submit(sum, [refused, runner.submit(_plus_one, 1)])
    for handle in (refused, dependent, listed):
        with pytest.raises(InputError, match="H.zarr: shard 3: blocks missing"):
            runner.gather([handle])
    assert calls.read_text().count("called") == 1  # no retries


def test_other_task_errors_are_still_retried(client, tmp_path):
    runner = DaskRunner(client)
    assert runner.gather([runner.submit(_fails_once, str(tmp_path / "marker"))]) == [42]
    assert runner.gather([runner.submit(_plus_one, runner.submit(_plus_one, 1))]) == [3]
