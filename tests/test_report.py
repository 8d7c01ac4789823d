"""Reports: plots and Markdown render from sweep records; PNGs are real images.

Source for "readable": matplotlib.image.imread decodes the files (PNG via Pillow).
"""

from __future__ import annotations

import matplotlib.image
import pytest
from markdown_check import rendered_structure

from thermoseed.bridge.plateau.report import LIMITS, write_report
from thermoseed.bridge.plateau.sweep import make_grid, run_sweep
from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.pretrain.labelled import LabelledData
from thermoseed.recipes.scenarios.magnet_phase import magnet_phase_data, train_test_split


def test_report_renders_with_readable_pngs(tmp_path):
    train, test = train_test_split(magnet_phase_data(2, 8, seed=3), seed=3)
    data = {2: LabelledData(train.states, train.labels, test.states, test.labels)}
    jobs = make_grid([2, 3, 4], ["uniform", "identity_blocks", "small_angle"], range(5),
                     costs=("local", "global"), depths=[1])
    jobs += make_grid([2], ["uniform", "identity_blocks"], range(3), task="training",
                      steps=3, depths=[1])
    out = run_sweep(jobs, tmp_path / "sweep.jsonl", data=data, workers=1, progress=False)
    report = write_report(out.records, tmp_path / "report", n_boot=200, target=0.5)
    text = report.read_text()
    assert LIMITS in text and "no hardware advantage" in text
    for name in ("decay.png", "curves.png"):
        png = tmp_path / "report" / name
        assert png.stat().st_size > 1000
        assert f"]({name})" in text
        image = matplotlib.image.imread(png)
        assert image.ndim == 3 and image.shape[0] > 100 and image.shape[1] > 100
    assert "| local | identity blocks |" in text and "steps to target" in text
    # Source: markdown-it-py, a CommonMark parser with GFM tables: what a reader sees.
    # decay table + per-size table + curve table; one title, two sections; two plots
    assert rendered_structure(text) == {"h1": 1, "h2": 2, "h3": 0, "tables": 3, "images": 2}


def test_report_needs_records(tmp_path):
    with pytest.raises(ThermoseedError, match="neither"):
        write_report([], tmp_path)


def test_two_seeds_per_size_give_a_report_that_says_why_there_is_no_rate(tmp_path):
    """Two seeds are a valid sweep, but a bootstrap of two seeds repeats one seed half the
    time (zero variance): the report says so per group instead of failing."""
    jobs = make_grid([2, 3], ["uniform"], range(2), costs=("local",), depths=[1])
    out = run_sweep(jobs, tmp_path / "sweep.jsonl", workers=1, progress=False)
    text = write_report(out.records, tmp_path / "report", n_boot=200).read_text()
    assert "No decay rate for local cost, uniform on [0, 2pi) (2 seeds per size)" in text
    assert "probe more seeds" in text
    # no decay table and no decay plot, the per-size table stays
    assert rendered_structure(text)["tables"] == 1
    assert not (tmp_path / "report" / "decay.png").exists()
