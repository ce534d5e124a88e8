"""What an in-memory run hands its figures when it has more points than a scatter draws.

Above :data:`~scaling.render.thinning.MAX_DRAWN_POINTS` points the figures draw the
seeded subset :func:`~scaling.render.thinning.subset_index` of them, and read of all the
points only a few numbers: how many there are, the groups and their sizes, the range of
x, and for the residual figure's normal-quantile panels the sorted residuals at the
ranks drawn, their groups, the quartiles and the largest residual.  :func:`figure_result`
makes those numbers here, in the run's process, where the points and their group codes
(:func:`scaling.run.fits.known_group_codes`) already are, and hands the figures the
points drawn (``result.tables[DRAWN_TABLE]``, group as a categorical of the sorted
names) with a :class:`~scaling.render.thinning.FigureDigest`
(``result.tables[FIGURE_DIGEST]``) in place of every point.  The figures then draw what
they drew from all the points, on the large-data road's code (its drawn points), and
sending the run to the processes that draw costs a few megabytes, not the points.  The
residuals are ranked last (a few hundredths of a second per line for a million
points): the figure worker gets them after the run, while it loads the run and starts
the figures that do not read them (:mod:`scaling.render.figure_worker`).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd

from ..render.figure_worker import anything_to_draw, figure_view
from ..render.thinning import (DRAWN_TABLE, FIGURE_DIGEST, MAX_DRAWN_POINTS, FigureDigest,
                               PendingRanks, small_codes, subset_index)
from .fits import known_group_codes

__all__ = ["figure_result", "figure_digest_of"]


def figure_result(result, ahead=None):
    """``result`` cut to what its figures read (:func:`~scaling.render.figure_worker.figure_view`),
    and above :data:`~scaling.render.thinning.MAX_DRAWN_POINTS` points holding the points
    drawn and the :class:`~scaling.render.thinning.FigureDigest` of all of them in place
    of the points.

    Up to that many points, on a run of several predictors, a large-data run, or a run
    that draws nothing, the cut alone (its figures read the points as ever).  Should the
    digest fail to be made, the figures get the points.  ``ahead``: see
    :class:`~scaling.render.thinning.PendingRanks` (the residuals ranked elsewhere).
    """
    view = figure_view(result)
    pts = result.data.points
    if (len(pts) <= MAX_DRAWN_POINTS or result.multi_fit is not None
            or "large_data" in (result.manifest or {}) or not anything_to_draw(result)):
        return view
    try:
        drawn, digest = figure_digest_of(result, ahead)
    except Exception:  # noqa: BLE001 -- the figures then read every point, as they can
        return view
    return replace(view, data=replace(view.data, points=pts.iloc[:0]),
                   tables={**view.tables, DRAWN_TABLE: drawn, FIGURE_DIGEST: digest})


def figure_digest_of(result, ahead=None) -> tuple:
    """(the points drawn, :class:`~scaling.render.thinning.FigureDigest`) of the points of
    ``result`` (more than :data:`~scaling.render.thinning.MAX_DRAWN_POINTS`).

    The points drawn are the rows :func:`~scaling.render.thinning.subset_index` picks, in
    order, with their columns; ``group`` a categorical of the sorted group names.  When
    the run draws the residual figure, the residuals of each pooled line of the run's
    methods are ranked as that figure ranks them
    (:func:`~scaling.render.thinning.rank_residuals`), on first use
    (:class:`~scaling.render.thinning.PendingRanks`).
    """
    pts = result.data.points
    n = len(pts)
    keep = subset_index(n, MAX_DRAWN_POINTS)
    codes, names = _group_codes(pts)
    drawn = pts.iloc[keep]
    if codes is not None:
        drawn = drawn.assign(group=pd.Categorical.from_codes(codes[keep], categories=names))
    x = pts["x"].to_numpy()
    residuals = {}
    cfg = result.config
    if "residuals" in cfg.figures.kinds:
        fits = {method: result.line_fits.get(("pooled", "", method))
                for method in dict.fromkeys(cfg.model.methods)}
        # ranked on first use: when the figure worker draws, after the rest of the run
        # is sent, so the worker loads the run meanwhile
        residuals = PendingRanks(
            {method: fit for method, fit in fits.items() if fit is not None},
            pts["log_x"].to_numpy(float), pts["log_y"].to_numpy(float),
            None if codes is None else small_codes(codes), keep, ahead=ahead)
    digest = FigureDigest(
        n=n, groups=tuple(names), x_range=(float(x.min()), float(x.max())),
        sizes=(np.zeros(0, dtype=np.int64) if codes is None
               else np.bincount(codes, minlength=len(names))),
        residuals=residuals)
    return drawn, digest


def _group_codes(pts: pd.DataFrame) -> tuple:
    """(code of every point into the sorted names, the names as text), or (None, []).

    The fits' codes when they coded these very points with names in text order; else
    one hash pass over the names as text (the figures' own way)."""
    if "group" not in pts.columns:
        return None, []
    known = known_group_codes(pts)
    if known is not None:
        codes, names = known
        names = [str(g) for g in names]
        if names == sorted(names):
            return codes, names
    codes, uniques = pd.factorize(pts["group"].astype(str))
    names = sorted(str(g) for g in uniques)
    at = pd.Index(names, dtype=object).get_indexer(np.asarray(uniques, dtype=object))
    return at[codes], names

