"""A check computed in a forked process while the run goes on (scaling.run.background),
and the error-structure comparison started that way once the points exist
(scaling.run.diagnostics.early_checks)."""
from __future__ import annotations

import os

import numpy as np
import pandas as pd
import pytest

from scaling.errors import DataError
from scaling.render.figure_worker import one_process
from scaling.run import diagnostics as diag
from scaling.run.background import Background
from scaling.run.pipeline import analyse
from scaling.io.config import config_from_dict
from scaling.stats.error_structure import compare_error_structure


def _no_children_left() -> bool:
    """True when this process has no child left to reap (none running, none a zombie)."""
    try:
        os.waitpid(-1, os.WNOHANG)
    except ChildProcessError:
        return True
    return False


def _points(n: int = 400, seed: int = 3):
    """Simulated y = 2 x^0.75 with lognormal scatter (invented; known truth)."""
    rng = np.random.default_rng(seed)
    x = 10 ** rng.uniform(0, 3, n)
    return x, 2.0 * x ** 0.75 * 10 ** rng.normal(0, 0.1, n)


def test_background_answer_is_the_call_made_here():
    x, y = _points()
    job = Background(compare_error_structure, x, y)
    assert job._pid is not None or one_process()   # forked where forking is allowed
    # internal consistency: the same function on the same arrays, in this process
    assert job.result() == compare_error_structure(x, y)
    assert _no_children_left()


def test_background_raises_what_the_call_raised():
    x, y = _points()
    job = Background(compare_error_structure, x, -y)   # negative y: no logarithms
    with pytest.raises(DataError, match="positive"):
        job.result()
    assert _no_children_left()


def _dies_in_a_child(parent: int, value: float) -> float:
    if os.getpid() != parent:
        os._exit(3)   # the forked child dies without answering
    return value * 2


def test_background_whose_child_died_is_computed_here():
    assert Background(_dies_in_a_child, os.getpid(), 21.0).result() == 42.0
    assert _no_children_left()


def test_background_stopped_unread_leaves_no_process():
    job = Background(sorted, range(10))
    job.stop()
    job.stop()   # idempotent
    assert _no_children_left()


def _table(tmp_path, n: int = 600):
    rng = np.random.default_rng(11)
    x = 10 ** rng.uniform(0, 3, n)
    y = 2.0 * x ** 0.75 * 10 ** rng.normal(0, 0.1, n)
    path = tmp_path / "t.csv"
    pd.DataFrame({"mass": x, "rate": y, "grp": np.repeat(["a", "b", "c"], n // 3)}).to_csv(
        path, index=False)
    return config_from_dict({"data": {"file": str(path), "x": "mass", "y": "rate",
                                      "group": "grp"},
                             "exponents": {"three_quarters": 0.75}}, base_dir=tmp_path)


def test_error_structure_started_early_equals_the_one_computed_in_the_stage(
        tmp_path, monkeypatch):
    cfg = _table(tmp_path)
    started = []

    class Counted(Background):
        def __init__(self, fn, *args):
            started.append(fn)
            super().__init__(fn, *args)

    monkeypatch.setattr(diag, "Background", Counted)
    monkeypatch.setattr(diag, "EARLY_FROM_POINTS", 10)
    early = analyse(cfg).tables["error_structure"]
    # the pooled line's comparison went to a forked process
    assert started.count(diag._error_structure) == 1
    monkeypatch.setattr(diag, "EARLY_FROM_POINTS", 10**9)
    late = analyse(cfg).tables["error_structure"]
    assert started.count(diag._error_structure) == 1
    # internal consistency: the same function of the same points, in either process
    pd.testing.assert_frame_equal(early, late, check_exact=True)
    assert _no_children_left()


def test_run_failing_after_the_early_start_leaves_no_process(tmp_path, monkeypatch):
    cfg = _table(tmp_path)
    monkeypatch.setattr(diag, "EARLY_FROM_POINTS", 10)
    import scaling.run.pipeline as pipeline

    def broken(cfg, state):
        raise DataError("a stage failed")

    monkeypatch.setattr(pipeline, "fit_stage", broken)
    with pytest.raises(DataError, match="a stage failed"):
        analyse(cfg)
    assert _no_children_left()


def test_no_early_start_below_the_threshold_or_without_the_check(tmp_path):
    cfg = _table(tmp_path)
    pts = pd.DataFrame({"x": [1.0, 2.0], "y": [1.0, 2.0]})
    assert diag.early_checks(cfg, pts) == {}   # two points: not worth a process
    assert diag.early_checks(cfg, None) == {}


def test_background_forks_nothing_when_asked_for_one_process(monkeypatch):
    monkeypatch.setenv("SCALING_ONE_PROCESS", "1")
    job = Background(_dies_in_a_child, os.getpid(), 4.0)
    assert job._pid is None   # nothing forked: computed when asked, in this process
    assert job.result() == 8.0


def _diagnosed(cfg):
    res = analyse(cfg)
    return {k: res.tables[k] for k in ("diagnostics", "influential_rows", "curvature")}


def test_pooled_line_checks_started_early_equal_those_made_in_the_stage(
        tmp_path, monkeypatch):
    cfg = _table(tmp_path)
    started, here = [], []

    class Counted(Background):
        def __init__(self, fn, *args):
            started.append(fn.__name__)
            super().__init__(fn, *args)

    plain = diag.diagnose

    def counted(fit, *args, **kwargs):
        here.append(fit.n)
        return plain(fit, *args, **kwargs)

    monkeypatch.setattr(diag, "Background", Counted)
    monkeypatch.setattr(diag, "diagnose", counted)
    monkeypatch.setattr(diag, "EARLY_FROM_POINTS", 10)
    early = _diagnosed(cfg)
    assert "_check_lines" in started
    n = 600
    # the pooled lines were checked in the started process (or, where no process may be
    # forked, by the same function when the stage asked), never by the stage's own call
    assert n not in here and here   # the groups' lines still checked in the stage
    monkeypatch.setattr(diag, "EARLY_FROM_POINTS", 10**9)
    here.clear()
    late = _diagnosed(cfg)
    assert here.count(n) == 3   # OLS, SMA and MA of the pooled points, in the stage
    # internal consistency: the same function of the same lines and points
    for name in early:
        pd.testing.assert_frame_equal(early[name], late[name], check_exact=True)
    assert _no_children_left()


def test_an_early_check_of_another_line_is_not_taken(tmp_path, monkeypatch):
    from dataclasses import replace
    cfg = _table(tmp_path)
    res = analyse(cfg)
    pts = res.data.points
    fits = {k: v for k, v in res.line_fits.items() if k[0] == "pooled"}
    monkeypatch.setattr(diag, "EARLY_FROM_POINTS", 10)
    early = diag.early_line_checks(cfg, fits, {("pooled", ""): pts})
    fit = fits[("pooled", "", "sma")]
    rows = pts["row"].to_numpy()
    taken = diag._early_line(early, "pooled", "", "sma", fit, pts, rows)
    assert taken is not None and taken.method == "sma" and taken.rows is rows
    moved = replace(fit, slope=fit.slope + 1e-9)   # another line: checked in the stage
    assert diag._early_line(early, "pooled", "", "sma", moved, pts, rows) is None
    assert diag._early_line(early, "pooled", "", "sma", fit, pts.copy(), rows) is None
    assert diag._early_line(early, "group", "a", "sma", fit, pts, rows) is None
    for job in early.values():
        job[1].stop()
    assert _no_children_left()


def test_a_line_the_early_checks_refused_is_skipped_as_the_stage_would(tmp_path,
                                                                       monkeypatch):
    cfg = _table(tmp_path)
    monkeypatch.setattr(diag, "EARLY_FROM_POINTS", 10)

    def refused(fits, *args):
        return {m: DataError("nothing to diagnose") for m in fits}

    monkeypatch.setattr(diag, "_check_lines", refused)
    table = analyse(cfg).tables["diagnostics"]
    assert not (table["scope"] == "pooled").any() and (table["scope"] == "group").any()
    assert _no_children_left()


def test_residuals_ranked_early_are_those_ranked_in_the_run(tmp_path, monkeypatch):
    # internal consistency: the same function of the same line and points, in either process
    from dataclasses import replace
    from scaling.render.thinning import (PendingRanks, line_residual, rank_positions,
                                         subset_index)
    cfg = _table(tmp_path, n=6000)
    res = analyse(cfg)
    pts = res.data.points
    fits = {k: v for k, v in res.line_fits.items() if k[0] == "pooled"}
    keep = subset_index(len(pts), 5000)
    monkeypatch.setattr(diag, "EARLY_FROM_POINTS", 10)
    early = diag.early_line_checks(cfg, fits, {("pooled", ""): pts}, rank_keep=keep)
    ahead = diag.early_ranks(early, pts)
    X, Y = pts["log_x"].to_numpy(float), pts["log_y"].to_numpy(float)
    by_method = {k[2]: v for k, v in fits.items()}
    for method, fit in by_method.items():
        got = ahead(method, fit)
        want = rank_positions(line_residual(fit, X, Y), keep)
        for a, b in zip(got, want):
            np.testing.assert_array_equal(a, b)
    codes = np.arange(len(pts)) % 3
    made_here = PendingRanks(by_method, X, Y, codes, keep).ranks()
    taken = PendingRanks(by_method, X, Y, codes, keep, ahead=ahead).ranks()
    for method in by_method:
        np.testing.assert_array_equal(taken[method].values, made_here[method].values)
        np.testing.assert_array_equal(taken[method].codes, made_here[method].codes)
        assert taken[method].quartiles == made_here[method].quartiles
        assert taken[method].largest == made_here[method].largest
    # another line, or other points: ranked in the run
    fit = by_method["sma"]
    assert ahead("sma", replace(fit, intercept=fit.intercept + 1e-9)) is None
    assert diag.early_ranks(early, pts.copy()) is None
    for job in early.values():
        job[1].stop()
    assert _no_children_left()


def test_a_written_run_draws_the_same_residual_figure_with_early_ranks(tmp_path,
                                                                       monkeypatch):
    from scaling.run.pipeline import run_config
    cfg = _table(tmp_path, n=6000)
    files = []
    for start in (10, 10**9):   # early (ranked in a forked process) and in the run
        monkeypatch.setattr(diag, "EARLY_FROM_POINTS", start)
        out = tmp_path / f"out{start}"
        run_config(replace_figures(cfg), out=out, quiet=True)
        files.append((out / "figures" / "residuals.png").read_bytes())
    assert files[0] == files[1]
    assert _no_children_left()


def replace_figures(cfg):
    from dataclasses import replace
    return replace(cfg, figures=replace(cfg.figures, formats=("png",), kinds=("residuals",),
                                        dpi=40))
