"""The report's figures when no PNG file is asked for (``figures.formats: []`` or ``[pdf]``):
drawn by the figure processes while the tables are written, embedded as before, and never
left in the output folder (scaling.render.figure_worker, scaling.render.figures).

Every check here is internal consistency: the PNG the report embedded when it drew each
figure itself, in the calling process (:func:`scaling.render.figures.figure_png`,
:func:`~scaling.render.figures.partial_png`), is the reference for the ones drawn elsewhere.
"""
from __future__ import annotations

import base64
import os
import re
import sys
from pathlib import Path

import pytest

import scaling.render.figure_worker as fw
import scaling.render.figures as figures
from scaling.io.config import load_config
from scaling.run.pipeline import analyse, run_config

needs_fork = pytest.mark.skipif(
    not sys.platform.startswith("linux") or len(os.sched_getaffinity(0)) < 2,
    reason="figures are drawn in one process on this machine (not Linux, or one core)")

_IMG = re.compile(r'<img alt="([^"]*)" src="data:image/png;base64,([^"]*)"')
_STAMP = re.compile(r"\d{4}-\d\d-\d\d[ T]\d\d:\d\d(:\d\d\+00:00)?")


@pytest.fixture(autouse=True)
def only_this_thread(monkeypatch):
    """Other tests leave idle threads behind (dask's pool), which makes a run draw in one
    process for safety; here the forking road is what is tested."""
    monkeypatch.delenv("SCALING_ONE_PROCESS", raising=False)
    monkeypatch.setattr(fw.threading, "active_count", lambda: 1)


def _images(folder: Path) -> list:
    """(alt text, PNG bytes) of every image embedded in ``folder/report.html``."""
    page = (folder / "report.html").read_text(encoding="utf-8")
    return [(alt, base64.b64decode(data)) for alt, data in _IMG.findall(page)]


def _outputs(folder: Path) -> dict:
    """Every file of an output folder, its creation time blanked (the rest byte for byte)."""
    out = {}
    for path in sorted(folder.rglob("*")):
        if path.is_file():
            data = path.read_bytes()
            if path.suffix in (".html", ".md", ".json"):
                data = _STAMP.sub("TIME", data.decode("utf-8")).encode("utf-8")
            out[path.relative_to(folder).as_posix()] = data
    return out


def _config(folder: Path, formats: str) -> Path:
    """Two groups on y = 3 x^0.75 (a simulation with a known truth) and the two cheapest
    figure kinds (two are needed for a split between processes)."""
    import numpy as np
    import pandas as pd
    rng = np.random.default_rng(7)
    mass = 10 ** rng.uniform(0, 3, 40)
    rate = 3.0 * mass ** 0.75 * 10 ** rng.normal(0, 0.05, 40)
    pd.DataFrame({"grp": ["a"] * 20 + ["b"] * 20, "mass": mass, "rate": rate}).to_csv(
        folder / "small.csv", index=False)
    path = folder / "run.yaml"
    path.write_text(
        "data: {file: small.csv, x: mass, y: rate, group: grp}\n"
        "groups: {compare: false}\ndiagnostics: {enabled: false}\n"
        f"figures: {{kinds: [natural, exponents], formats: {formats}, dpi: 60}}\n",
        encoding="utf-8")
    return path


def _several_config(folder: Path, formats: str) -> Path:
    """Two predictors, y = 0.5 d^2 h (a simulation with a known truth): one partial
    figure per predictor in the report."""
    import numpy as np
    import pandas as pd
    rng = np.random.default_rng(11)
    d = 10 ** rng.uniform(0.5, 2, 40)
    h = 10 ** rng.uniform(0.3, 1.5, 40)
    y = 0.5 * d ** 2 * h * 10 ** rng.normal(0, 0.05, 40)
    pd.DataFrame({"d": d, "h": h, "y": y}).to_csv(folder / "trees.csv", index=False)
    path = folder / "several.yaml"
    path.write_text(
        "data: {file: trees.csv, x: [d, h], y: y}\nmodel: {methods: [ols]}\n"
        "diagnostics: {enabled: false}\n"
        f"figures: {{formats: {formats}, dpi: 60}}\n", encoding="utf-8")
    return path


def _drawn_here(config: Path) -> list:
    """The report's images as the report drew them itself, in this process."""
    import warnings
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = analyse(load_config(config), quiet=True)
    if result.multi_fit is not None:
        from scaling.render.figure_kinds import partial_figure_name
        return [(f"{partial_figure_name(t)} figure", figures.partial_png(result, t))
                for t in result.multi_fit.names]
    return [(f"{kind} figure", figures.figure_png(result, kind))
            for kind in result.config.figures.kinds]


def _log_drawing(monkeypatch, log: Path) -> None:
    """Note ``pid kind`` in ``log`` for every figure made (forked processes inherit it)."""
    real = figures.make_figure

    def make_figure(result, kind, **kw):
        with open(log, "a", encoding="utf-8") as fh:
            fh.write(f"{os.getpid()} {kind}\n")
        return real(result, kind, **kw)

    monkeypatch.setattr(figures, "make_figure", make_figure)


@needs_fork
@pytest.mark.parametrize("formats", ["[]", "[pdf]"])
def test_report_images_drawn_elsewhere_equal_those_drawn_here(tmp_path, monkeypatch, formats):
    config = _config(tmp_path, formats)
    log = tmp_path / "drawn.log"
    _log_drawing(monkeypatch, log)
    started = []
    real_start = fw.FigureWorker.__init__
    monkeypatch.setattr(fw.FigureWorker, "__init__",
                        lambda self, **kw: (started.append(1), real_start(self, **kw))[1])
    run_config(config, out=tmp_path / "out", quiet=True)
    assert started == [1]   # the worker started with the run drew them

    drawn = [line.split() for line in log.read_text(encoding="utf-8").splitlines()]
    assert str(os.getpid()) not in {pid for pid, _ in drawn}   # none in this process
    per_format = 1 + formats.count("pdf")   # the report's PNG, and the PDF file
    assert sorted(kind for _, kind in drawn) == sorted(["natural", "exponents"] * per_format)

    assert not list((tmp_path / "out").rglob("*.png"))
    assert not (tmp_path / "out" / fw.REPORT_PNGS).exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(
        ["drawn.log", "out", "run.yaml", "small.csv"])   # no temporary folder left beside it
    assert _images(tmp_path / "out") == _drawn_here(config)
    pdfs = sorted(p.name for p in (tmp_path / "out").rglob("*.pdf"))
    assert pdfs == (["exponents.pdf", "natural.pdf"] if per_format == 2 else [])


@pytest.mark.parametrize("formats", ["[]", "[pdf]"])
def test_one_process_writes_the_same_report(tmp_path, monkeypatch, formats):
    config = _config(tmp_path, formats)
    run_config(config, out=tmp_path / "many", quiet=True)
    monkeypatch.setenv("SCALING_ONE_PROCESS", "1")
    log = tmp_path / "drawn.log"
    _log_drawing(monkeypatch, log)
    run_config(config, out=tmp_path / "one", quiet=True)
    kinds = [line.split()[1] for line in log.read_text(encoding="utf-8").splitlines()]
    assert len(kinds) == 2 * (1 + formats.count("pdf"))   # each figure once per format
    one, many = _outputs(tmp_path / "one"), _outputs(tmp_path / "many")
    assert sorted(one) == sorted(many)
    assert [name for name in one if one[name] != many[name]] == []
    assert len(_images(tmp_path / "one")) == 2


@needs_fork
def test_partial_figures_of_several_predictors_are_drawn_with_the_pdfs(tmp_path):
    config = _several_config(tmp_path, "[pdf]")
    run_config(config, out=tmp_path / "out", quiet=True)
    images = _images(tmp_path / "out")
    assert [alt for alt, _ in images] == ["partial_d figure", "partial_h figure"]
    assert images == _drawn_here(config)
    assert not list((tmp_path / "out").rglob("*.png"))
    assert sorted(p.name for p in (tmp_path / "out" / "figures").iterdir()) == [
        "partial_d.pdf", "partial_h.pdf"]


def test_report_written_on_its_own_draws_its_figures(tmp_path):
    # a report written outside a run (no figures drawn into the folder) draws them itself
    from scaling.render.report import write_report
    config = _config(tmp_path, "[]")
    result = analyse(load_config(config), quiet=True)
    (tmp_path / "alone").mkdir()
    write_report(result, tmp_path / "alone", [])
    assert _images(tmp_path / "alone") == _drawn_here(config)


def test_a_figure_that_failed_where_it_was_drawn_is_left_out(tmp_path, monkeypatch):
    # the figure process could not draw 'natural': the report leaves it out, as it did when
    # it drew the figure itself and failed (and does not try again)
    from scaling.render.report import write_report
    config = _config(tmp_path, "[]")
    result = analyse(load_config(config), quiet=True)
    real = figures.figure_png
    monkeypatch.setattr(figures, "figure_png", lambda res, kind, **kw: (
        (_ for _ in ()).throw(RuntimeError("no")) if kind == "natural" else real(res, kind,
                                                                                  **kw)))
    paths, notes = fw.draw_figures(result, tmp_path / "run")
    assert paths == [] and notes == []
    assert sorted(p.name for p in (tmp_path / "run" / fw.REPORT_PNGS).iterdir()) == [
        "exponents.png"]
    monkeypatch.setattr(figures, "figure_png", lambda *a, **k: pytest.fail("drawn again"))
    write_report(result, tmp_path / "run", paths)
    assert [alt for alt, _ in _images(tmp_path / "run")] == ["exponents figure"]
