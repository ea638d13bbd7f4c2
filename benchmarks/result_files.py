"""Where benchmarks put their results: ``results/<name>.json`` (the numbers) and ``.md`` (the table)."""

from __future__ import annotations

import json
from pathlib import Path

RESULTS = Path(__file__).resolve().parent / "results"


def write_results(name: str, report: dict, table: str) -> None:
    """Write ``report`` as JSON and ``table`` as Markdown under results/, and print the table."""
    RESULTS.mkdir(exist_ok=True)
    (RESULTS / f"{name}.json").write_text(json.dumps(report, indent=2, default=_plain) + "\n")
    (RESULTS / f"{name}.md").write_text(table)
    print(table)


def _plain(value):
    """numpy scalars as numbers, anything else JSON does not know as text."""
    return value.item() if hasattr(value, "item") else str(value)
