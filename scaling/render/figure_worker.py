"""Draw a run's figures in a process that got matplotlib ready while the run computed.

In a small run, drawing and saving the figures costs more than the
statistics, and importing matplotlib alone about 0.4 s.  :func:`start_worker`
forks a process as the run begins; it imports the figure modules and
lays out a line of text (fonts loaded) while the parent computes.
:meth:`FigureWorker.draw` then sends it the finished run and it draws the
figures -- in two processes on two cores (:func:`scaling.render.figures.write_figures`).

The files are the same whichever process draws them (a test compares them
byte for byte).  Whenever the worker cannot be used -- not Linux, one core,
other threads running, a run too large to send cheaply, the worker died --
the figures are drawn in the calling process instead; nothing is lost.
Set the environment variable ``SCALING_ONE_PROCESS=1`` to draw everything in
the calling process.
"""

from __future__ import annotations

import multiprocessing
import os
import pickle
import sys
import threading
import warnings
from pathlib import Path

from ..errors import FigureWarning
from .figure_kinds import FIGURES

__all__ = ["FigureWorker", "start_worker", "draw_figures", "one_process"]

#: Runs with more fitted points than this are drawn in the calling process
#: (forked after the analysis, so nothing is copied), not sent to the worker.
SEND_MAX_POINTS = 200_000


def one_process() -> bool:
    """True when figures must be drawn in the calling process only."""
    return (os.environ.get("SCALING_ONE_PROCESS", "") not in ("", "0")
            or not sys.platform.startswith("linux")
            or len(os.sched_getaffinity(0)) < 2
            # forking a process that runs other threads can deadlock the child
            or threading.active_count() > 1)


def _split(kinds) -> tuple[list[str], list[str]]:
    """Two lists of about equal drawing cost (the registry's ``cost``; largest first, each
    to the lighter list)."""
    def cost(kind: str) -> int:
        return FIGURES[kind].cost if kind in FIGURES else 2
    shares: tuple[list[str], list[str]] = ([], [])
    totals = [0, 0]
    for kind in sorted(kinds, key=lambda k: -cost(k)):
        i = 0 if totals[0] <= totals[1] else 1
        shares[i].append(kind)
        totals[i] += cost(kind)
    return shares


def _draw_share(result, folder: Path, kinds=None,
                extras: bool = True) -> tuple[list[str], list[str]]:
    from . import figures   # matplotlib: imported only when figures are drawn
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", FigureWarning)
        paths = [str(p) for p in figures.write_figures(result, Path(folder), kinds=kinds,
                                                       extras=extras)]
    notes = [str(w.message) for w in caught if issubclass(w.category, FigureWarning)]
    return paths, notes


def _anything_to_draw(result) -> bool:
    """False when the run asks for no figure file: no format, or no kind and none of the
    figures drawn beyond the kinds (several predictors; the summary of many groups)."""
    cfg = result.config.figures
    tables = result.tables or {}
    spread = tables.get("exponent_spread")
    extras = result.multi_fit is not None or (spread is not None and len(spread) > 0)
    return bool(cfg.formats) and (bool(cfg.kinds) or extras)


def draw_figures(result, folder: Path) -> tuple[list[str], list[str]]:
    """Write the run's figures into ``folder``; return (relative paths, skip notes).

    Every other figure is drawn in a forked process when two cores are free
    (:func:`one_process` false); should that process fail, its figures are
    drawn here.  Paths come in the order of ``config.figures.kinds``.
    """
    if not _anything_to_draw(result):
        return [], []   # and matplotlib is never imported
    kinds = list(result.config.figures.kinds)
    if len(kinds) < 2 or one_process():
        return _draw_share(result, folder)
    mine, second = _split(kinds)
    read_end, write_end = os.pipe()
    pid = os.fork()
    if pid == 0:   # the second process: draw its share, hand back the paths, leave
        code = 1
        try:
            os.close(read_end)
            with os.fdopen(write_end, "wb") as fh:
                fh.write(pickle.dumps(_draw_share(result, folder, second, extras=False)))
            code = 0
        finally:
            os._exit(code)   # no atexit handlers, no flushing of the parent's buffers
    os.close(write_end)
    try:
        paths, notes = _draw_share(result, folder, mine)
    finally:   # always reap the second process
        with os.fdopen(read_end, "rb") as fh:
            answer = fh.read()
        _, status = os.waitpid(pid, 0)
    try:
        theirs = pickle.loads(answer) if status == 0 else None
    except Exception:  # noqa: BLE001 -- a truncated answer: draw the share here
        theirs = None
    if theirs is None:
        theirs = _draw_share(result, folder, second, extras=False)
    order = {kind: i for i, kind in enumerate(kinds)}
    paths = sorted(paths + theirs[0], key=lambda p: order.get(Path(p).stem, len(order)))
    return paths, notes + theirs[1]


def _warm_up() -> None:
    """Import the drawing stack and lay out text once, so fonts are loaded."""
    import matplotlib
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.backends import backend_pdf  # noqa: F401 -- the PDF writer, ahead of use
    from matplotlib.figure import Figure
    from . import figures  # noqa: F401 -- the figure modules, ahead of use
    from .figure_style import STYLE
    for kind in FIGURES.values():   # every figure module, ahead of use
        kind.make()
    fig = Figure(figsize=(1, 1))
    with matplotlib.rc_context(STYLE):
        fig.text(0.1, 0.5, "0.123 g 10\u2009000")
        FigureCanvasAgg(fig).draw()


def _serve(conn, parent_end) -> None:
    """The worker: get ready, wait for one run, draw it, answer, exit."""
    parent_end.close()   # else the worker would never see the parent go away
    try:
        try:
            _warm_up()
        except Exception:  # noqa: BLE001 -- drawing will then fail or succeed on its own
            pass
        try:
            job = conn.recv()
        except (EOFError, OSError):
            return
        if job is None:
            return
        result, folder = pickle.loads(job)
        try:
            conn.send(draw_figures(result, folder))
        except Exception:  # noqa: BLE001 -- the parent draws them instead
            conn.send(None)
    finally:
        conn.close()


class FigureWorker:
    """Handle on a forked figure process; see :func:`start_worker`."""

    def __init__(self) -> None:
        # multiprocessing flushes stdout/stderr before it forks, so nothing is printed twice
        ctx = multiprocessing.get_context("fork")
        self._conn, child_end = ctx.Pipe()
        self._proc = ctx.Process(target=_serve, args=(child_end, self._conn), daemon=True)
        self._proc.start()
        child_end.close()

    def draw(self, result, folder: Path) -> tuple[list[str], list[str]] | None:
        """Have the worker draw ``result``'s figures into ``folder``.

        Returns (relative paths, skip notes), or None when the worker could
        not do it (the caller then draws them itself).
        """
        points = getattr(getattr(result, "data", None), "points", None)
        if points is not None and len(points) > SEND_MAX_POINTS:
            self.close()
            return None
        try:
            self._conn.send(pickle.dumps((result, Path(folder)),
                                         protocol=pickle.HIGHEST_PROTOCOL))
            answer = None
            while answer is None and self._proc.is_alive():
                if self._conn.poll(0.05):
                    answer = self._conn.recv()
            if answer is None and self._conn.poll(0):   # answered just before it exited
                answer = self._conn.recv()
        except Exception:  # noqa: BLE001 -- unpicklable run, dead worker: draw here
            answer = None
        self.close()
        return answer

    def close(self) -> None:
        """Stop the worker if it is still waiting (idempotent)."""
        if self._proc is None:
            return
        try:
            self._conn.send(None)
        except Exception:  # noqa: BLE001 -- already gone
            pass
        self._conn.close()
        self._proc.join(timeout=5)
        if self._proc.is_alive():
            self._proc.terminate()
            self._proc.join()
        self._proc = None


def start_worker(config) -> FigureWorker | None:
    """Fork a figure worker for a run of ``config``, or None when it would not help.

    None when the run draws no figures, or :func:`one_process` holds.
    """
    fig = config.figures
    if not (fig.kinds and fig.formats) or one_process():
        return None
    try:
        return FigureWorker()
    except Exception:  # noqa: BLE001 -- no fork here: draw in the calling process
        return None
