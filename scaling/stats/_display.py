"""How results show in a notebook (``_repr_html_``) and at the prompt (``repr``).

One helper renders a table (a DataFrame) with an optional title and notes as
escaped HTML; another writes a short ``repr`` of a result object (its class
and the few fields a reader looks for first), so that no result prints as a
thirty-field dump.  Imports nothing from :mod:`scaling`; pandas is used only
through the frame passed in.
"""

from __future__ import annotations

import html
import math

__all__ = ["frame_html", "short_repr"]

#: Rows shown before a table is cut (the rest is counted under it).
MAX_ROWS = 60


def frame_html(frame, *, title: str = "", notes=(), max_rows: int = MAX_ROWS) -> str:
    """``frame`` as an HTML table, every cell, header, title and note escaped.

    Parameters
    ----------
    frame : pandas.DataFrame or None
        Shown without its index; floats with 6 significant digits; missing
        values blank.  None or an empty frame shows no table.
    title : str
        A bold line above the table.
    notes : sequence of str
        Lines of text under the table (e.g. a summary).
    max_rows : int
        Rows shown; the number of rows left out is said under the table.

    Returns
    -------
    str
        A ``<div>`` fragment (no scripts, no styles from outside).
    """
    parts = ['<div class="scaling-result">']
    if title:
        parts.append(f"<p><b>{html.escape(str(title))}</b></p>")
    if frame is not None and len(frame.columns):
        shown = frame.head(max_rows)
        parts.append(shown.to_html(index=False, escape=True, na_rep="", border=0,
                                   float_format=lambda v: f"{v:.6g}"))
        if len(frame) > max_rows:
            parts.append(f"<p>... {len(frame) - max_rows} more rows</p>")
    for note in notes:
        if note:
            parts.append(f'<pre style="white-space: pre-wrap">{html.escape(str(note))}</pre>')
    parts.append("</div>")
    return "\n".join(parts)


def _value(v) -> str:
    if isinstance(v, float):
        return "nan" if math.isnan(v) else f"{v:.6g}"
    if isinstance(v, tuple) and len(v) == 2 and all(isinstance(u, float) for u in v):
        return f"[{_value(v[0])}, {_value(v[1])}]"
    return repr(v)


def short_repr(obj, fields: dict) -> str:
    """``ClassName(key=value, ...)`` with floats to 6 significant digits.

    Parameters
    ----------
    obj : object
        Its class name starts the text.
    fields : dict
        The fields to show, in order; a pair of floats shows as ``[low, high]``.
    """
    inner = ", ".join(f"{k}={_value(v)}" for k, v in fields.items())
    return f"{type(obj).__name__}({inner})"
