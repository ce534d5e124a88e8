"""What a run's figures read from a :class:`~scaling.run.pipeline.RunResult`.

The figures draw the fit objects (``result.line_fits``) and the tables
(``result.fits``, ``result.tables``) the run computed; these helpers look
them up (labels, groups, the primary method, group means, the common slope,
correction factors) and compute nothing new.
"""

from __future__ import annotations

import contextlib
from types import SimpleNamespace

import numpy as np
import pandas as pd
from matplotlib.lines import Line2D

from ..stats.lines import parse_log_base
from ..stats.line_results import ConfidenceInterval
from .figure_style import group_digits, scatter_coded, thinned_index
from .thinning import (DRAWN_TABLE, FIGURE_DIGEST, GROUP_LINES_MAX, FigureDigest,
                       drawn_line_slopes, groups_spread_over_slopes)
from .headline import primary_method
from .wording import unit_text

__all__ = ["reuse_inputs", "reused", "run_base", "axis_label", "points_held", "points_drawn",
           "figure_digest", "residual_ranks", "drawn_points", "run_groups", "group_sizes",
           "fitted_n", "group_codes", "scatter_groups", "GROUP_LINES_MAX", "shown_groups",
           "scatter_shown_groups", "scatter_shown_coded", "shown_codes",
           "shown_groups_handle",
           "run_methods", "drawn_primary", "group_means_table", "fit_xrange", "factor_of",
           "common_slope_fit", "slopes_agree"]


#: Within :func:`reuse_inputs`: ``key -> (objects read, value)``; else None.
_MEMO: dict | None = None


@contextlib.contextmanager
def reuse_inputs():
    """Within this block the groups of a run and the group code of every point are found
    once per table, not once per panel: a run's figures read the same million points
    a dozen times.  Outside it (a user's plot calls) nothing is kept."""
    global _MEMO
    outer = _MEMO
    _MEMO = {} if outer is None else outer
    try:
        yield
    finally:
        _MEMO = outer


def reused(key, held: tuple, compute):
    """``compute()``, or its value kept for the same objects ``held`` (compared by identity;
    they are kept alive with the value, so an id is never reused while kept)."""
    if _MEMO is None:
        return compute()
    hit = _MEMO.get(key)
    if hit is not None and all(a is b for a, b in zip(hit[0], held)):
        return hit[1]
    value = compute()
    _MEMO[key] = (held, value)
    return value


def run_base(result) -> float:
    """The run's log base (of its fits; else of its config; else 10)."""
    for fit in result.line_fits.values():
        if fit.log_base is not None:
            return float(fit.log_base)
    return parse_log_base(result.config.model.log_base) or 10.0


def axis_label(result, role: str) -> str:
    """Axis label: figures.labels, else the column name in words; "(unit)" once.

    Without ``figures.labels`` a unit already in the column name is not
    repeated: ``mass_g`` with unit g reads "mass (g)", not "mass_g (g)".
    """
    cfg = result.config
    labels = cfg.figures.labels or {}
    unit = (result.data.units or {}).get(role)
    name = labels.get(role)
    if not name:
        name = str(cfg.data.x if role == "x" else cfg.data.y)
        if unit:
            for tail in (f"_{unit}", f" {unit}", f"({unit})", f"[{unit}]", f"_({unit})"):
                if name.lower().endswith(tail.lower()) and len(name) > len(tail):
                    name = name[: -len(tail)]
                    break
        name = name.replace("_", " ").strip()
    if unit and f"({unit})" in str(name):
        return str(name)
    return f"{name} ({unit_text(unit)})" if unit else str(name)   # "cm²", not "(cm**2)"


def points_held(result) -> bool:
    """False for a large-data run, which never holds its points (``points`` is empty):
    its counts come from the fits, and its figures draw the points of
    :func:`drawn_points` (collected by its second pass).  False too for a run handed to
    its figures with a :func:`figure_digest` in place of its points (the points drawn
    and what the figures read of all of them)."""
    if figure_digest(result) is not None:
        return False
    return bool(len(result.data.points)) or "large_data" not in (result.manifest or {})


def figure_digest(result) -> FigureDigest | None:
    """The :class:`~scaling.render.thinning.FigureDigest` of all the points of a run whose
    figures are handed only the points they draw (:mod:`scaling.run.figure_digest`),
    else None."""
    digest = (result.tables or {}).get(FIGURE_DIGEST)
    return digest if isinstance(digest, FigureDigest) else None


def residual_ranks(result, method: str):
    """The :class:`~scaling.render.thinning.RankedResiduals` of the pooled ``method`` line
    over all the points of a run with a :func:`figure_digest` (ranked now if not yet),
    else None (the figure ranks the residuals of the points it holds)."""
    digest = figure_digest(result)
    if digest is None:
        return None
    ranks = digest.residuals
    return (ranks if isinstance(ranks, dict) else ranks.ranks()).get(method)



def points_drawn(result) -> bool:
    """True when the run's figures have points to draw (:func:`drawn_points`): every
    in-memory run, and a large-data run whose second pass collected them."""
    return points_held(result) or isinstance((result.tables or {}).get(DRAWN_TABLE),
                                             pd.DataFrame)


def drawn_points(result) -> tuple:
    """(the points a scatter draws, the number of points fitted).

    In memory: all the points, or above :data:`~scaling.render.figure_style.MAX_DRAWN_POINTS`
    the seeded subset :func:`~scaling.render.figure_style.thinned_index` of them, in
    the points' order.  On a large-data run: the same subset, collected by its second
    pass as the rows streamed past (``result.tables[DRAWN_TABLE]``; the count is the
    pooled fits' n).  What a figure places, zooms or scales by its points, it does by
    these, so both roads draw the same figure.
    """
    pts = result.data.points
    table = (result.tables or {}).get(DRAWN_TABLE)
    if not points_held(result) and isinstance(table, pd.DataFrame):
        return table, fitted_n(result)
    keep = thinned_index(len(pts))
    if keep is None:
        return pts, len(pts)
    return reused(("drawn", id(pts)), (pts,), lambda: pts.iloc[keep]), len(pts)


def run_groups(result) -> list:
    """The groups of the run's points, sorted as text (empty without groups).

    A large-data run holds no points: its groups are those of its fits; a run handed
    to its figures with a :func:`figure_digest`, those of the digest."""
    return list(reused(("groups", id(result)), (result,), lambda: _run_groups(result)))


def _run_groups(result) -> list:
    pts = result.data.points
    digest = figure_digest(result)
    if digest is not None:
        return list(digest.groups)
    if not points_held(result):
        fits = result.fits
        if fits is None or "scope" not in fits or not result.config.data.group:
            return []
        return sorted({str(g) for g in fits.loc[fits["scope"] == "group", "group"]})
    if "group" not in pts.columns:
        return []
    return sorted(str(g) for g in pts["group"].unique())


def _fit_counts(result, scope: str) -> dict:
    """``group -> n`` of the fits of one scope (every method fits the same points)."""
    fits = result.fits
    rows = fits[fits["scope"] == scope]
    return {str(g): int(n) for g, n in zip(rows["group"], rows["n"])}


def group_sizes(result, groups: list) -> np.ndarray:
    """Points in each of the sorted ``groups`` (from the fits on a large-data run)."""
    digest = figure_digest(result)
    if digest is not None and list(digest.groups) == list(groups):
        return digest.sizes
    if points_held(result):
        return np.bincount(group_codes(result.data.points, groups), minlength=len(groups))
    counts = _fit_counts(result, "group")
    return np.array([counts.get(g, 0) for g in groups], dtype=np.int64)


def fitted_n(result) -> int:
    """Points of the run (the pooled fits' n on a large-data run)."""
    digest = figure_digest(result)
    if digest is not None:
        return digest.n
    if points_held(result):
        return len(result.data.points)
    return int(_fit_counts(result, "pooled").get("", 0))


def group_codes(pts, groups: list) -> np.ndarray:
    """Index into the sorted ``groups`` of every point (one pass, not one per group)."""
    return reused(("codes", id(pts), tuple(groups)), (pts,), lambda: _group_codes(pts, groups))


def _group_codes(pts, groups: list) -> np.ndarray:
    column = pts["group"]
    if (isinstance(column.dtype, pd.CategoricalDtype)
            and list(column.cat.categories) == list(groups)):
        codes = column.cat.codes.to_numpy().astype(np.intp)   # coded by the run already
        codes.flags.writeable = False
        return codes
    # one hash pass over the points, then a look-up of the distinct names only:
    # searchsorted on a million Python strings costs seconds
    codes, names = pd.factorize(pts["group"].astype(str))
    at = pd.Index(groups, dtype=object).get_indexer(np.asarray(names, dtype=object))
    codes = at[codes]
    codes.flags.writeable = False   # shared between the panels of a run's figures
    return codes


def scatter_groups(ax, pts, groups: list, **kwargs) -> None:
    """Points in their group's colour and marker (see :func:`scatter_coded`)."""
    scatter_coded(ax, pts["x"].to_numpy(), pts["y"].to_numpy(), group_codes(pts, groups),
                   len(groups), **kwargs)


#: Points of the groups whose lines are not drawn.
OTHER_GROUPS_COLOUR = "#b8b8b8"


def shown_groups(result, groups: list | None = None) -> list:
    """The groups whose own lines, means, curves and predictions the scaling and natural
    figures draw, sorted as ``groups`` (default: :func:`run_groups`).

    All of them up to :data:`GROUP_LINES_MAX`.  Above, :data:`GROUP_LINES_MAX` groups at
    evenly spaced ranks of their own exponent (the primary method's; ties by name), the
    lowest and the highest among them, so the lines drawn span the spread of the
    exponents; groups without an estimable line have none to draw.  Without any group
    line (a run without per-group fits) the groups are spaced evenly by name.  Every
    figure of a run draws the same groups, in the same colours.
    """
    groups = run_groups(result) if groups is None else list(groups)
    if len(groups) <= GROUP_LINES_MAX:
        return groups
    return list(reused(("shown groups", id(result), tuple(groups)), (result,),
                       lambda: _shown_groups(result, groups)))


def _shown_groups(result, groups: list) -> list:
    return groups_spread_over_slopes(groups, drawn_line_slopes(result))


def scatter_shown_groups(ax, pts, groups: list, shown: list, **kwargs) -> None:
    """Points of the ``shown`` groups in their colour and marker (indices into ``shown``,
    as their lines), the other groups' points beneath in grey; all of them when every
    group is shown (:func:`scatter_groups`).  ``kwargs`` as for :func:`scatter_coded`."""
    if len(shown) == len(groups):
        scatter_groups(ax, pts, groups, **kwargs)
        return
    scatter_shown_coded(ax, pts["x"].to_numpy(), pts["y"].to_numpy(),
                        group_codes(pts, shown), len(shown), **kwargs)


def scatter_shown_coded(ax, x, y, codes, n_shown: int, *, total: int | None = None,
                        **kwargs) -> None:
    """:func:`scatter_coded` of the points whose ``codes`` (into the shown groups) are
    0 or more; those coded -1 (groups not shown) beneath, in grey, as one artist."""
    x, y, codes = np.asarray(x), np.asarray(y), np.asarray(codes)
    other = codes < 0
    size = float(kwargs.get("s", 12.0)) ** 0.5   # scatter sizes are areas, markers diameters
    ax.plot(x[other], y[other], ls="none", marker="o", markersize=size,
            color=OTHER_GROUPS_COLOUR, markeredgecolor="white",
            markeredgewidth=kwargs.get("linewidth", 0.3), alpha=0.6,
            zorder=kwargs.get("zorder", 2) - 0.1, gid="points-other-groups")
    # the note that a subset is drawn speaks of all the points
    scatter_coded(ax, x[~other], y[~other], codes[~other], n_shown,
                  total=len(x) if total is None else total, **kwargs)


def shown_codes(groups: list, shown: list, codes) -> np.ndarray:
    """``codes`` into ``groups`` as codes into ``shown`` (-1: a group not shown)."""
    where = np.full(len(groups) + 1, -1, dtype=np.intp)   # the last: code -1 stays -1
    where[pd.Index(groups).get_indexer(shown)] = np.arange(len(shown))
    return where[np.asarray(codes, dtype=np.intp)]


def shown_groups_handle(n_groups: int, n_shown: int, plural: str):
    """The legend entry for groups drawn :func:`shown_groups`-thinned."""
    return Line2D([], [], ls="none", marker="o", color=OTHER_GROUPS_COLOUR, markersize=4,
                  label=f"{n_shown} of {group_digits(str(n_groups))} {plural} in colour\n"
                        "(lowest to highest exponent)")


def run_methods(result, methods) -> list:
    """``methods`` if given, else the run's methods."""
    return list(methods) if methods else list(result.config.model.methods)


def drawn_primary(methods: list, result=None) -> str:
    """The method whose per-group lines are drawn: the run's primary method
    (``model.primary``, else the first symmetric method, else OLS) when drawn,
    else SMA if present, else the first."""
    if result is not None:
        chosen = primary_method(result.config.model.methods,
                                getattr(result.config.model, "primary", None))
        if chosen in methods:
            return chosen
    return "sma" if "sma" in methods else methods[0]


def group_means_table(result):
    """The run's group means on the log scale (``group_means.csv``), or None.

    A DataFrame ``group, n, mean_log_x, mean_log_y, se_log_x, se_log_y``;
    figures draw the table the run computed and never compute one.
    """
    table = (result.tables or {}).get("group_means")
    if isinstance(table, pd.DataFrame) and len(table):
        return table
    return None


def fit_xrange(fit, result):
    """The natural-unit x range a fit was fitted to (else the range of the run's points)."""
    if fit.x_range is not None:
        return fit.x_range
    digest = figure_digest(result)
    if digest is not None:
        return digest.x_range
    x = result.data.points["x"].to_numpy()
    return float(x.min()), float(x.max())


def factor_of(result, scope: str, group: str, method: str) -> dict:
    """The run's correction factor of one fit, for the equation box."""
    kind = result.config.prediction.correction
    col = f"{kind}_factor"
    fits = result.fits
    if kind == "none" or col not in fits:
        return {}
    row = fits[(fits["scope"] == scope) & (fits["group"] == group) & (fits["method"] == method)]
    if not len(row):
        return {}
    return {"factor": float(row[col].iloc[0]), "correction": kind}


def common_slope_fit(result, method: str):
    """The run's common within-group slope of ``method`` (object with ``slope`` and
    ``slope_ci``): its fits row of scope ``common``, or None when the run has none.

    Never estimated here: a run that did not compare its groups by ``method``
    draws no common slope."""
    fit = result.line_fits.get(("common", "", method))
    if fit is not None:
        return fit
    fits = result.fits
    if fits is not None and len(fits) and "scope" in fits:
        # the run's own estimate and interval (fits.csv, scope "common"): the numbers
        # the report leads with, not a second computation
        rows = fits[(fits["scope"] == "common") & (fits["method"] == method)]
        if len(rows) and np.isfinite(float(rows["slope"].iloc[0])):
            row = rows.iloc[0]
            return SimpleNamespace(slope=float(row["slope"]),
                                   slope_ci=ConfidenceInterval(float(row["slope_low"]),
                                                               float(row["slope_high"])))
    return None


def slopes_agree(result, method: str) -> bool:
    """True when the run compared groups by ``method`` and found no difference in slope."""
    table = (result.tables or {}).get("group_tests")
    if table is None or not len(table) or "test" not in table:
        return False
    rows = table[(table["method"] == method) & (table["test"] == "slopes_equal")]
    return bool(len(rows)) and float(rows["p_value"].iloc[0]) > 1 - result.config.model.confidence
