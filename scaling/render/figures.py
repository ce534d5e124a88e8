"""Write a run's figures: each kind drawn once by its maker and saved in every format.

The kinds, their makers, captions and drawing costs are the registry
:data:`scaling.render.figure_kinds.FIGURES`; the figures themselves are
drawn in one module per kind (:mod:`~scaling.render.figure_scaling`,
:mod:`~scaling.render.figure_natural`, :mod:`~scaling.render.figure_exponents`,
:mod:`~scaling.render.figure_residuals`, :mod:`~scaling.render.figure_partial`),
in the look of :mod:`~scaling.render.figure_style`, on top of the drawing
functions a Python user calls (:mod:`scaling.render.plots`).  A figure draws
the fits and tables of the run and never estimates anything again.

:func:`write_figures` saves the figures a run asks for and returns their
paths relative to the output folder; :func:`make_figure` returns one
:class:`matplotlib.figure.Figure` (no pyplot state, no ``show()``).
"""

from __future__ import annotations

import contextlib
import gc
import io
import warnings
from pathlib import Path

from matplotlib.figure import Figure

from ..errors import ConfigError, FigureWarning
from .figure_inputs import reuse_inputs
from .figure_kinds import FIGURES, KINDS, figure_kind, partial_figure_name
from .figure_style import save_figure

__all__ = ["make_figure", "figure_png", "partial_png", "write_figures"]


def make_figure(result, kind: str, *, size: str | None = None) -> Figure:
    """One figure of ``kind`` (``scaling``, ``natural``, ``exponents``, ``residuals``;
    also ``group_exponents`` and ``partial`` where the run has them).

    Raises
    ------
    ConfigError
        For a kind the registry does not know.
    """
    if kind not in FIGURES:
        raise ConfigError(f"figure kind must be one of {', '.join(KINDS)}, not {kind!r}")
    return figure_kind(kind).make()(result, size=size or result.config.figures.size)


#: Resolution of the PNG the report embeds when the run writes no PNG file.
REPORT_DPI = 150


def figure_png(result, kind: str, *, dpi: int = REPORT_DPI, size: str | None = None) -> bytes:
    """PNG bytes of one figure (what the report embeds when no PNG file is written)."""
    fig = make_figure(result, kind, size=size)
    buf = io.BytesIO()
    save_figure(fig, buf, "png", dpi)
    return buf.getvalue()


def partial_png(result, term: str) -> bytes:
    """PNG bytes of the partial figure of ``term`` (several predictors) as the report embeds
    it when no PNG file is written: the figure's default size, saved as drawn."""
    fig = figure_kind("partial").make()(result, term=term)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=REPORT_DPI)
    return buf.getvalue()


def _skip_note(kind: str, exc: Exception) -> str:
    reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    return (f"Figure '{kind}' was not drawn ({type(exc).__name__}: {reason}); the numeric "
            "results are complete in the tables.")


def _draw_and_save(result, kinds, folder: Path) -> list:
    """Draw each figure of ``kinds`` once and save it in every format.

    Returns ``[(kind, (relative paths, note)), ...]``; the note is empty, or
    says why the figure was skipped (its files are then removed).
    """
    cfg = result.config.figures
    drawn = []
    for kind in kinds:
        done: list[str] = []
        try:
            fig = make_figure(result, kind, size=cfg.size)
            for i, fmt in enumerate(cfg.formats):
                rel = Path("figures") / f"{kind}.{fmt}"
                save_figure(fig, folder / rel, fmt, cfg.dpi)
                done.append(str(rel))
                if i == 0:
                    # Same size in every format: keep the layout found for the first.
                    fig.set_layout_engine("none")
        except Exception as exc:  # noqa: BLE001 -- any drawing failure skips this figure only
            for rel in done:
                (folder / rel).unlink(missing_ok=True)
            drawn.append((kind, ([], _skip_note(kind, exc))))
            continue
        drawn.append((kind, (done, "")))
    return drawn


def write_figures(result, folder: Path, *, kinds=None, extras: bool = True,
                  report_folder: Path | None = None) -> list[Path]:
    """Save the run's figures under ``folder/figures``; return paths relative to ``folder``.

    ``config.figures.kinds`` selects the figures, ``.formats`` the files
    (``png`` at ``.dpi``; ``pdf`` and ``svg`` as vector with text kept as
    text), ``.size`` the width.  Files are ``figures/<kind>.<format>``.

    A figure that cannot be drawn or saved (e.g. axis limits beyond the
    floating-point range for values near 1e±300) is skipped, with a
    :class:`~scaling.errors.FigureWarning` naming it and the reason: a figure
    never turns a good fit into a failed run.

    ``kinds`` draws only these of ``config.figures.kinds``; ``extras=False``
    leaves out the figures beyond them (of many groups; of several
    predictors): :mod:`scaling.render.figure_worker` splits a run's figures between
    processes this way.

    ``report_folder``: when ``png`` is not among the formats, the PNG the report
    embeds of each figure (:func:`figure_png`: drawn once more, at :data:`REPORT_DPI`)
    is saved there too, as ``<kind>.png``; those files are not among the paths
    returned (they are not output files), and a figure that cannot be drawn is
    left out there without a note, as the report leaves it out.
    """
    with reuse_inputs():   # the groups of the points found once for all the figures
        return _write_figures(result, Path(folder), kinds, extras,
                              None if report_folder is None else Path(report_folder))


@contextlib.contextmanager
def _run_objects_left_alone():
    """Within this block the garbage collector passes over the objects that exist when it
    starts (the run: tables, fits, a fit object per group): drawing makes many short-lived
    objects, and each full collection otherwise walks every object of the run again."""
    if gc.get_freeze_count():   # frozen by the caller already: theirs to thaw
        yield
        return
    gc.freeze()
    try:
        yield
    finally:
        gc.unfreeze()


def _write_figures(result, folder: Path, kinds, extras: bool,
                   report_folder: Path | None = None) -> list[Path]:
    with _run_objects_left_alone():
        return _write_figures_now(result, folder, kinds, extras, report_folder)


def _write_figures_now(result, folder: Path, kinds, extras: bool,
                       report_folder: Path | None = None) -> list[Path]:
    cfg = result.config.figures
    (folder / "figures").mkdir(parents=True, exist_ok=True)
    if "png" in cfg.formats:   # the report embeds the PNG files
        report_folder = None
    if result.multi_fit is not None:   # several predictors: partial relationships
        if not extras:
            return []
        out = _write_partial_figures(result, folder) if cfg.formats else []
        if report_folder is not None:
            _save_report_pngs(report_folder, [
                (partial_figure_name(term), lambda term=term: partial_png(result, term))
                for term in result.multi_fit.names])
        return out
    chosen = [k for k in cfg.kinds if kinds is None or k in kinds]
    out: list[Path] = []
    # no format: nothing to draw but the report's PNGs (and no note of a figure not drawn)
    for kind, (done, note) in _draw_and_save(result, chosen if cfg.formats else [], folder):
        if note:
            warnings.warn(note, FigureWarning, stacklevel=2)
        out += [Path(rel) for rel in done]
    if report_folder is not None:
        _save_report_pngs(report_folder, [(kind, lambda kind=kind: figure_png(result, kind))
                                          for kind in chosen])
    if not extras or not cfg.formats:
        return out
    try:   # the summary across many groups (scaling.run.moments_path), when the run has one
        out += _write_group_exponents(result, folder)
    except Exception as exc:  # noqa: BLE001 -- as above: skip the figure with a note
        warnings.warn(f"Figure 'group_exponents' was not drawn ({type(exc).__name__}: "
                      f"{str(exc).splitlines()[0] if str(exc) else ''}); the numeric results "
                      "are complete in exponent_spread.csv.", FigureWarning, stacklevel=2)
    return out


def _write_group_exponents(result, folder: Path) -> list[Path]:
    """``figures/group_exponents.<format>`` when the run has a summary across groups."""
    spread = result.tables.get("exponent_spread")
    if spread is None or not len(spread):
        return []
    cfg = result.config.figures
    fig = figure_kind("group_exponents").make()(result, size=cfg.size)
    out = []
    for fmt in cfg.formats:
        rel = Path("figures") / f"group_exponents.{fmt}"
        save_figure(fig, Path(folder) / rel, fmt, cfg.dpi)
        out.append(rel)
    return out


def _save_report_pngs(folder: Path, draws) -> None:
    """Save ``folder/<name>.png`` from each ``(name, draw)``; ``draw()`` gives the PNG bytes.

    A figure that cannot be drawn is left out (the run has noted it when it wrote its
    files; the report leaves it out)."""
    folder.mkdir(parents=True, exist_ok=True)
    for name, draw in draws:
        try:
            png = draw()
        except Exception:  # noqa: BLE001 -- a figure never fails the run
            continue
        (folder / f"{name}.png").write_bytes(png)


def _write_partial_figures(result, folder: Path) -> list[Path]:
    """One ``figures/partial_<term>.<format>`` per predictor (several-predictor runs)."""
    cfg = result.config.figures
    make = figure_kind("partial").make()
    out: list[Path] = []
    for term in result.multi_fit.names:
        name = partial_figure_name(term)   # the report finds the file by this name
        try:
            fig = make(result, size=cfg.size, term=term)
            for fmt in cfg.formats:
                rel = Path("figures") / f"{name}.{fmt}"
                save_figure(fig, folder / rel, fmt, cfg.dpi)
                out.append(rel)
        except Exception as exc:  # noqa: BLE001 -- a figure never fails the run
            warnings.warn(f"Figure '{name}' was not drawn ({type(exc).__name__}: "
                          f"{exc}); the numeric results are complete in the tables.",
                          FigureWarning, stacklevel=2)
    return out
