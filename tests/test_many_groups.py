"""Passes over many groups at once give what one group at a time gives.

The run fits, ranges and tests every group of a table in array passes
(:func:`scaling.stats.moments.sort_by_group`, :func:`group_extremes`,
:func:`scaling.stats.line_results.line_fits_from_result`, :func:`slope_tests_for`).
Each is checked here against the per-group computation it replaces, value for
value (internal consistency, exact equality of floats), on the edge cases:
n = 3, points on an exact line (r = +1 and r = -1), hypothesised exponents of
the other sign and 0, intervals that are unbounded or of both signs, fits that
are not estimable, one point per group and groups of one repeated x.
"""

from __future__ import annotations

import dataclasses
import math
import warnings

import numpy as np
import pandas as pd
import pytest
from pandas.testing import assert_frame_equal, assert_index_equal, assert_series_equal

import scaling
from scaling.io.config import config_from_dict
from scaling.run.fits import fit_stage, slope_tests
from scaling.run.reading import read_stage
from scaling.run.state import RunState
from scaling.stats.line_results import (fit_to_dict, line_fit_from_result,
                                        line_fits_from_result, slope_tests_for)
from scaling.stats.lines import fit_moments
from scaling.stats.moments import Moments, group_extremes, group_moments, sort_by_group
from scaling.stats.robust import deming_moments

MOMENT_METHODS = ("ols", "sma", "ma")
#: Hypothesised exponents: the usual ones, 0, of the other sign, on the minor-axis
#: side of a slope near 0.75 (-4/3), the exact slopes below (0.75, -0.5), a fraction.
EXPONENTS = (0.75, 2 / 3, 1.0, 3.0, 0.0, -0.75, -0.5, -4 / 3, "3/4")


def _same_float(a, b) -> bool:
    a, b = float(a), float(b)
    if math.isnan(a) or math.isnan(b):
        return math.isnan(a) and math.isnan(b)
    return a == b and math.copysign(1.0, a) == math.copysign(1.0, b)


def _same_test(a, b) -> bool:
    numbers = ("exponent", "estimate", "statistic", "df", "p_value")
    words = ("method", "hypothesis", "statistic_type", "p_method", "note")
    return (all(_same_float(getattr(a, k), getattr(b, k)) for k in numbers)
            and all(getattr(a, k) == getattr(b, k) for k in words))


def _edge_moments(higher: bool = False):
    """Moments of groups covering the edge cases, and what each group is."""
    rng = np.random.default_rng(20)
    xs, ys, what = [], [], []

    def add(x, y, name):
        xs.append(np.asarray(x, dtype=float))
        ys.append(np.asarray(y, dtype=float))
        what.append(name)

    for n in (3, 4, 5, 8, 30):
        for rho in (0.98, 0.6, 0.2, 0.02, -0.3, -0.9):
            x = rng.normal(1.0, 0.5, n)
            y = 0.75 * x * np.sign(rho) + rng.normal(0, 0.5 * math.sqrt(1 / rho ** 2 - 1), n)
            add(x, y, f"n={n} rho={rho}")
    x = np.linspace(0.0, 2.0, 6)
    add(x, 0.75 * x + 0.2, "exact r=+1")
    add(x, -0.5 * x + 1.0, "exact r=-1")
    add(np.array([0.0, 1.0, 2.0]), np.array([0.0, 0.75, 1.5]), "exact n=3")
    add(np.array([0.5, 1.5]), np.array([1.0, 2.0]), "n=2: not estimable")
    add(np.full(5, 1.3), rng.normal(0, 1, 5), "constant x: not estimable")
    add(rng.normal(0, 1, 5), np.full(5, 0.4), "constant y: not estimable")
    add(np.array([0.0, 1.0, 2.0, 3.0]), np.array([1.0, 0.0, 0.0, 1.0]),
        "uncorrelated: SMA and MA not estimable")
    labels = np.concatenate([np.full(x.size, i) for i, x in enumerate(xs)])
    m = group_moments(np.concatenate(xs), np.concatenate(ys), labels, n_groups=len(xs),
                      higher=higher)
    return m, what


@pytest.fixture(scope="module")
def edge_fits():
    """Every moment method's LineFit of every edge group (estimable or not)."""
    m, what = _edge_moments()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        out = {method: line_fits_from_result(fit_moments(m, method), m, method,
                                             confidence=0.95, log_base=10.0)
               for method in MOMENT_METHODS}
    return out, what


class TestSortByGroup:
    def test_rows_of_each_group_in_their_original_order(self):
        # internal consistency: the rows of group g are np.flatnonzero(labels == g)
        rng = np.random.default_rng(1)
        labels = rng.integers(0, 7, 200)
        labels[labels == 4] = 5   # group 4 empty
        order, bounds = sort_by_group(labels, n_groups=9)   # 7, 8 empty too
        assert bounds.tolist()[0] == 0 and bounds[-1] == labels.size
        for g in range(9):
            assert order[bounds[g]:bounds[g + 1]].tolist() == np.flatnonzero(labels == g).tolist()

    def test_many_groups_sort_the_same_as_few(self):
        # internal consistency: more groups than 16-bit keys hold take the general sort
        rng = np.random.default_rng(2)
        labels = rng.integers(0, 40_000, 100_000)
        order, bounds = sort_by_group(labels)
        assert np.array_equal(order, np.argsort(labels, kind="stable"))
        assert np.array_equal(np.diff(bounds), np.bincount(labels, minlength=40_000))

    def test_no_rows(self):
        order, bounds = sort_by_group(np.array([], dtype=int), n_groups=2)
        assert order.size == 0 and bounds.tolist() == [0, 0, 0]


class TestGroupExtremes:
    def test_equal_the_minimum_and_maximum_of_each_group(self):
        # exact law: the extremes of each group's values (numpy min and max per group)
        rng = np.random.default_rng(3)
        labels = np.concatenate([rng.integers(0, 50, 2000), [50], [51, 51, 51]])
        values = np.concatenate([rng.lognormal(0, 2, 2000), [7.5], [0.3, 0.3, 0.3]])
        low, high = group_extremes(values, *sort_by_group(labels, n_groups=53))
        for g in range(52):
            sel = values[labels == g]
            assert low[g] == np.min(sel) and high[g] == np.max(sel)
        assert (low[50], high[50]) == (7.5, 7.5)   # one point
        assert (low[51], high[51]) == (0.3, 0.3)   # one repeated x
        assert (low[52], high[52]) == (np.inf, -np.inf)   # no rows

    def test_nan_is_the_extreme_of_its_group(self):
        # common practice, no source: numpy's min and max propagate NaN
        low, high = group_extremes([1.0, np.nan, 2.0, 3.0],
                                   *sort_by_group(np.array([0, 0, 1, 1])))
        assert np.isnan(low[0]) and np.isnan(high[0]) and (low[1], high[1]) == (2.0, 3.0)


def _edge_fits(method: str, *, higher: bool = False):
    """The edge-case moments, a range per set, Deming's lambda and one method's fit of
    every set at once: what the packaging tests hand to line_fits_from_result."""
    m, what = _edge_moments(higher=higher)
    ranges = [((i + 1.0, i + 2.0), (i + 3.0, i + 4.0)) for i in range(len(what))]
    lam = 2.0 if method == "deming" else None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = deming_moments(m, lam) if method == "deming" else fit_moments(m, method)
    return m, what, ranges, lam, res


class TestLineFitsFromResult:
    @pytest.mark.parametrize("method", MOMENT_METHODS + ("deming",))
    def test_equal_the_fits_packaged_one_at_a_time(self, method):
        # internal consistency: every entry equals line_fit_from_result(res, i, m[i])
        m, what, ranges, lam, res = _edge_fits(method)
        keep = np.arange(len(what)) % 3 != 1
        fits = line_fits_from_result(res, m, method, confidence=0.95, log_base=10.0,
                                     x_ranges=[r[0] for r in ranges],
                                     y_ranges=[r[1] for r in ranges], lam=lam, keep=keep)
        for i, name in enumerate(what):
            if not keep[i]:
                assert fits[i] is None
                continue
            one = line_fit_from_result(res, i, m[i], method, confidence=0.95, log_base=10.0,
                                       x_range=ranges[i][0], y_range=ranges[i][1], lam=lam)
            assert fit_to_dict(fits[i]) == fit_to_dict(one), name
            assert fits[i].note == one.note, name
            for k in ("n", "mean_x", "sxy"):
                assert type(getattr(fits[i].moments, k)) is type(getattr(one.moments, k))


def _same_fields(a, b) -> bool:
    """Every field of two LineFits (and of their intervals and moments) the same, bit for
    bit and type for type (NaN equal to NaN)."""
    for f in dataclasses.fields(a):
        u, v = getattr(a, f.name), getattr(b, f.name)
        if dataclasses.is_dataclass(u):
            if type(u) is not type(v) or not _same_fields(u, v):
                return False
        elif type(u) is not type(v):
            return False
        elif isinstance(u, (np.ndarray, tuple)):
            if not all(np.array_equal(p, q, equal_nan=True) for p, q in zip(u, v)):
                return False
        elif isinstance(u, (float, np.floating)):
            if not _same_float(u, v):
                return False
        elif u != v:
            return False
    return True


class TestLineFitsWithHigherSums:
    @pytest.mark.parametrize("method", MOMENT_METHODS + ("deming",))
    def test_equal_the_fits_packaged_one_at_a_time(self, method):
        # internal consistency: with the higher sums carried (the moments path), every
        # field of every entry equals line_fit_from_result(res, i, m[i]), types included
        m, what, ranges, lam, res = _edge_fits(method, higher=True)
        assert m.has_higher
        fits = line_fits_from_result(res, m, method, confidence=0.95, log_base=10.0,
                                     x_ranges=[r[0] for r in ranges],
                                     y_ranges=[r[1] for r in ranges], lam=lam)
        gaps = 0
        for i, name in enumerate(what):
            one = line_fit_from_result(res, i, m[i], method, confidence=0.95, log_base=10.0,
                                       x_range=ranges[i][0], y_range=ranges[i][1], lam=lam)
            assert _same_fields(fits[i], one), name
            assert fits[i].moments.sxxxx is not None, name
            gaps += math.isfinite(fits[i].slope_gap_low)
        if method == "sma":   # the split intervals are among them
            assert gaps > 0


class TestLineFitPickles:
    @pytest.mark.parametrize("higher", [False, True])
    @pytest.mark.parametrize("method", MOMENT_METHODS + ("deming",))
    def test_a_pickled_fit_is_the_fit(self, method, higher):
        # internal consistency: every field of a fit sent through pickle (the packed
        # floats) comes back bit for bit and type for type, as a dataclass would
        import pickle

        from scaling.render.figure_worker import _dump
        import io
        m, what = _edge_moments(higher=higher)
        lam = 2.0 if method == "deming" else None
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = (deming_moments(m, lam) if method == "deming"
                   else fit_moments(m, method))
        fits = line_fits_from_result(res, m, method, confidence=0.95, log_base=10.0,
                                     x_ranges=[(1.0, float(i)) for i in range(len(what))],
                                     y_ranges=[None] * len(what), lam=lam)
        buffer = io.BytesIO()
        _dump(fits, buffer)
        for back in (pickle.loads(pickle.dumps(fits)), pickle.loads(buffer.getvalue())):
            for name, a, b in zip(what, fits, back):
                assert _same_fields(a, b), name
                assert (a.slope_gap_low is math.nan) == (b.slope_gap_low is math.nan)

    def test_fits_of_other_shapes_pickle_as_dataclasses(self):
        # internal consistency: numpy-float fields, 0-d moments, infinite gaps and
        # bootstrap replicates come back as they were
        import pickle
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            fit = scaling.fit_line([1.0, 2.0, 4.0, 8.0, 16.0], [2.0, 3.1, 5.2, 8.8, 15.0])
        fits = [fit, dataclasses.replace(fit, slope=np.float64(fit.slope)),
                dataclasses.replace(fit, slope_gap_low=-math.inf, slope_gap_high=math.inf),
                dataclasses.replace(fit, slope_replicates=np.array([0.5, 0.7]),
                                    smearing_factor=1.1, x_range=(1.0, 16.0))]
        for a, b in zip(fits, pickle.loads(pickle.dumps(fits))):
            assert _same_fields(a, b)
            assert type(a.moments.n) is type(b.moments.n)


class TestSlopeTestsFor:
    @pytest.mark.parametrize("method", MOMENT_METHODS)
    @pytest.mark.parametrize("exponent", EXPONENTS)
    def test_equal_each_fits_own_test(self, edge_fits, method, exponent):
        # internal consistency: the vectorised tests equal LineFit.test_slope bit for bit
        fits, what = edge_fits
        got = slope_tests_for(fits[method], exponent, hypothesis="h")
        assert len(got) == len(what)
        for fit, t, name in zip(fits[method], got, what):
            assert _same_test(t, fit.test_slope(exponent, hypothesis="h")), name

    def test_the_edge_cases_are_there(self, edge_fits):
        # the cases the equality above is meant to cover do occur
        fits, what = edge_fits
        notes = {f.note for method in MOMENT_METHODS for f in fits[method]}
        assert "slope interval unbounded (correlation too weak)" in notes
        assert scaling.stats.schema.BOTH_SIGNS_NOTE in notes
        assert scaling.stats.schema.EXACT_NOTE in notes
        assert any(not f.estimable for f in fits["ols"])
        assert any(f.slope < 0 for f in fits["sma"] if f.estimable)
        exact = what.index("exact r=-1")
        t = slope_tests_for(fits["ma"], -0.5)[exact]
        assert t.p_value == 1.0 and t.note == scaling.stats.schema.EXACT_NOTE

    @pytest.mark.parametrize("method", MOMENT_METHODS)
    def test_equal_each_fits_own_test_on_random_moments(self, method):
        # internal consistency: moments over six decades of spread and every
        # correlation, tested against exponents of both signs and 0, bit for bit
        rng = np.random.default_rng(11)
        g = 300
        sxx = rng.uniform(0.5, 2, g) * 10.0 ** rng.integers(-3, 3, g)
        syy = rng.uniform(0.5, 2, g) * 10.0 ** rng.integers(-3, 3, g)
        m = Moments(n=rng.integers(3, 40, g).astype(float), mean_x=rng.normal(size=g),
                    mean_y=rng.normal(size=g), sxx=sxx, syy=syy,
                    sxy=rng.uniform(-1, 1, g) ** 3 * np.sqrt(sxx * syy))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            fits = line_fits_from_result(fit_moments(m, method), m, method, confidence=0.95,
                                         log_base=10.0)
            for exponent in (0.75, -0.75, 0.0, 3.0, -4 / 3):
                for fit, t in zip(fits, slope_tests_for(fits, exponent)):
                    assert _same_test(t, fit.test_slope(exponent))

    def test_minor_axis_side_of_ma_equals_the_scalar_test_to_the_last_digit(self):
        # internal consistency: on these moments numpy's scalar x ** 2 (pow) and the
        # array's x * x differ in the last digit, which moves the MA statistic of a b0
        # on the minor-axis side; the vectorised tests still equal each fit's own test
        m = Moments(**{k: np.array([float.fromhex(v), 8.0 if k == "n" else 0.5])
                       for k, v in (("n", "0x1.0p+3"), ("mean_x", "-0x1.0ca52b681aaadp+1"),
                                    ("mean_y", "-0x1.e02ef266912c3p-1"),
                                    ("sxx", "0x1.c42746a3b0640p-1"),
                                    ("syy", "0x1.22bc5ada61e35p+0"),
                                    ("sxy", "0x1.b827000b81c9cp-1"))})
        fits = line_fits_from_result(fit_moments(m, "ma"), m, "ma", confidence=0.95,
                                     log_base=10.0)
        for exponent in (-4 / 3, -0.75, 0.0, 1.0):
            for fit, t in zip(fits, slope_tests_for(fits, exponent)):
                assert _same_test(t, fit.test_slope(exponent)), exponent

    def test_a_mixed_list_keeps_its_order_and_each_fits_own_test(self, edge_fits):
        # internal consistency: Deming, Theil-Sen and one-sample fits take their own test
        fits, _ = edge_fits
        x = np.array([1.0, 2.0, 3.0, 5.0, 8.0, 13.0, 21.0])
        y = np.array([2.1, 3.9, 6.5, 9.0, 15.2, 22.0, 30.1])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            others = [scaling.fit_line(x, y, method="deming", lam=2.0),
                      scaling.fit_line(x, y, method="theil_sen"),
                      scaling.fit_line(x, y, method="sma")]
        mixed = [others[0], fits["ols"][0], others[1], fits["ma"][5], others[2],
                 fits["sma"][3], fits["ols"][-2]]
        for exponent in (0.75, "2/3", -1.0):
            got = slope_tests_for(mixed, exponent)
            for fit, t in zip(mixed, got):
                assert _same_test(t, fit.test_slope(exponent))

    def test_statistic_and_df_are_the_ones_of_the_t_test(self, edge_fits):
        # textbook (Sokal & Rohlf 2012, ch. 14): OLS t = (b - b0)/se(b) on n - 2 df,
        # p = 2 P(T > |t|) (scipy.stats.t as the reference)
        from scipy import stats
        fits, what = edge_fits
        i = what.index("n=30 rho=0.6")
        t = slope_tests_for(fits["ols"], 1.0)[i]
        fit = fits["ols"][i]
        assert t.df == 28.0
        assert t.statistic == pytest.approx((fit.slope - 1.0) / fit.slope_se, rel=1e-12)
        assert t.p_value == pytest.approx(2 * stats.t.sf(abs(t.statistic), 28), rel=1e-12)


def _run_state(tmp_path, frame: pd.DataFrame, methods=("ols", "sma")):
    frame.to_csv(tmp_path / "t.csv", index=False)
    cfg = config_from_dict({"data": {"file": "t.csv", "x": "x", "y": "y", "group": "g"},
                            "model": {"methods": list(methods)},
                            "exponents": {"three_quarters": 0.75, "zero": 0}},
                           base_dir=tmp_path)
    read = read_stage(cfg)
    return cfg, RunState(data=read.data, base=read.base)


class TestFitStageGroups:
    @pytest.fixture
    def frame(self):
        rng = np.random.default_rng(4)
        g = rng.choice(["b", "a", "Zeta", "c"], 60)
        x = rng.lognormal(1, 1, 60)
        return pd.DataFrame({
            "x": np.concatenate([x, [3.0], [2.0, 2.0, 2.0]]),
            "y": np.concatenate([2 * x ** 0.75 * rng.lognormal(0, 0.1, 60), [5.0],
                                 [1.0, 4.0, 9.0]]),
            "g": np.concatenate([g, ["one point"], ["one x"] * 3])})

    def test_ranges_are_each_groups_minimum_and_maximum(self, tmp_path, frame):
        # exact law: the fitted range of a group is the min and max of its x and y
        cfg, state = _run_state(tmp_path, frame)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            fitted = fit_stage(cfg, state)
        rows = [r for r in fitted.rows if r["scope"] == "group"]
        assert {r["group"] for r in rows} == set(frame["g"])
        for r in rows:
            sel = frame[frame["g"] == r["group"]]
            assert (r["x_min"], r["x_max"]) == (sel["x"].min(), sel["x"].max())
            assert (r["y_min"], r["y_max"]) == (sel["y"].min(), sel["y"].max())
            fit = fitted.line_fits.get(("group", r["group"], r["method"]))
            if fit is not None:
                assert fit.x_range == (r["x_min"], r["x_max"])

    def test_groups_coded_by_the_fits_are_the_codes_of_their_names_as_text(self, tmp_path,
                                                                               frame):
        # internal consistency: the fitting stage's codes of the points' groups (reused by
        # the checks) are coded_groups' codes of the names as text, in the same order;
        # another frame (a copy) is coded afresh, to the same codes
        from scaling.run.points_to_check import coded_groups, coded_points
        cfg, state = _run_state(tmp_path, frame)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            fit_stage(cfg, state)
        pts = state.data.points
        want = coded_groups(pts["group"])
        for points in (pts, pts.copy()):
            got = coded_points(points)
            assert np.array_equal(got.codes, want.codes)
            assert got.labels.tolist() == want.labels.tolist() == sorted(set(frame["g"]))

    def test_pooled_moments_kept_by_the_fits_are_those_of_the_points_logs(self, tmp_path,
                                                                          frame):
        # internal consistency: the moments the diagnostics' exact-fit test takes from the
        # fitting stage equal moments() of the pooled frame's logs bit for bit, also on
        # exact data; a copy of the frame has none kept (computed afresh)
        from scaling.run.fits import known_moments
        from scaling.stats.moments import moments
        exact = frame.assign(y=3.0 * frame["x"] ** 0.5)
        for data in (frame, exact):
            cfg, state = _run_state(tmp_path, data)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                fit_stage(cfg, state)
            pts = state.data.points
            got = known_moments(pts)
            want = moments(pts["log_x"].to_numpy(), pts["log_y"].to_numpy())
            for k in ("n", "mean_x", "mean_y", "sxx", "syy", "sxy"):
                assert np.array_equal(getattr(got, k), getattr(want, k)), k
            assert known_moments(pts.copy()) is None

    def test_point_sets_are_each_groups_rows(self, tmp_path, frame):
        # internal consistency: each group's points are the table's rows of that group
        cfg, state = _run_state(tmp_path, frame)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            fitted = fit_stage(cfg, state)
        pts = state.data.points
        groups = sorted(set(frame["g"]))
        assert [k for k in fitted.point_sets] == [("pooled", "")] + [("group", g) for g in groups]
        for g in groups:
            got, want = fitted.point_sets[("group", g)], pts[pts["group"] == g]
            # a view of the table's rows (no copy held): as a frame, column by column and
            # by its size, columns and index it is the plain selection of the group's rows
            assert_frame_equal(got.to_frame(), want)
            assert len(got) == len(want) and got.shape == want.shape
            assert_index_equal(got.columns, want.columns)
            assert_index_equal(got.index, want.index)
            for c in want.columns:
                assert c in got
                assert_series_equal(got[c], want[c])
            assert_frame_equal(got[["x", "group"]], want[["x", "group"]])
            assert "no_such_column" not in got

    def test_slope_table_equals_each_fits_own_tests(self, tmp_path, frame):
        # internal consistency: slope_tests.csv rows equal LineFit.test_slope, in fit order
        cfg, state = _run_state(tmp_path, frame, methods=("ols", "sma", "ma", "theil_sen"))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            fitted = fit_stage(cfg, state)
            table = slope_tests(fitted.line_fits, cfg)
        expected = [(key, name, fit.test_slope(b0, hypothesis=name))
                    for key, fit in fitted.line_fits.items()
                    for name, b0 in cfg.exponents.items()]
        assert len(table) == len(expected)
        for row, (key, name, t) in zip(table.itertuples(), expected):
            assert (row.scope, row.group, row.method, row.hypothesis) == (*key, name)
            assert all(_same_float(getattr(row, k), getattr(t, k))
                       for k in ("statistic", "df", "p_value"))
            assert (row.statistic_type, row.p_method) == (t.statistic_type, t.p_method)


def test_group_points_equal_the_group_selection_with_units_and_dropped_rows(tmp_path):
    # internal consistency: with rows averaged within units and rows dropped (a missing
    # y, a non-numeric x, a zero), each group's points read column by column and through
    # set_columns are the selection of the cleaned points of that group
    from scaling.run.fits import set_columns
    rng = np.random.default_rng(8)
    units = np.repeat([f"u{i}" for i in range(12)], 3)
    frame = pd.DataFrame({"x": rng.lognormal(1, 1, 36).round(4).astype(object),
                          "y": rng.lognormal(1, 1, 36).round(4).astype(object),
                          "g": np.repeat(["b", "a", "c", "a"], 9), "u": units})
    frame.loc[4, "y"] = np.nan
    frame.loc[7, "x"] = "n/a"
    frame.loc[30, "y"] = 0.0
    frame.to_csv(tmp_path / "t.csv", index=False)
    cfg = config_from_dict({"data": {"file": "t.csv", "x": "x", "y": "y", "group": "g",
                                     "average_within": "u"}}, base_dir=tmp_path)
    read = read_stage(cfg)
    assert len(read.data.dropped) == 3
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fitted = fit_stage(cfg, RunState(data=read.data, base=read.base))
    pts = read.data.points
    assert "unit" in pts and len(pts) == 12
    for g in ("a", "b", "c"):
        got, want = fitted.point_sets[("group", g)], pts[pts["group"] == g]
        assert_frame_equal(got.to_frame(), want)
        for c in want.columns:
            assert_series_equal(got[c], want[c])
        for c, values in zip(("row", "x", "log_y", "n_rows"),
                             set_columns(got, "row", "x", "log_y", "n_rows")):
            assert np.array_equal(values, want[c].to_numpy())
        assert set_columns(got, "unit")[0].tolist() == want["unit"].tolist()


def test_group_frames_columns_read_at_once_equal_each_frames_own():
    # internal consistency: set_columns of the frames of split_by_group (slices of the
    # sorted table, read once) equals each frame's own columns; any other frame, a
    # copy or a text column is read from the frame itself
    from scaling.run.fits import set_columns, split_by_group
    from scaling.stats.moments import sort_by_group
    rng = np.random.default_rng(3)
    names = ["b", "a", "c", "d"]
    pts = pd.DataFrame({"row": np.arange(11), "x": rng.random(11), "log_x": rng.random(11),
                        "group": pd.array([names[i] for i in [0, 1, 0, 2, 3, 1, 0, 2, 1, 0, 3]],
                                          dtype="str"), "unit": list("abcdefghijk")})
    codes, uniques = pd.factorize(pts["group"], sort=True)
    order, bounds = sort_by_group(codes, n_groups=len(uniques))
    frames = split_by_group(pts, order, bounds, [str(u) for u in uniques])
    for frame in list(frames.values()) + [pts, frames["a"].to_frame()]:
        got = set_columns(frame, "x", "log_x", "row")
        for name, values in zip(("x", "log_x", "row"), got):
            assert np.array_equal(values, frame[name].to_numpy())
        assert set_columns(frame, "unit")[0].tolist() == frame["unit"].tolist()
    assert len(set_columns(frames["c"], "x")[0]) == 2   # group c: rows 3 and 7
