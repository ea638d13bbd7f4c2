"""The analysis report: CSV tables, PNG/SVG figures and a one-page summary (Markdown and HTML).

Layout of the report directory::

    DIR/summary.md, summary.html      the page: every number with its uncertainty and assumptions
    DIR/analysis.json                 the same numbers, machine-readable (kind="eigenfarm-analysis")
    DIR/*.csv                         tables (see eigenfarm.report.tables)
    DIR/*.png, *.svg                  figures (see eigenfarm.report.figures)

The directory is written beside its destination under a hidden name and renamed into place when
complete; an existing report is replaced only with ``overwrite``, and a directory that is not a report
is never replaced.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

from eigenfarm.analysis.ensemble import Analysis
from eigenfarm.analysis.finite_size import size_table
from eigenfarm.report.document import to_html, to_markdown
from eigenfarm.report.figures import draw_all
from eigenfarm.report.summary import summary_blocks
from eigenfarm.report.tables import write_tables
from eigenfarm.store.atomic import PartialStore, check_destination
from eigenfarm.store.provenance import jsonable, stamp

KIND = "eigenfarm-analysis"
LABEL = "report folder"


def is_report(path) -> bool:
    """Whether ``path`` is a report directory written by :func:`write_report`."""
    try:
        return json.loads((Path(path) / "analysis.json").read_text()).get("kind") == KIND
    except (OSError, ValueError, AttributeError):
        return False


def check_report_destination(out, overwrite: bool = False) -> None:
    """Refuse (InputError) a report destination before any work is done."""
    check_destination(out, overwrite, is_report, LABEL)


def _record(analysis: Analysis, sources: list[str]) -> dict:
    groups = [{"n_atoms": g.n_atoms, "samples": [t.path for t in g.tables],
               "speeds": g.speeds.to_dict() if g.speeds else None, "bands": [b.to_dict() for b in g.bands],
               "tail_cutoff": g.cutoff, "tail_cutoff_rule": g.cutoff_rule,
               "tail": g.tail.to_dict() if g.tail else None, "tail_note": g.tail_note} for g in analysis.groups]
    return _finite(jsonable({"kind": KIND, "catalogues": sources, "units": analysis.units.name,
                     "settings": _settings(analysis), "groups": groups, "finite_size": size_table(analysis),
                     "notes": analysis.notes, **stamp()}))


def _finite(value):
    """``value`` with every NaN/inf float replaced by None (JSON has no NaN)."""
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {k: _finite(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_finite(v) for v in value]
    return value


def _settings(analysis: Analysis) -> dict:
    s = analysis.settings
    return {"shells": s.shells, "profiles": s.profiles, "chunk_modes": s.chunk_modes, "bins": s.bins,
            "phonon_weight": s.rule.phonon_weight, "local_participation": s.rule.local_participation,
            "tail_below": s.tail_below, "tail_above": s.tail_above, "fixed_exponent": s.fixed_exponent,
            "bootstrap": s.bootstrap, "confidence": s.confidence, "seed": s.seed}


def write_report(analysis: Analysis, out, sources: list[str], overwrite: bool = False) -> Path:
    """Write the report of ``analysis`` (of catalogues ``sources``) to directory ``out``; returns its path."""
    partial = PartialStore(out, overwrite, is_report, LABEL)
    try:
        folder = partial.path
        folder.mkdir(parents=True, exist_ok=True)
        tables = write_tables(analysis, folder)
        figures = draw_all(analysis, folder)
        blocks = summary_blocks(analysis, figures, tables, sources)
        (folder / "summary.md").write_text(to_markdown(blocks))
        (folder / "summary.html").write_text(to_html(blocks, "eigenfarm analysis"))
        (folder / "analysis.json").write_text(json.dumps(_record(analysis, sources), indent=1, allow_nan=False))
    except BaseException:
        partial.abort()
        raise
    return partial.commit()
