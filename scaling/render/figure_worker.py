"""Draw a run's figures in other processes while the calling process writes the tables.

In a small run, drawing and saving the figures costs more than the
statistics, and importing matplotlib alone about 0.5 s.  :func:`start_worker`
forks a process as the run begins; it imports the figure modules and
lays out a line of text (fonts loaded) while the parent computes.
:func:`start_figures` then streams it what the figures draw (:func:`figure_view`:
the run without the tables no figure reads) and returns at once -- a run of
:mod:`scaling.run.pipeline` does so as soon as those inputs exist, before its
points to check, diagnostics and resampling: the worker draws the figures -- in
two processes on two cores -- while the caller computes and writes the tables,
and :meth:`Drawing.wait` collects the paths when the report needs them.  Without
a worker the run is forked into two drawing processes instead.

A run of many points comes with the points drawn and a digest of all of them
(:mod:`scaling.run.figure_digest`); its residuals, ranked last, follow it on the
same stream while the worker loads the run and forks the share of the figures
that do not read them, and the worker reads them when it draws the residual
figure (:data:`RANKED_KINDS`, drawn by the worker itself; :data:`ROOMY_PIPE`).

When ``png`` is not among ``figures.formats``, the PNGs the report embeds are
drawn on the same road, into :data:`REPORT_PNGS` of the folder (the output
writer's temporary folder, so they never reach the output folder), and the
report reads them with :func:`report_png`.

The files are the same whichever process draws them (a test compares them
byte for byte).  Whenever another process cannot be used -- not Linux, one core,
other threads running, the worker died -- the figures are drawn in the calling
process instead; nothing is lost.  Set the environment variable
``SCALING_ONE_PROCESS=1`` to draw everything in the calling process.
"""

from __future__ import annotations

import copyreg
import dataclasses
import gc
import multiprocessing
import operator
import os
import pickle
import signal
import sys
import threading
import warnings
from pathlib import Path

import numpy as np

from ..errors import FigureWarning
from .figure_kinds import FIGURES
from .thinning import (DRAWN_TABLE, FIGURE_DIGEST, GROUP_LINES_MAX, PendingRanks,
                       RanksToFollow, drawn_line_slopes, groups_spread_over_slopes)

__all__ = ["Drawing", "FigureWorker", "start_worker", "start_figures", "draw_figures",
           "figure_view", "anything_to_draw", "one_process", "report_png", "REPORT_PNGS",
           "FIGURE_TABLES", "RANKED_KINDS", "ROOMY_PIPE"]

#: Runs with more fitted points than this are not streamed to the worker but
#: drawn by two processes forked when the figure inputs exist (nothing copied,
#: matplotlib imported in each), so the worker never holds a second copy of a
#: large table.  Streaming a million points (with a thousand groups' fits, as
#: :func:`figure_view`) costs about 0.06 s of CPU here and 0.08 s there; two fresh
#: imports of the drawing stack about 1.1 s.  An in-memory run of the pipeline sends
#: no more than the points drawn (:mod:`scaling.run.figure_digest`: 3.6 MB for a
#: million points in a thousand groups, against 66 MB with the points), so this
#: holds for a run's result handed over whole only.
SEND_MAX_POINTS = 2_000_000

#: The folder, inside the folder the figures are drawn into, that holds the PNGs the
#: report embeds when ``png`` is not among ``figures.formats``: they are drawn with the
#: figure files (in the same processes) but are no output; the output writer's
#: temporary folder, removed after the run, holds them.
REPORT_PNGS = ".report-png"

#: The tables of a run (``result.tables``) that a figure reads; :func:`figure_view`
#: sends only these to the processes that draw.
FIGURE_TABLES = frozenset({"group_means", "group_tests", "exponent_spread", "predictions",
                           "inverse_predictions", DRAWN_TABLE, FIGURE_DIGEST})


def figure_view(result):
    """``result`` cut to what its figures read: the config, the points and units, the fits
    table, the fit objects and saved fits, :data:`FIGURE_TABLES`, the several-predictor
    fits and the manifest's ``large_data`` entry.

    The slope tests, dropped rows, messages and the other tables are left out (empty), so
    sending the run to another process costs less; the figures drawn from the view are the
    files drawn from the whole run (a test compares their bytes).  A view holding the
    points drawn and a digest of all the points in place of the points
    (:func:`scaling.run.figure_digest.figure_result`) keeps both.
    """
    large = (result.manifest or {}).get("large_data")
    data = result.data
    if dataclasses.is_dataclass(data) and hasattr(data, "dropped"):
        data = dataclasses.replace(data, dropped=data.dropped.iloc[:0])
    line_fits, saved_fits = _drawn_groups_only(result)
    return dataclasses.replace(
        result, data=data, line_fits=line_fits, saved_fits=saved_fits,
        slope_tests=result.slope_tests.iloc[:0],
        dropped=result.dropped.iloc[:0], messages=(), warnings=(),
        tables={k: v for k, v in (result.tables or {}).items() if k in FIGURE_TABLES},
        manifest={} if large is None else {"large_data": large})


def _drawn_groups_only(result) -> tuple:
    """The run's fit objects and saved fits, of its groups only those whose lines the
    figures draw when there are more than :data:`~scaling.render.thinning.GROUP_LINES_MAX`
    (:func:`~scaling.render.thinning.groups_spread_over_slopes`, by the slopes of the
    primary method's lines, as :func:`~scaling.render.figure_inputs.shown_groups` picks
    them: from the fits kept it picks the same groups).  No figure reads the others'
    objects (the spread across groups reads the fits table), and ten thousand of them
    cost the run a second to send and the figures one to receive."""
    line_fits, saved = result.line_fits or {}, result.saved_fits or {}
    slopes = drawn_line_slopes(result)
    if len(slopes) <= GROUP_LINES_MAX:
        return line_fits, saved
    keep = set(groups_spread_over_slopes(sorted(slopes), slopes))
    return ({k: v for k, v in line_fits.items() if k[0] != "group" or k[1] in keep},
            {k: v for k, v in saved.items() if k[0] != "group" or k[1] in keep})


def _rebuild(cls, names: tuple, values: tuple):
    """An instance of the slotted dataclass ``cls`` with ``values`` (what its generated
    ``__setstate__`` does, without the call per field)."""
    obj = object.__new__(cls)
    for name, value in zip(names, values):
        object.__setattr__(obj, name, value)
    return obj


class _Reductions(dict):
    """The pickler's ``dispatch_table`` for sending a run: a frozen slotted dataclass (a fit
    and its intervals and moments, thousands of them in a run of many groups) is reduced
    by one C-level ``attrgetter`` instead of its generated Python ``__getstate__``; a numpy
    float64 scalar by its Python float (exact).  Every other type is reduced as pickle would
    reduce it (``copyreg``'s entry, else ``__reduce_ex__``), found once per type."""

    def __missing__(self, cls):
        reduce = copyreg.dispatch_table.get(cls)
        if reduce is None and _plain_slotted_dataclass(cls):
            names = tuple(f.name for f in dataclasses.fields(cls))
            get = operator.attrgetter(*names)
            if len(names) == 1:
                def reduce(obj, cls=cls, names=names, get=get):
                    return _rebuild, (cls, names, (get(obj),))
            else:
                def reduce(obj, cls=cls, names=names, get=get):
                    return _rebuild, (cls, names, get(obj))
        elif reduce is None:
            if issubclass(cls, type):
                raise KeyError(cls)   # a class (of a metaclass) is saved by name
            reduce = operator.methodcaller("__reduce_ex__", pickle.HIGHEST_PROTOCOL)
        self[cls] = reduce
        return reduce


def _plain_slotted_dataclass(cls) -> bool:
    """True for a slotted dataclass pickled by the state functions dataclasses generate
    (no reduction of its own)."""
    state = getattr(cls, "__getstate__", None)
    return (dataclasses.is_dataclass(cls)
            and getattr(state, "__qualname__", "") == "_dataclass_getstate"
            and cls.__reduce_ex__ is object.__reduce_ex__
            and cls.__reduce__ is object.__reduce__)


def _float64(value):
    return np.float64, (float(value),)


def _dump(obj, fh, *, ranks_later: bool = False) -> list:
    """``pickle.dump(obj, fh)`` with the cheaper reductions of :class:`_Reductions`.

    ``ranks_later``: a :class:`~scaling.render.thinning.PendingRanks` is written as a
    :class:`~scaling.render.thinning.RanksToFollow` and returned (in a list), for the
    caller to send its ranks after ``obj``."""
    pickler = pickle.Pickler(fh, protocol=pickle.HIGHEST_PROTOCOL)
    table = _Reductions()
    table[np.float64] = _float64
    later: list = []
    if ranks_later:
        def follow(pending):
            later.append(pending)
            return RanksToFollow, ()
        table[PendingRanks] = follow
    pickler.dispatch_table = table
    pickler.dump(obj)
    return later


#: The figure kinds that read a run's ranked residuals (drawn by the process that reads
#: them when they follow the run: :class:`~scaling.render.thinning.RanksToFollow`).
RANKED_KINDS = frozenset({"residuals"})

#: Bytes the job pipe is made to hold (Linux ``F_SETPIPE_SZ``), so the ranks that follow
#: a run (about 60 kB per line) are written without waiting for the worker to read them;
#: the worker then reads them when it draws the residual figure.  Where the pipe keeps
#: its default size, the worker reads them before it draws.
ROOMY_PIPE = 1 << 20


def _ranks_to_follow(result):
    """The :class:`~scaling.render.thinning.RanksToFollow` of a run sent to the worker
    whose ranked residuals come after it, else None."""
    ranks = getattr((result.tables or {}).get(FIGURE_DIGEST), "residuals", None)
    return ranks if isinstance(ranks, RanksToFollow) else None


def _pipe_size(fd: int) -> int:
    try:
        import fcntl
        return fcntl.fcntl(fd, fcntl.F_GETPIPE_SZ)
    except (ImportError, AttributeError, OSError):
        return 0


def _roomy(fd: int) -> None:
    """Make the pipe ``fd`` hold :data:`ROOMY_PIPE` bytes where the system allows."""
    try:
        import fcntl
        fcntl.fcntl(fd, fcntl.F_SETPIPE_SZ, ROOMY_PIPE)
    except (ImportError, AttributeError, OSError):
        pass


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
        paths = [str(p) for p in figures.write_figures(
            result, Path(folder), kinds=kinds, extras=extras,
            report_folder=Path(folder) / REPORT_PNGS)]
    notes = [str(w.message) for w in caught if issubclass(w.category, FigureWarning)]
    return paths, notes


def _report_pngs(result) -> bool:
    """True when the report embeds figures of which no PNG file is written: the kinds
    (or, with several predictors, the partial figures) when ``png`` is not a format."""
    cfg = result.config.figures
    return "png" not in cfg.formats and (bool(cfg.kinds) or result.multi_fit is not None)


def anything_to_draw(result) -> bool:
    """False when the run asks for no figure file and its report shows no figure: no format
    and no figure in the report, or no kind and none of the figures drawn beyond the kinds
    (several predictors; the summary of many groups)."""
    cfg = result.config.figures
    tables = result.tables or {}
    spread = tables.get("exponent_spread")
    extras = result.multi_fit is not None or (spread is not None and len(spread) > 0)
    return (bool(cfg.formats) or _report_pngs(result)) and (bool(cfg.kinds) or extras)


def report_png(folder: Path, name: str, draw) -> bytes | None:
    """The PNG of figure ``name`` the report embeds when no PNG file of it was written.

    When the run's figures were drawn into ``folder`` (its :data:`REPORT_PNGS` folder
    exists), the report's PNG was drawn with them, and a missing file is a figure that
    could not be drawn; else ``draw()`` draws it here.  None: the figure cannot be drawn
    (the report leaves it out).
    """
    drawn = Path(folder) / REPORT_PNGS
    if drawn.is_dir():
        path = drawn / f"{name}.png"
        return path.read_bytes() if path.is_file() else None
    try:
        return draw()
    except Exception:  # noqa: BLE001 -- a figure that cannot be drawn is left out
        return None


#: Pids of the drawing processes forked by this process and not yet reaped: a worker told
#: to stop (SIGTERM, :meth:`FigureWorker.stop`) ends and reaps them before it exits.
_SHARES: set = set()


def die_with_parent(parent: int) -> None:
    """In a forked process (a drawing process, a background check): be killed when the
    process that forked it dies (a worker killed mid-run leaves no process drawing into
    the folder)."""
    try:
        import ctypes
        ctypes.CDLL(None).prctl(1, signal.SIGKILL, 0, 0, 0)   # PR_SET_PDEATHSIG
    except Exception:  # noqa: BLE001 -- not Linux: the parent's stop() still ends it
        pass
    if os.getppid() != parent:   # it died before the line above
        os._exit(1)


def _end_shares(signum=None, frame=None) -> None:
    """The worker's SIGTERM handler: end and reap its drawing processes, then leave (so
    none is left writing into the folder once the worker is reaped)."""
    for pid in list(_SHARES):
        try:
            os.kill(pid, signal.SIGKILL)
            os.waitpid(pid, 0)
        except OSError:
            pass
    os._exit(1)


class _Share:
    """One share of the figures drawn by a forked process (its answer comes on a pipe)."""

    def __init__(self, result, folder: Path, kinds, extras: bool) -> None:
        self.kinds, self.extras = kinds, extras
        read_end, write_end = os.pipe()
        parent = os.getpid()
        # no SIGTERM between the fork and the pid's registration (see _end_shares)
        blocked = signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGTERM})
        try:
            pid = os.fork()
        except OSError:
            signal.pthread_sigmask(signal.SIG_SETMASK, blocked)
            os.close(read_end)
            os.close(write_end)
            raise
        if pid == 0:   # the drawing process: draw the share, hand back the paths, leave
            code = 1
            try:
                _SHARES.clear()
                signal.signal(signal.SIGTERM, signal.SIG_DFL)
                signal.pthread_sigmask(signal.SIG_SETMASK, blocked)
                die_with_parent(parent)
                os.close(read_end)
                with os.fdopen(write_end, "wb") as fh:
                    fh.write(pickle.dumps(_draw_share(result, folder, kinds, extras=extras)))
                code = 0
            finally:
                os._exit(code)   # no atexit handlers, no flushing of the parent's buffers
        _SHARES.add(pid)
        signal.pthread_sigmask(signal.SIG_SETMASK, blocked)
        os.close(write_end)
        self.pid, self.read_end = pid, read_end

    def collect(self, result, folder: Path) -> tuple[list[str], list[str]]:
        """The share's (paths, notes); drawn here when its process failed."""
        with os.fdopen(self.read_end, "rb") as fh:
            answer = fh.read()
        _, status = os.waitpid(self.pid, 0)
        _SHARES.discard(self.pid)
        try:
            theirs = pickle.loads(answer) if status == 0 else None
        except Exception:  # noqa: BLE001 -- a truncated answer: draw the share here
            theirs = None
        return theirs if theirs is not None else _draw_share(result, folder, self.kinds,
                                                            extras=self.extras)

    def stop(self) -> None:
        """End the process and reap it (its files are left to the caller)."""
        try:
            os.kill(self.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
        os.close(self.read_end)
        os.waitpid(self.pid, 0)
        _SHARES.discard(self.pid)


def _in_order(result, answers) -> tuple[list[str], list[str]]:
    """Paths of several shares in the order of ``config.figures.kinds`` (the figures beyond
    the kinds last), with their notes."""
    order = {kind: i for i, kind in enumerate(result.config.figures.kinds)}
    paths = sorted((p for answer in answers for p in answer[0]),
                   key=lambda p: order.get(Path(p).stem, len(order)))
    return paths, [note for answer in answers for note in answer[1]]


class Drawing:
    """Figures being drawn (or drawn already); :meth:`wait` gives (relative paths, skip notes).

    Made by :func:`start_figures`; the caller writes other files meanwhile.
    """

    def __init__(self, result, folder: Path, *, shares=(), here=None, worker=None,
                 answer=None, ready=None) -> None:
        self._result, self._folder = result, Path(folder)
        self._shares = list(shares)      # forked processes drawing a share each
        self._here = here                # (kinds, extras) drawn by wait() itself, or None
        self._ready = ready              # result -> result, before wait() draws its share
        self._worker = worker            # a FigureWorker drawing every figure
        self._answer = answer

    def wait(self) -> tuple[list[str], list[str]]:
        """Block until every figure is written; return (relative paths, skip notes)."""
        if self._answer is not None:
            return self._answer
        if self._worker is not None:
            answer = self._worker.answer()
            self._answer = answer if answer is not None else draw_figures(self._result,
                                                                          self._folder)
            return self._answer
        answers = []
        try:
            if self._here is not None:
                if self._ready is not None:   # what the share drawn here still waits for
                    self._result, self._ready = self._ready(self._result), None
                answers.append(_draw_share(self._result, self._folder, *self._here))
            while self._shares:
                answers.append(self._shares.pop(0).collect(self._result, self._folder))
        finally:   # a failure here: end and reap the processes not collected
            self.cancel()
        self._answer = answers[0] if len(answers) == 1 else _in_order(self._result, answers)
        return self._answer

    def cancel(self) -> None:
        """Stop drawing (the run failed elsewhere): end and reap the processes started."""
        for share in self._shares:
            share.stop()
        self._shares = []
        if self._worker is not None:
            self._worker.stop()


def _start_here(result, folder: Path, *, draw_here: bool, ranked_here: bool = False,
                ready=None) -> Drawing:
    """Figures of ``result`` drawn by processes forked from this one.

    ``draw_here``: this process draws one share itself (in :meth:`Drawing.wait`) and one
    forked process the other; else both shares go to forked processes, so this process
    is free until it waits.  ``ranked_here`` (with ``draw_here``): the ranked residuals
    follow the run to this process only, so the figures that read them
    (:data:`RANKED_KINDS`) are drawn here; ``ready``: ``result -> result``, called
    before this process draws (to read them first).
    """
    if not anything_to_draw(result):
        return Drawing(result, folder, answer=([], []))   # and matplotlib is never imported
    kinds = list(result.config.figures.kinds)
    if len(kinds) < 2 or one_process():
        return Drawing(result, folder, here=(None, True), ready=ready)
    mine, second = _split(kinds)
    if ranked_here and RANKED_KINDS & set(second):
        mine, second = second, mine
    # Drawing here too, this process loads the run and reads what follows it: the figures
    # beyond the kinds (the summary of many groups) go to the process forked here.
    extras_there = draw_here
    try:
        shares = [_Share(result, folder, second, extras=extras_there)]
    except OSError:   # no process to be had: everything is drawn here
        return Drawing(result, folder, here=(None, True), ready=ready)
    if not draw_here:
        try:
            shares.insert(0, _Share(result, folder, mine, extras=True))
        except OSError:
            draw_here = True
    return Drawing(result, folder, shares=shares,
                   here=(mine, not extras_there) if draw_here else None, ready=ready)


def draw_figures(result, folder: Path, *, ranked_here: bool = False,
                 ready=None) -> tuple[list[str], list[str]]:
    """Write the run's figures into ``folder``; return (relative paths, skip notes).

    The report's PNGs, when no PNG file is asked for, go to ``folder /`` :data:`REPORT_PNGS`
    (not among the paths).

    Half the figures are drawn in a forked process when two cores are free
    (:func:`one_process` false); should that process fail, its figures are
    drawn here.  Paths come in the order of ``config.figures.kinds``.  ``ranked_here``
    and ``ready``: see :func:`_start_here`.
    """
    return _start_here(result, folder, draw_here=True, ranked_here=ranked_here,
                       ready=ready).wait()


def start_figures(result, folder: Path, worker: "FigureWorker | None" = None) -> Drawing:
    """Start writing the run's figures into ``folder``; return the :class:`Drawing`.

    Only what the figures read goes on (:func:`figure_view`), so ``result`` may be a run
    whose other tables are not made yet.  ``worker`` (started with the run,
    :func:`start_worker`) draws them when it can take the run; else two processes
    forked here do (or, when :func:`one_process` holds, :meth:`Drawing.wait` draws
    them itself).
    """
    folder = Path(folder)
    view = figure_view(result)
    if worker is not None and worker.send(view, folder):
        return Drawing(view, folder, worker=worker)
    return _start_here(view, folder, draw_here=False)


def _warm_up(pdf: bool = True) -> None:
    """Import the drawing stack and lay out text once, so fonts are loaded; ``pdf``: the
    PDF writer too (a tenth of a second of imports a run without PDFs never uses)."""
    import matplotlib
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    if pdf:
        from matplotlib.backends import backend_pdf  # noqa: F401 -- ahead of use
    from matplotlib.figure import Figure
    from . import figures  # noqa: F401 -- the figure modules, ahead of use
    from .figure_style import STYLE
    for kind in FIGURES.values():   # every figure module, ahead of use
        kind.make()
    fig = Figure(figsize=(1, 1))
    with matplotlib.rc_context(STYLE):
        fig.text(0.1, 0.5, "0.123 g 10\u2009000 $10^{3}$")   # mathtext too: powers of ten
        FigureCanvasAgg(fig).draw()


def _reply(conn, answer) -> None:
    try:
        conn.send(answer)
    except OSError:   # the parent is gone or stopped listening
        pass


def _serve(conn, parent_end, job_read: int, job_write: int, pdf: bool = True) -> None:
    """The worker: get ready, wait for one run, draw it, answer, exit."""
    signal.signal(signal.SIGTERM, _end_shares)   # stop(): its drawing processes end too
    parent_end.close()   # else the worker would never see the parent go away
    os.close(job_write)
    try:
        try:
            _warm_up(pdf)
        except Exception:  # noqa: BLE001 -- drawing will then fail or succeed on its own
            pass
        try:
            job = conn.recv()
        except (EOFError, OSError):
            return
        if job is None:
            return
        fh = os.fdopen(job_read, "rb", closefd=False)
        try:
            # the run comes on its own pipe, unpickled as it arrives: no copy of it as bytes;
            # no garbage collection while its thousands of fit objects are built
            gc.disable()
            try:
                result, folder = pickle.load(fh)
            finally:
                gc.enable()
        except Exception:  # noqa: BLE001 -- the parent stopped sending: it draws them
            _reply(conn, None)
            return
        follow, ready = _ranks_to_follow(result), None
        if follow is not None:   # read when the residual figure is drawn, here
            follow.follow_from(lambda: pickle.load(fh))
            if _pipe_size(job_read) < ROOMY_PIPE:
                # the parent may be waiting to write them: read once the other process
                # draws, before this one does
                def ranks_read(res):
                    follow.ranks()
                    return res
                ready = ranks_read
        try:
            answer = draw_figures(result, folder, ranked_here=follow is not None,
                                  ready=ready)
            if follow is not None:
                follow.ranks()   # read even when no figure asked for them
        except Exception:  # noqa: BLE001 -- the parent draws them instead
            answer = None
        _reply(conn, answer)
    finally:
        conn.close()
        os.close(job_read)


class FigureWorker:
    """Handle on a forked figure process; see :func:`start_worker`.  ``pdf``: the process
    imports the PDF writer while it waits (the run writes PDFs)."""

    def __init__(self, pdf: bool = True) -> None:
        # multiprocessing flushes stdout/stderr before it forks, so nothing is printed twice
        ctx = multiprocessing.get_context("fork")
        self._conn, child_end = ctx.Pipe()
        job_read, self._job = os.pipe()
        _roomy(self._job)
        try:
            self._proc = ctx.Process(target=_serve, args=(child_end, self._conn, job_read,
                                                          self._job, pdf), daemon=True)
            self._proc.start()
        finally:
            os.close(job_read)
            child_end.close()

    def send(self, result, folder: Path) -> bool:
        """Stream ``result`` to the worker to draw into ``folder``; False when it cannot
        take it (too large to send cheaply, dead, unpicklable): the caller draws then."""
        if self._proc is None:
            return False
        points = getattr(getattr(result, "data", None), "points", None)
        if points is not None and len(points) > SEND_MAX_POINTS:
            self.close()
            return False
        try:
            self._conn.send(True)   # a run follows on the job pipe
            with os.fdopen(self._job, "wb", closefd=False) as fh:
                later = _dump((result, Path(folder)), fh, ranks_later=True)
                if later:   # ranked while the worker loads the run and starts drawing
                    fh.flush()
                    _dump(later[0].ranks(), fh)
        except Exception:  # noqa: BLE001 -- unpicklable run, dead worker: draw here
            self.close()
            return False
        return True

    def answer(self) -> tuple[list[str], list[str]] | None:
        """Wait for the worker's (relative paths, skip notes); None when it failed."""
        answer = None
        try:
            while answer is None and self._proc is not None and self._proc.is_alive():
                if self._conn.poll(0.05):
                    answer = self._conn.recv()
            if answer is None and self._proc is not None and self._conn.poll(0):
                answer = self._conn.recv()   # answered just before it exited
        except Exception:  # noqa: BLE001 -- dead worker: the caller draws them
            answer = None
        self.close()
        return answer

    def draw(self, result, folder: Path) -> tuple[list[str], list[str]] | None:
        """Have the worker draw ``result``'s figures into ``folder`` and wait for them.

        Returns (relative paths, skip notes), or None when the worker could
        not do it (the caller then draws them itself).
        """
        return self.answer() if self.send(result, folder) else None

    def stop(self) -> None:
        """End the worker now, drawing or not, with its drawing processes, and reap it
        (the run failed elsewhere; idempotent).  Once it returns, no process of the worker
        writes into the folder."""
        if self._proc is None:
            return
        self._proc.terminate()   # SIGTERM: the worker ends and reaps its own processes
        self._proc.join(timeout=5)
        if self._proc.is_alive():   # stuck: killed (its drawing processes die with it)
            self._proc.kill()
            self._proc.join()
        self._conn.close()
        os.close(self._job)
        self._proc = None

    def close(self) -> None:
        """Stop the worker if it is still waiting (idempotent)."""
        if self._proc is None:
            return
        try:
            self._conn.send(None)
        except Exception:  # noqa: BLE001 -- already gone
            pass
        self._conn.close()
        os.close(self._job)   # a worker still reading a run sees its end
        self._proc.join(timeout=5)
        if self._proc.is_alive():
            self._proc.terminate()
            self._proc.join()
        self._proc = None


def start_worker(config) -> FigureWorker | None:
    """Fork a figure worker for a run of ``config``, or None when it would not help.

    None when the run draws no figures (no kind), or :func:`one_process` holds.
    """
    fig = config.figures
    if not fig.kinds or one_process():   # with no format, the report's PNGs are drawn
        return None
    try:
        return FigureWorker(pdf="pdf" in fig.formats)
    except Exception:  # noqa: BLE001 -- no fork here: draw in the calling process
        return None
