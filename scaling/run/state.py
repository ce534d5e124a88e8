"""What a run knows between its stages.

Every stage of a run is a function ``stage(cfg, state) -> <its own frozen
dataclass>``: it reads the config and the :class:`RunState` built so far and
returns its tables, objects, messages and notes.  :mod:`scaling.run.pipeline`
calls the stages in order and folds each result into the next state with
:func:`dataclasses.replace`; no stage changes the state it is given.
"""

from __future__ import annotations

from dataclasses import dataclass, field

__all__ = ["RunState"]


@dataclass(frozen=True, slots=True, kw_only=True)
class RunState:
    """The run so far.

    Attributes
    ----------
    data : CleanData
        The cleaned table (points on the log scale of ``base``).
    base : float or None
        Log base of the run (None: the data are logs already).
    quiet : bool
        No progress bar in the resampling stage.
    point_sets : dict
        ``(scope, group) -> DataFrame`` of the points each line was fitted to.
    line_fits : dict
        ``(scope, group, method) -> LineFit`` of every estimable fit.
    rows : tuple of dict
        ``fits.csv`` rows so far (:func:`scaling.stats.fit_rows.fit_row`).
    test_rows : tuple of dict
        ``slope_tests.csv`` rows that have no LineFit (the common slope).
    phylo : PhyloStage or None
        The phylogenetic stage, when ``data.tree`` is set.
    fits, slope_tests : DataFrame or None
        The two main tables, once assembled.
    saved_fits : dict
        ``(scope, group, method) -> saved-fit dict`` (with correction factors).
    tables : dict
        Further tables by file stem (DataFrames only).
    """

    data: object
    base: float | None
    quiet: bool = True
    point_sets: dict = field(default_factory=dict)
    line_fits: dict = field(default_factory=dict)
    rows: tuple = ()
    test_rows: tuple = ()
    phylo: object = None
    fits: object = None
    slope_tests: object = None
    saved_fits: dict = field(default_factory=dict)
    tables: dict = field(default_factory=dict)
