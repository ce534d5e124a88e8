"""Figures drawn in a forked worker and a second process: same files, and nothing lost
when a process fails (scaling.render.figure_worker).

Every check here is internal consistency (the files from one process are the
reference for the files from several), except where a line says otherwise.
"""
from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

import scaling.render.figure_worker as fw
from scaling.io.config import load_config
from scaling.run.pipeline import analyse, run_config

ROOT = Path(__file__).resolve().parents[1]
DEMO_CONFIG = ROOT / "configs" / "demo.yaml"

needs_fork = pytest.mark.skipif(
    not sys.platform.startswith("linux") or len(os.sched_getaffinity(0)) < 2,
    reason="figures are drawn in one process on this machine (not Linux, or one core)")


@pytest.fixture(autouse=True)
def only_this_thread(monkeypatch):
    """Other tests leave idle threads behind (dask's pool), which makes a run draw in
    one process for safety; here the forking paths are what is tested."""
    monkeypatch.delenv("SCALING_ONE_PROCESS", raising=False)
    monkeypatch.setattr(fw.threading, "active_count", lambda: 1)


def _files(folder: Path) -> dict:
    return {p.relative_to(folder).as_posix(): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file()
            and p.name not in ("results.json", "summary.md", "report.html")}


@pytest.fixture(scope="module")
def small_config(tmp_path_factory) -> Path:
    """Two groups on y = 3 x^0.75 (a simulation with a known truth), the two cheapest
    figure kinds (two are needed for a split) in png and pdf at a low resolution: the
    worker's paths at a fraction of the demo's cost."""
    import numpy as np
    import pandas as pd
    folder = tmp_path_factory.mktemp("small")
    rng = np.random.default_rng(7)
    mass = 10 ** rng.uniform(0, 3, 40)
    rate = 3.0 * mass ** 0.75 * 10 ** rng.normal(0, 0.05, 40)
    pd.DataFrame({"grp": ["a"] * 20 + ["b"] * 20, "mass": mass, "rate": rate}).to_csv(
        folder / "small.csv", index=False)
    (folder / "run.yaml").write_text(
        "data: {file: small.csv, x: mass, y: rate, group: grp}\n"
        "prediction: {x: [5, 50]}\n"
        "groups: {compare: false}\ndiagnostics: {enabled: false}\n"
        "figures: {kinds: [natural, exponents], formats: [png, pdf], dpi: 60}\n",
        encoding="utf-8")
    return folder / "run.yaml"


@pytest.fixture(scope="module")
def demo_result(small_config):
    import warnings
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return analyse(load_config(small_config), quiet=True)


@needs_fork
def test_worker_run_writes_the_same_files_as_one_process(tmp_path, monkeypatch, small_config):
    # internal consistency: every CSV, the LaTeX table and every PNG/PDF byte for byte
    # (the report and results.json carry the run's time, so they are left out)
    started = []
    real_start = fw.FigureWorker.__init__
    monkeypatch.setattr(fw.FigureWorker, "__init__",
                        lambda self, **kw: (started.append(1), real_start(self, **kw))[1])
    run_config(small_config, out=tmp_path / "many", quiet=True)
    assert started == [1]
    monkeypatch.setenv("SCALING_ONE_PROCESS", "1")
    assert fw.start_worker(load_config(small_config)) is None
    run_config(small_config, out=tmp_path / "one", quiet=True)
    one, many = _files(tmp_path / "one"), _files(tmp_path / "many")
    assert sorted(one) == sorted(many)
    assert [name for name in one if one[name] != many[name]] == []
    assert {"figures/natural.png", "figures/exponents.pdf"} <= set(one)


@needs_fork
def test_second_process_failure_draws_its_share_here(tmp_path, monkeypatch, demo_result):
    parent = os.getpid()
    real = fw._draw_share

    def failing_in_child(result, folder, kinds=None, extras=True):
        if os.getpid() != parent:
            raise RuntimeError("second process fails")
        return real(result, folder, kinds, extras)

    monkeypatch.setattr(fw, "_draw_share", failing_in_child)
    paths, notes = fw.draw_figures(demo_result, tmp_path)
    kinds = list(demo_result.config.figures.kinds)
    formats = list(demo_result.config.figures.formats)
    assert paths == [f"figures/{k}.{f}" for k in kinds for f in formats]   # config order
    assert notes == []
    assert all((tmp_path / p).stat().st_size > 0 for p in paths)


@needs_fork
def test_dead_worker_leaves_the_figures_to_the_caller(tmp_path, demo_result):
    worker = fw.start_worker(demo_result.config)
    assert worker is not None
    worker._proc.kill()
    worker._proc.join()
    assert worker.draw(demo_result, tmp_path) is None
    worker.close()   # idempotent


@needs_fork
def test_worker_draws_a_run_and_stops(tmp_path, demo_result):
    worker = fw.start_worker(demo_result.config)
    (tmp_path / "figures").mkdir()
    paths, notes = worker.draw(demo_result, tmp_path)
    assert notes == [] and "figures/natural.pdf" in paths and len(paths) == 4
    assert worker._proc is None   # joined after its one run


def test_large_runs_are_not_sent_to_the_worker(tmp_path, monkeypatch, demo_result):
    monkeypatch.setattr(fw, "SEND_MAX_POINTS", 10)
    worker = fw.start_worker(demo_result.config)
    if worker is None:
        pytest.skip("figures are drawn in one process on this machine")
    assert worker.draw(demo_result, tmp_path) is None


def test_runs_without_figures_start_no_worker(write_config, small_csv):
    cfg = load_config(write_config(
        f"data: {{file: {small_csv}, x: mass, y: rate}}\nfigures: {{kinds: []}}\n"))
    assert fw.start_worker(cfg) is None


@pytest.mark.parametrize("formats, pdf", [("[png]", False), ("[png, pdf]", True)])
def test_the_worker_imports_the_pdf_writer_only_for_runs_writing_pdfs(
        formats, pdf, write_config, small_csv, monkeypatch):
    asked = []
    monkeypatch.setattr(fw, "FigureWorker", lambda **kw: asked.append(kw) or "worker")
    monkeypatch.setattr(fw, "one_process", lambda: False)
    cfg = load_config(write_config(
        f"data: {{file: {small_csv}, x: mass, y: rate}}\nfigures: {{formats: {formats}}}\n"))
    assert fw.start_worker(cfg) == "worker" and asked == [{"pdf": pdf}]


@pytest.mark.parametrize("pdf", [False, True])
def test_warming_up_without_pdfs_leaves_the_pdf_writer_unimported(pdf):
    # common practice, no source: a fresh interpreter shows which modules were loaded
    code = ("import sys; from scaling.render.figure_worker import _warm_up; "
            f"_warm_up({pdf}); print('matplotlib.backends.backend_pdf' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         cwd=ROOT)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip().splitlines()[-1] == str(pdf)


def test_a_process_drawing_a_share_itself_leaves_the_extra_figures_to_its_fork(
        tmp_path, monkeypatch, demo_result):
    # the drawing process also loads the run and reads what follows it: the figures
    # beyond the kinds go to the process it forks; both forked: the first share has them
    made = []

    class Recorded:
        def __init__(self, result, folder, kinds, extras):
            made.append((list(kinds), extras))

        def stop(self):
            pass

    monkeypatch.setattr(fw, "_Share", Recorded)
    drawing = fw._start_here(demo_result, tmp_path, draw_here=True)
    assert [extras for _, extras in made] == [True] and drawing._here[1] is False
    made.clear()
    fw._start_here(demo_result, tmp_path, draw_here=False)
    assert [extras for _, extras in made] == [False, True]


def test_split_balances_the_drawing_cost():
    # exact law: greedy largest-first split of the registry's costs 4, 3, 2, 1 gives 5 and 5
    from scaling.render.figure_kinds import FIGURES, KINDS
    a, b = fw._split(list(KINDS))
    assert sorted(a + b) == sorted(KINDS)
    assert sum(FIGURES[k].cost for k in a) == sum(FIGURES[k].cost for k in b) == 5


def test_output_buffered_before_the_run_is_printed_once(tmp_path, small_config):
    # common practice, no source: a forked process must not flush its copy of the
    # parent's unwritten output (stdout to a pipe is block-buffered)
    code = ("from scaling.run.pipeline import run_config; print('printed before the run'); "
            f"run_config({str(small_config)!r}, out={str(tmp_path / 'o')!r}, quiet=True)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         cwd=ROOT)
    assert out.returncode == 0, out.stderr
    assert out.stdout.count("printed before the run") == 1
    assert (tmp_path / "o" / "figures" / "natural.png").is_file()


def test_a_run_without_figures_does_not_import_matplotlib(tmp_path, small_config):
    # common practice, no source: a fresh interpreter shows whether matplotlib was loaded
    cfg = small_config.read_text(encoding="utf-8").replace(
        "figures: {kinds: [natural, exponents],", "figures: {kinds: [],")
    path = small_config.parent / "nofig.yaml"
    path.write_text(cfg, encoding="utf-8")
    code = ("import sys; from scaling.run.pipeline import run_config; "
            f"run_config({str(path)!r}, out={str(tmp_path / 'o')!r}, quiet=True); "
            "print('matplotlib' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip().splitlines()[-1] == "False"
    assert not list((tmp_path / "o" / "figures").glob("*"))


@needs_fork
def test_figures_started_here_are_drawn_by_two_processes_in_config_order(tmp_path,
                                                                          demo_result):
    parent = os.getpid()
    drawing = fw.start_figures(demo_result, tmp_path)   # no worker: two forked processes
    assert len(drawing._shares) == 2 and all(s.pid != parent for s in drawing._shares)
    paths, notes = drawing.wait()
    kinds = list(demo_result.config.figures.kinds)
    formats = list(demo_result.config.figures.formats)
    assert paths == [f"figures/{k}.{f}" for k in kinds for f in formats] and notes == []
    assert drawing.wait() == (paths, notes)   # asked again: the same answer


@needs_fork
def test_cancelled_drawing_leaves_no_process_behind(tmp_path, demo_result):
    drawing = fw.start_figures(demo_result, tmp_path)
    pids = [s.pid for s in drawing._shares]
    drawing.cancel()
    for pid in pids:   # reaped: no longer a child of this process
        with pytest.raises(ChildProcessError):
            os.waitpid(pid, os.WNOHANG)


@needs_fork
def test_worker_streams_the_run_and_draws_while_the_caller_waits(tmp_path, demo_result):
    worker = fw.start_worker(demo_result.config)
    drawing = fw.start_figures(demo_result, tmp_path, worker)
    assert drawing._worker is worker   # the worker took the run
    paths, notes = drawing.wait()
    assert notes == [] and len(paths) == 4
    assert all((tmp_path / p).stat().st_size > 0 for p in paths)
    assert worker._proc is None


def test_one_process_draws_on_waiting(tmp_path, monkeypatch, demo_result):
    monkeypatch.setenv("SCALING_ONE_PROCESS", "1")
    drawing = fw.start_figures(demo_result, tmp_path)
    assert not drawing._shares and not list((tmp_path / "figures").glob("*"))
    paths, notes = drawing.wait()
    assert len(paths) == 4 and notes == []


@needs_fork
@pytest.mark.parametrize("forks_granted", [0, 1])
def test_no_process_to_be_had_leaves_the_figures_here(tmp_path, monkeypatch, demo_result,
                                                      forks_granted):
    real_fork, granted = os.fork, []

    def fork():
        if len(granted) >= forks_granted:
            raise OSError("no more processes")
        granted.append(1)
        return real_fork()

    monkeypatch.setattr(fw.os, "fork", fork)
    drawing = fw.start_figures(demo_result, tmp_path)
    assert len(drawing._shares) == forks_granted
    paths, notes = drawing.wait()
    kinds = list(demo_result.config.figures.kinds)
    formats = list(demo_result.config.figures.formats)
    assert paths == [f"figures/{k}.{f}" for k in kinds for f in formats] and notes == []
