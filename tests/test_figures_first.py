"""A run's figures are started as soon as what they draw exists, and the processes that draw
them get only that (scaling.run.pipeline, scaling.render.figure_worker, scaling.io.output).

Every check here is internal consistency: the figures drawn in this process from the finished
run are the reference for the figures drawn elsewhere while the run was still computing.
"""
from __future__ import annotations

import dataclasses
import io
import os
import pickle
import signal
import subprocess
import sys
import time
import warnings
from pathlib import Path

import pytest

import scaling.render.figure_worker as fw
import scaling.run.pipeline as pipeline
from scaling.io.config import load_config

needs_fork = pytest.mark.skipif(
    not sys.platform.startswith("linux") or len(os.sched_getaffinity(0)) < 2,
    reason="figures are drawn in one process on this machine (not Linux, or one core)")


@pytest.fixture(autouse=True)
def only_this_thread(monkeypatch):
    """Other tests leave idle threads behind (dask's pool), which makes a run draw in one
    process for safety; here the forking road is what is tested."""
    monkeypatch.delenv("SCALING_ONE_PROCESS", raising=False)
    monkeypatch.setattr(fw.threading, "active_count", lambda: 1)


@pytest.fixture(scope="module")
def config(tmp_path_factory) -> Path:
    """Four groups on y = 3 x^0.75 with slopes a little apart (a simulation with a known
    truth), compared, with predictions, diagnostics and a summary across groups (spread_min
    3): every table a figure reads.  Three kinds (the scaling figure draws the group means
    and lines, natural the predictions, exponents the spread) in png at the lowest dpi."""
    import numpy as np
    import pandas as pd
    folder = tmp_path_factory.mktemp("first")
    rng = np.random.default_rng(3)
    frames = []
    for i, g in enumerate("abcd"):
        mass = 10 ** rng.uniform(0, 3, 12)
        rate = 3.0 * mass ** (0.7 + 0.03 * i) * 10 ** rng.normal(0, 0.05, 12)
        frames.append(pd.DataFrame({"grp": g, "mass": mass, "rate": rate}))
    pd.concat(frames).to_csv(folder / "four.csv", index=False)
    (folder / "run.yaml").write_text(
        "data: {file: four.csv, x: mass, y: rate, group: grp}\n"
        "prediction: {x: [5, 50]}\n"
        "groups: {compare: true, spread_min: 3}\n"
        "figures: {kinds: [scaling, natural, exponents], formats: [png], dpi: 50}\n",
        encoding="utf-8")
    return folder / "run.yaml"


def _figures(folder: Path) -> dict:
    return {p.relative_to(folder).as_posix(): p.read_bytes()
            for p in sorted((folder / "figures").rglob("*")) if p.is_file()}


@pytest.fixture(scope="module")
def drawn_after(config, tmp_path_factory) -> dict:
    """The figures drawn in this process from the finished run (the reference)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = pipeline.analyse(load_config(config), quiet=True)
    assert "exponent_spread" in result.tables and "predictions" in result.tables
    folder = tmp_path_factory.mktemp("after")
    os.environ["SCALING_ONE_PROCESS"] = "1"
    try:
        paths, notes = fw.draw_figures(result, folder)
    finally:
        del os.environ["SCALING_ONE_PROCESS"]
    assert notes == [] and "figures/group_exponents.png" in paths
    return _figures(folder)


def _record_order(monkeypatch, order: list) -> None:
    """Note in ``order`` when the figures are started and when the later stages run."""
    real_start = pipeline.start_figures
    monkeypatch.setattr(pipeline, "start_figures", lambda *a, **k: (
        order.append("figures started"), real_start(*a, **k))[1])
    for name in ("check_run", "diagnostics_stage", "resampling_stage"):
        real = getattr(pipeline, name)
        monkeypatch.setattr(pipeline, name, lambda *a, real=real, name=name, **k: (
            order.append(name), real(*a, **k))[1])


def _shares_logged(monkeypatch, log: Path) -> None:
    """Write the pid of every drawing process forked by the worker into ``log``, and make
    those processes slow (they would outlive a worker that failed to end them)."""
    real = fw._Share.__init__
    here = os.getpid()

    def init(self, *a, **k):
        real(self, *a, **k)
        if os.getpid() != here:   # in the worker (which inherits the patch)
            with open(log, "a", encoding="utf-8") as fh:
                fh.write(f"{self.pid}\n")
    monkeypatch.setattr(fw._Share, "__init__", init)
    real_draw = fw._draw_share

    def draw_share(*a, **k):
        if os.getpid() != here and os.getppid() != here:   # forked by the worker
            time.sleep(30)
        return real_draw(*a, **k)
    monkeypatch.setattr(fw, "_draw_share", draw_share)


def _wait_for_a_share(log: Path) -> None:
    """Wait until the worker has forked its drawing process."""
    end = time.monotonic() + 60
    while not (log.exists() and log.read_text().strip()) and time.monotonic() < end:
        time.sleep(0.01)


def _running(pid: int) -> bool:
    """True while ``pid`` runs (a zombie waiting for its reaper has ended)."""
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state not in ("Z", "X")


def _all_ended(pids, timeout: float = 10.0) -> bool:
    end = time.monotonic() + timeout
    while any(_running(p) for p in pids) and time.monotonic() < end:
        time.sleep(0.05)
    return not any(_running(p) for p in pids)


@needs_fork
def test_figures_started_before_the_diagnostics_equal_those_drawn_after(
        tmp_path, monkeypatch, config, drawn_after):
    order, workers = [], []
    _record_order(monkeypatch, order)
    real_init = fw.FigureWorker.__init__
    monkeypatch.setattr(fw.FigureWorker, "__init__",
                        lambda self, **kw: (workers.append(self), real_init(self, **kw))[1])
    pipeline.run_config(config, out=tmp_path / "out", quiet=True)
    assert order == ["figures started", "check_run", "diagnostics_stage", "resampling_stage"]
    assert len(workers) == 1 and workers[0]._proc is None   # it drew them and was joined
    assert _figures(tmp_path / "out") == drawn_after
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]   # no temporary folder left


@needs_fork
def test_figures_started_early_without_a_worker_equal_those_drawn_after(
        tmp_path, monkeypatch, config, drawn_after):
    # no worker (e.g. it could not be forked): two processes forked at the hand-over draw
    monkeypatch.setattr(pipeline, "start_worker", lambda cfg: None)
    order = []
    _record_order(monkeypatch, order)
    pipeline.run_config(config, out=tmp_path / "out", quiet=True)
    assert order[0] == "figures started"
    assert _figures(tmp_path / "out") == drawn_after


def _workers_and_shares_logged(monkeypatch, tmp_path):
    """The figure workers the run starts (a list filled as they are made) and the log of
    their drawing processes' pids (:func:`_shares_logged`)."""
    workers = []
    real_init = fw.FigureWorker.__init__
    monkeypatch.setattr(fw.FigureWorker, "__init__",
                        lambda self, **kw: (workers.append(self), real_init(self, **kw))[1])
    log = tmp_path / "shares.log"
    _shares_logged(monkeypatch, log)
    return workers, log


@needs_fork
def test_a_worker_killed_mid_run_still_gives_every_figure(tmp_path, monkeypatch, config,
                                                          drawn_after):
    workers, log = _workers_and_shares_logged(monkeypatch, tmp_path)
    real_check = pipeline.check_run

    def check_run(cfg, state):   # the worker is drawing the run handed over: kill it now
        _wait_for_a_share(log)
        os.kill(workers[0]._proc.pid, signal.SIGKILL)
        return real_check(cfg, state)
    monkeypatch.setattr(pipeline, "check_run", check_run)
    pipeline.run_config(config, out=tmp_path / "out", quiet=True)
    assert _figures(tmp_path / "out") == drawn_after   # drawn here instead
    shares = [int(p) for p in log.read_text().split()]
    assert shares and _all_ended(shares, timeout=2)   # the worker's drawing process died too
    assert sorted(p.name for p in tmp_path.iterdir() if p.name != "shares.log") == ["out"]


@needs_fork
def test_a_run_failing_after_the_figures_started_leaves_no_folder_and_no_process(
        tmp_path, monkeypatch, config):
    workers, log = _workers_and_shares_logged(monkeypatch, tmp_path)

    def diagnostics_stage(cfg, state, **_):   # fail while the worker's second process draws
        _wait_for_a_share(log)
        raise RuntimeError("the diagnostics failed")
    monkeypatch.setattr(pipeline, "diagnostics_stage", diagnostics_stage)
    with pytest.raises(RuntimeError, match="diagnostics failed"):
        pipeline.run_config(config, out=tmp_path / "out", quiet=True)
    shares = [int(p) for p in log.read_text().split()]
    assert shares and workers[0]._proc is None   # the worker was ended and reaped
    # and its drawing process before it, by the worker (not left a zombie to be reaped)
    assert not [pid for pid in shares if Path(f"/proc/{pid}").exists()]
    time.sleep(0.3)   # nothing left to write a figure into the folder
    assert sorted(p.name for p in tmp_path.iterdir()) == ["shares.log"]


def test_analyse_alone_draws_nothing_and_imports_no_matplotlib(config):
    code = ("import sys; from scaling.run.pipeline import analyse; "
            "from scaling.io.config import load_config; "
            f"r = analyse(load_config({str(config)!r})); "
            "print('matplotlib' in sys.modules, 'exponent_spread' in r.tables)")
    before = sorted(p.name for p in config.parent.iterdir())
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         cwd=config.parent)
    assert out.returncode == 0, out.stderr
    assert out.stdout.split() == ["False", "True"]
    assert sorted(p.name for p in config.parent.iterdir()) == before   # nothing written


def test_the_figures_get_only_the_tables_they_read(config):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = pipeline.analyse(load_config(config), quiet=True)
    view = fw.figure_view(result)
    assert set(view.tables) == set(result.tables) & fw.FIGURE_TABLES
    assert {"diagnostics", "points_to_check"} <= set(result.tables) - set(view.tables)
    assert view.messages == () and view.warnings == () and len(view.slope_tests) == 0
    assert view.line_fits is result.line_fits and view.fits is result.fits
    assert view.data.points is result.data.points and view.manifest == {}


def test_the_run_sent_loads_as_the_run_pickled_the_usual_way(config):
    # the cheaper reductions of a fit (and its intervals and moments) load as the objects
    # the usual pickle loads: both pickled again the usual way give the same bytes
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = pipeline.analyse(load_config(config), quiet=True)
    view = fw.figure_view(result)
    back = pickle.loads(_dumped(view))
    usual = pickle.loads(pickle.dumps(view, protocol=pickle.HIGHEST_PROTOCOL))
    assert (pickle.dumps(back, protocol=pickle.HIGHEST_PROTOCOL)
            == pickle.dumps(usual, protocol=pickle.HIGHEST_PROTOCOL))
    fit = back.line_fits[("pooled", "", "sma")]
    assert type(fit.moments) is type(result.line_fits[("pooled", "", "sma")].moments)
    import numpy as np
    assert type(pickle.loads(_dumped(np.float64(0.1)))) is np.float64


def _dumped(obj) -> bytes:
    fh = io.BytesIO()
    fw._dump(obj, fh)
    return fh.getvalue()


@dataclasses.dataclass(frozen=True, slots=True)
class _Plain:
    a: float
    b: tuple


@dataclasses.dataclass(frozen=True, slots=True)
class _OwnReduction:
    a: float

    def __reduce__(self):
        return _OwnReduction, (self.a + 1,)   # marks that its own reduction was used


def test_the_send_reduces_dataclasses_as_pickle_would():
    import numpy as np
    plain = _Plain(np.float64(0.5), (1, "x"))
    back = pickle.loads(_dumped([plain, plain, _OwnReduction(1.0)]))
    assert back[0] == plain and back[0] is back[1]   # one object, sent once
    assert type(back[0].a) is np.float64
    assert back[2] == pickle.loads(pickle.dumps(_OwnReduction(1.0))) == _OwnReduction(2.0)
