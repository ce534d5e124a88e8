"""Above the points a scatter draws, an in-memory run hands its figures the points drawn
and a digest of all the points (scaling.run.figure_digest) instead of every point.

The reference for every check is the figure drawn from all the points, as the figures
drew it before the digest (internal consistency): the same pixels in PNG, the same
SVG text (clip-path ids made neutral) and the same PDF bytes.
"""

from __future__ import annotations

import dataclasses
import io
import os
import pickle
import re
import sys
import warnings

import numpy as np
import pandas as pd
import pytest
from PIL import Image

from scaling.render import figure_worker as fw
from scaling.render.figure_inputs import figure_digest, reuse_inputs
from scaling.render.figure_style import save_figure
from scaling.render.figures import make_figure, write_figures
from scaling.render.thinning import DRAWN_TABLE, FIGURE_DIGEST, MAX_DRAWN_POINTS
from scaling.run.figure_digest import figure_result
from scaling.run.pipeline import run_config

KINDS = ["scaling", "natural", "exponents", "residuals"]


def _table(path, n: int, n_groups: int, *, seed: int) -> str:
    """``n`` rows of ``n_groups`` groups whose slopes differ a little (a simulation),
    spanning four decades of x (the natural figure zooms), with a block of rows
    repeated in other groups (equal residuals across groups: ties in the ranking)."""
    rng = np.random.default_rng(seed)
    names = np.array([f"g{i:02d}" for i in range(n_groups)])
    group = names[rng.integers(0, n_groups, n)]
    lx = rng.uniform(0, 4, n)
    slope = 0.7 + 0.1 * (np.searchsorted(names, group) / max(n_groups - 1, 1))
    ly = 0.3 + slope * lx + rng.normal(0, 0.2, n)
    df = pd.DataFrame({"mass": 10 ** lx, "rate": 10 ** ly, "clade": group})
    twins = df.iloc[:300].copy()
    twins["clade"] = np.roll(twins["clade"].to_numpy(), 1)
    df = pd.concat([df, twins], ignore_index=True).sample(frac=1.0, random_state=seed)
    df.to_csv(path, index=False)
    return str(path)


def _config(path: str, **figures) -> dict:
    return {"data": {"file": path, "x": "mass", "y": "rate", "group": "clade"},
            "model": {"methods": ["ols", "sma", "ma"]},
            "exponents": {"three_quarters": 0.75}, "prediction": {"x": [10, 300]},
            "figures": {"kinds": KINDS, "formats": ["png"], "dpi": 60, **figures}}


def _analysed(cfg: dict):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return run_config(cfg, write=False, quiet=True)


@pytest.fixture(scope="module")
def few_groups(tmp_path_factory):
    """Four groups (a legend of names), 7 300 points."""
    path = _table(tmp_path_factory.mktemp("few") / "few.csv", 7_000, 4, seed=3)
    return _analysed(_config(path))


@pytest.fixture(scope="module")
def many_groups(tmp_path_factory):
    """Thirty groups (points by colour; the summary across groups), 9 300 points."""
    path = _table(tmp_path_factory.mktemp("many") / "many.csv", 9_000, 30, seed=4)
    return _analysed(_config(path))


def _kinds(result) -> list:
    spread = result.tables.get("exponent_spread")
    return KINDS + (["group_exponents"] if spread is not None and len(spread) else [])


def _drawn(result, kind: str, fmt: str) -> bytes:
    with reuse_inputs():
        fig = make_figure(result, kind)
    buf = io.BytesIO()
    save_figure(fig, buf, fmt, 60)
    return buf.getvalue()


def _pixels(png: bytes) -> np.ndarray:
    return np.asarray(Image.open(io.BytesIO(png)))


def _svg(svg: bytes) -> str:
    return re.sub(r"\bp[0-9a-f]{10}\b", "clip", svg.decode())


class TestTheViewHoldsTheDrawnPoints:
    def test_above_the_limit_no_point_but_those_drawn(self, few_groups):
        view = figure_result(few_groups)
        n = len(few_groups.data.points)
        assert n == 7_300 > MAX_DRAWN_POINTS   # exact: rows written, none dropped
        assert len(view.data.points) == 0
        drawn = view.tables[DRAWN_TABLE]
        assert len(drawn) == MAX_DRAWN_POINTS
        digest = view.tables[FIGURE_DIGEST]
        # exact counts (internal consistency: the points' own group column)
        assert digest.n == n
        counts = few_groups.data.points["group"].value_counts()
        assert dict(zip(digest.groups, digest.sizes.tolist())) == counts.to_dict()
        assert set(digest.residuals.ranks()) == {"ols", "sma", "ma"}
        assert isinstance(drawn["group"].dtype, pd.CategoricalDtype)

    def test_up_to_the_limit_the_figures_read_the_points(self, tmp_path):
        path = _table(tmp_path / "small.csv", 3_000, 4, seed=5)
        result = _analysed(_config(path))
        view = figure_result(result)
        assert view.data.points is result.data.points
        assert FIGURE_DIGEST not in view.tables and figure_digest(view) is None

    def test_no_digest_for_a_run_that_draws_nothing(self, tmp_path):
        path = _table(tmp_path / "plain.csv", 6_000, 3, seed=6)
        result = _analysed(_config(path, formats=[], kinds=[]))
        assert figure_result(result).data.points is result.data.points


class TestSameFigures:
    @pytest.mark.parametrize("case", ["few_groups", "many_groups"])
    def test_every_figure_has_the_pixels_drawn_from_every_point(self, case, request):
        result = request.getfixturevalue(case)
        view = pickle.loads(pickle.dumps(figure_result(result)))   # as the worker gets it
        assert figure_digest(view) is not None
        for kind in _kinds(result):
            old, new = _drawn(result, kind, "png"), _drawn(view, kind, "png")
            np.testing.assert_array_equal(_pixels(new), _pixels(old), err_msg=kind)

    def test_vector_files_are_those_drawn_from_every_point(self, few_groups):
        # the figure that reads most of the digest (ranks, quartiles, largest residual),
        # of one line (a vector file of 10 000 markers per line is slow to write)
        from scaling.render.figure_residuals import make_residuals
        view = figure_result(few_groups)
        for fmt in ("svg", "pdf"):
            files = []
            for result in (view, few_groups):
                with reuse_inputs():
                    fig = make_residuals(result, methods=["sma"])
                buf = io.BytesIO()
                save_figure(fig, buf, fmt, 60)
                files.append(buf.getvalue())
            if fmt == "svg":
                files = [_svg(f) for f in files]
            assert files[0] == files[1], fmt

    def test_normal_quantiles_rank_every_residual(self, few_groups):
        # the ranks drawn are those of all 7 300 residuals (Blom positions of n = 7 300),
        # not of the 5 000 drawn among themselves: the view's normal-quantile panels
        # differ from those the drawn points alone give (the large-data road's)
        view = figure_result(few_groups)
        alone = dataclasses.replace(view, manifest={"large_data": {}}, tables={
            k: v for k, v in view.tables.items() if k != FIGURE_DIGEST})
        assert _pixels(_drawn(alone, "residuals", "png")).shape == _pixels(
            _drawn(view, "residuals", "png")).shape
        assert not np.array_equal(_pixels(_drawn(alone, "residuals", "png")),
                                  _pixels(_drawn(view, "residuals", "png")))

    def test_ranks_sent_after_the_run_draw_the_same_figure(self, few_groups):
        # the worker's stream: the run without its ranked residuals, then the ranks
        view = figure_result(few_groups)
        buf = io.BytesIO()
        later = fw._dump(view, buf, ranks_later=True)
        assert len(later) == 1
        fw._dump(later[0].ranks(), buf)
        stream = io.BytesIO(buf.getvalue())
        sent = pickle.load(stream)
        follow = fw._ranks_to_follow(sent)
        assert follow is not None and fw._ranks_to_follow(view) is None
        follow.follow_from(lambda: pickle.load(stream))
        np.testing.assert_array_equal(_pixels(_drawn(sent, "residuals", "png")),
                                      _pixels(_drawn(few_groups, "residuals", "png")))

    @pytest.mark.skipif(not sys.platform.startswith("linux") or len(os.sched_getaffinity(0)) < 2,
                        reason="figures are drawn in one process on this machine")
    def test_the_worker_draws_the_files_drawn_from_every_point(self, many_groups,
                                                               tmp_path, monkeypatch):
        monkeypatch.delenv("SCALING_ONE_PROCESS", raising=False)
        monkeypatch.setattr(fw.threading, "active_count", lambda: 1)
        worker = fw.FigureWorker(pdf=False)
        answer = worker.draw(figure_result(many_groups), tmp_path / "worker")
        assert answer is not None   # drawn by the worker, not handed back
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            write_figures(many_groups, tmp_path / "here")
        names = sorted(p.name for p in (tmp_path / "here" / "figures").glob("*.png"))
        assert "residuals.png" in names and "group_exponents.png" in names
        for name in names:
            np.testing.assert_array_equal(
                _pixels((tmp_path / "worker" / "figures" / name).read_bytes()),
                _pixels((tmp_path / "here" / "figures" / name).read_bytes()), err_msg=name)

    def test_a_run_analysed_then_written_hands_its_figures_the_points_drawn(
            self, tmp_path, monkeypatch):
        # analyse, then write_outputs (the Python road in two steps): the figures get the
        # view too (not every point), and the files are those drawn from every point
        from scaling.run import pipeline
        handed = []
        plain = pipeline.start_figures
        monkeypatch.setattr(pipeline, "start_figures",
                            lambda res, *a, **k: handed.append(res) or plain(res, *a, **k))
        path = _table(tmp_path / "two.csv", 6_200, 6, seed=12)
        cfg = _config(path, kinds=["residuals"])
        result = _analysed(cfg)
        pipeline.write_outputs(result, tmp_path / "out")
        assert len(handed) == 1 and not len(handed[0].data.points)
        assert FIGURE_DIGEST in handed[0].tables
        reference = tmp_path / "reference"
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            write_figures(result, reference)
        np.testing.assert_array_equal(
            _pixels((tmp_path / "out" / "figures" / "residuals.png").read_bytes()),
            _pixels((reference / "figures" / "residuals.png").read_bytes()))

    def test_a_written_run_has_the_files_drawn_from_every_point(self, tmp_path, monkeypatch):
        # the whole road: run_config hands the figure processes the view (the worker,
        # where it can fork); the reference is write_figures on the run's whole result
        # in this process
        monkeypatch.delenv("SCALING_ONE_PROCESS", raising=False)
        monkeypatch.setattr(fw.threading, "active_count", lambda: 1)
        path = _table(tmp_path / "run.csv", 6_500, 25, seed=9)
        cfg = _config(path)
        run_config(cfg, out=tmp_path / "out", quiet=True)
        reference = tmp_path / "reference"
        result = _analysed(cfg)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            write_figures(result, reference)
        written = sorted(p.name for p in (tmp_path / "out" / "figures").glob("*.png"))
        assert written == sorted(p.name for p in (reference / "figures").glob("*.png"))
        assert "group_exponents.png" in written and "residuals.png" in written
        for name in written:
            np.testing.assert_array_equal(
                _pixels((tmp_path / "out" / "figures" / name).read_bytes()),
                _pixels((reference / "figures" / name).read_bytes()), err_msg=name)
