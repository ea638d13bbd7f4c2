"""The report: `eigenfarm analyze` end to end on catalogues of exactly known modes, and its renderers."""

import csv
import json

import numpy as np
import pytest
from exact_modes import exact_catalogue

from eigenfarm.analysis.ensemble import Settings, analyse
from eigenfarm.cli import main
from eigenfarm.report.document import Figure, Heading, Items, Table, Text, to_html, to_markdown
from eigenfarm.samples.prepare import Recipe, make_sample
from eigenfarm.samples.scenario import demo_potential

FIGURES = ("dos-loglog", "dos-reduced", "cumulative", "participation", "lowest-mode", "profiles", "bands",
           "finite-size")


def rows(path):
    with open(path, newline="") as handle:
        return list(csv.DictReader(handle))


def test_analyze_writes_the_whole_report(glass_modes, tmp_path, capsys):
    paths = [str(p) for p, _ in glass_modes]
    out = tmp_path / "report"
    assert main(["analyze", *paths, "--out", str(out), "--bootstrap", "300", "--shells", "3"]) == 0
    assert "summary.html" in capsys.readouterr().out
    record = json.loads((out / "analysis.json").read_text())
    assert record["kind"] == "eigenfarm-analysis" and record["catalogues"] == paths
    for name in FIGURES:
        assert (out / f"{name}.png").stat().st_size > 1000 and (out / f"{name}.svg").exists()
    modes = rows(out / "modes.csv")
    # every non-zero mode of every sample (dense LAPACK found 3N − 3 of them)
    assert len(modes) == sum(np.count_nonzero(w > 1e-8 * w[-1]) for _, w in glass_modes) == 3 * (750 - 3)
    assert {m["class"] for m in modes} <= {"phonon", "quasi-localized", "mixed", "beyond-shells"}
    group = record["groups"][0]
    tail = group["tail"]
    summary = (out / "summary.md").read_text()
    assert f"{tail['exponent']['value']:.4g}" in summary and "Harmonic approximation" in summary
    assert "instant quench" in summary  # the preparation record reaches the page
    size = rows(out / "finite_size.csv")[0]
    assert float(size["exponent"]) == pytest.approx(tail["exponent"]["value"], rel=1e-9)
    assert int(size["samples"]) == 3 and int(size["n_atoms"]) == 250
    html = (out / "summary.html").read_text()
    assert html.startswith("<!DOCTYPE html>") and 'src="dos-loglog.png"' in html
    # the band table's weights sum over the catalogues; whole spectra hold every band completely
    bands = rows(out / "bands.csv")
    assert all(b["covered"] == "yes" for b in bands)


def test_report_folder_rules(glass_modes, tmp_path, capsys):
    paths = [str(glass_modes[0][0])]
    other = tmp_path / "notes"
    other.mkdir()
    (other / "keep.txt").write_text("mine")
    assert main(["analyze", *paths, "--out", str(other), "--overwrite"]) == 2
    assert "exists and is not a report folder" in capsys.readouterr().err
    assert (other / "keep.txt").read_text() == "mine"
    out = tmp_path / "rep"
    assert main(["analyze", *paths, "--out", str(out), "--bootstrap", "0"]) == 0
    assert main(["analyze", *paths, "--out", str(out)]) == 2
    assert "already exists" in capsys.readouterr().err
    assert main(["analyze", *paths, "--out", str(out), "--overwrite", "--bootstrap", "0"]) == 0
    assert sorted(p.name for p in tmp_path.iterdir()) == ["notes", "rep"]  # no partial folders left


@pytest.mark.parametrize("argv, message", [
    (["analyze", "missing.modes.zarr", "--out", "r"], "no such file or directory"),
    (["analyze", ".", "--out", "r"], "not a mode catalogue"),
    (["analyze", "x.zarr", "--out", "r", "--phonon-weight", "1.5"], "must lie in (0, 1]"),
])
def test_analyze_bad_input_is_one_line(argv, message, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    try:
        status = main(argv)
    except SystemExit as stop:  # usage mistakes leave through argparse, with the same one-line form
        status = stop.code
    assert status == 2
    err = capsys.readouterr().err
    assert message in err and err.count("\n") == 1 and "Traceback" not in err
    assert not (tmp_path / "r").exists()


def test_lowest_k_catalogue_limits_the_range(tmp_path):
    # A lowest-K catalogue covers (0, f_K]: densities stop there and bands it cuts are marked uncovered.
    config = make_sample(Recipe(150), seed=9, sample=0)
    path, w, _ = exact_catalogue(tmp_path / "low.modes.zarr", config, demo_potential(), keep=40)
    analysis = analyse([str(path)], Settings(shells=2, bootstrap=0))
    group = analysis.groups[0]
    f_k = np.sqrt(w[w > 1e-8 * w[-1]][39])
    assert group.linear.edges[-1] == pytest.approx(f_k, rel=1e-12)
    assert group.linear.counts.sum() == 40 - np.count_nonzero(np.sqrt(w[w > 1e-8 * w[-1]][:40]) <= group.linear.edges[0])
    assert not all(b.covered for b in group.bands)


def test_crystal_has_no_tail(fcc_modes):
    # A crystal has no mode below its first band: the tail is not fitted and the report says why.
    analysis = analyse([str(fcc_modes[0])], Settings(shells=2, bootstrap=0, wave_share=1.0))
    group = analysis.groups[0]
    assert group.tail is None and "only 0 modes" in group.tail_note
    assert any("tail not fitted" in note for note in analysis.notes)


def test_renderers_escape_their_formats():
    blocks = [Heading("Title", 1), Text("a < b & c"), Items(("x|y",)), Table(("h|1", "h2"), (("1", "<2>"),)),
              Figure("f.png", "cap")]
    md = to_markdown(blocks)
    assert "| h\\|1 | h2 |" in md and "# Title" in md and "![cap](f.png)" in md
    html = to_html(blocks, "T")
    assert "a &lt; b &amp; c" in html and "<td>&lt;2&gt;</td>" in html and '<img src="f.png"' in html
