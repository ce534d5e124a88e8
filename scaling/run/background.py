"""A call computed in a forked process while the run goes on.

The in-memory road leaves one of two cores idle while it reads and fits (the figure
worker waits for its inputs then).  A check that needs only the cleaned points -- the
error-structure comparison's nonlinear fit over every point -- can use that core: it is
forked once the points exist and collected when the diagnostics read it.  The child
runs the same function on the same arrays, so the numbers are the same bits as a call
in the run's own process.  Where figures are drawn in one process
(:func:`~scaling.render.figure_worker.one_process`: not Linux, one core, other threads
running, ``SCALING_ONE_PROCESS=1``) nothing is forked and the call is made when its
answer is asked for; so it is when the child cannot answer (it died, its answer is
cut short).
"""

from __future__ import annotations

import gc
import os
import pickle
import signal
from typing import Any, Callable

from ..render.figure_worker import die_with_parent, one_process

__all__ = ["Background"]


class Background:
    """``fn(*args)``, computed in a forked child; :meth:`result` waits for it.

    Parameters
    ----------
    fn : callable
        A function of numbers that raises or returns a picklable value.
    *args
        Its arguments (the child sees them as they are at the fork: do not change
        them in place until :meth:`result` returned).

    Notes
    -----
    The child is killed when the run's process dies (``PR_SET_PDEATHSIG`` on Linux);
    :meth:`stop` kills and reaps it when the run ends without reading it.
    """

    def __init__(self, fn: Callable[..., Any], *args: Any) -> None:
        self._call = (fn, args)
        self._pid = None
        self._read_end = None
        if one_process():   # no fork: not Linux, one core, other threads, or asked not to
            return
        read_end, write_end = os.pipe()
        parent = os.getpid()
        try:
            pid = os.fork()
        except OSError:
            os.close(read_end)
            os.close(write_end)
            return
        if pid == 0:   # the child: compute, hand back, leave without the parent's cleanup
            code = 1
            try:
                gc.disable()   # nothing of the parent's is collected here
                signal.signal(signal.SIGTERM, signal.SIG_DFL)
                signal.signal(signal.SIGINT, signal.SIG_IGN)   # the run's Ctrl-C kills it
                die_with_parent(parent)
                os.close(read_end)
                try:
                    answer = (True, fn(*args))
                except Exception as exc:  # noqa: BLE001 -- raised again by result()
                    answer = (False, exc)
                with os.fdopen(write_end, "wb") as fh:
                    fh.write(pickle.dumps(answer, pickle.HIGHEST_PROTOCOL))
                code = 0
            finally:
                os._exit(code)
        os.close(write_end)
        self._pid, self._read_end = pid, read_end

    def result(self) -> Any:
        """``fn(*args)``: the child's answer, or computed here when it has none; an
        exception ``fn`` raised is raised again."""
        answer = None
        if self._pid is not None:
            with os.fdopen(self._read_end, "rb") as fh:
                data = fh.read()
            self._read_end = None
            _, status = os.waitpid(self._pid, 0)
            self._pid = None
            try:
                answer = pickle.loads(data) if status == 0 else None
            except Exception:  # noqa: BLE001 -- a truncated answer: computed here
                answer = None
        if answer is None:
            fn, args = self._call
            return fn(*args)
        ok, value = answer
        if not ok:
            raise value
        return value

    def stop(self) -> None:
        """Kill and reap the child if it is still unread (idempotent)."""
        if self._pid is None:
            return
        try:
            os.kill(self._pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
        os.waitpid(self._pid, 0)
        os.close(self._read_end)
        self._pid = self._read_end = None

