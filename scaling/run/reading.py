"""The reading stage of a run: the cleaned table in the units the model fits.

The first stage: it starts from the config alone and its result seeds the
run's :class:`~scaling.run.state.RunState`.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

from ..errors import ScalingWarning
from ..io.tables import CleanData, load_data
from ..render.wording import dropped_note, read_message
from ..stats.logscale import parse_log_base
from .several_predictors import apply_model_units

__all__ = ["ReadStage", "read_stage"]


@dataclass(frozen=True, slots=True, kw_only=True)
class ReadStage:
    """The cleaned table and what the run says about reading it.

    Attributes
    ----------
    data : CleanData
        Converted to ``model.units`` when set.
    base : float or None
        Log base of the run.
    messages : tuple of str
        Rows read, dropped and fitted; the unit conversion.
    notes : tuple of str
        Warnings raised while cleaning (e.g. an exclude value matching
        nothing) and the dropped-rows note.
    """

    data: CleanData
    base: float | None
    messages: tuple = ()
    notes: tuple = ()


def read_stage(cfg) -> ReadStage:
    """Read and clean ``data.file``; convert to ``model.units``.

    Warnings of the cleaning become notes of the run and are warned again.

    Raises
    ------
    ScalingError
        For bad data (the message names file, column or row).
    """
    base = parse_log_base(cfg.model.log_base)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ScalingWarning)
        data = load_data(cfg.data, log_base=base)
    data, units_message = apply_model_units(data, cfg, base)   # model.units
    notes: list[str] = []
    for w in caught:   # e.g. an exclude value matching nothing: a note of the run, and re-warned
        if issubclass(w.category, ScalingWarning):
            notes.append(str(w.message))
        warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    messages = [read_message(data, cfg)]
    if len(data.dropped):
        notes.append(dropped_note(len(data.dropped)))
    if units_message:
        messages.append(units_message)
    return ReadStage(data=data, base=base, messages=tuple(messages), notes=tuple(notes))
