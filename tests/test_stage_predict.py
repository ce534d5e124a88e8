"""The prediction stage's accuracy and correction factors, evaluated for many fits at once."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest

from scaling import fit_line
from scaling.errors import DataError
from scaling.stats.predictions import accuracy, data_factors
from scaling.run.predictions import accuracy_and_factors, factors_by_group

COLUMNS = ("see", "percent_see", "percent_pe", "smearing_factor", "parametric_factor",
           "ratio_factor")


def _groups_of_unequal_size(seed: int = 7, base=10):
    """Invented data (simulation): 25 groups of 3..60 points, y = a_g x^0.75 lognormal."""
    rng = np.random.default_rng(seed)
    sizes = rng.integers(3, 61, 25)
    sizes[:4] = [3, 9, 9, 128]   # the smallest size, a repeated size, one above numpy's block
    point_sets, line_fits = {}, {}
    for g, n in enumerate(sizes):
        log_x = rng.uniform(0, 3, n)
        log_y = rng.normal(0.3, 0.2) + 0.75 * log_x + rng.normal(0, 0.1, n)
        x, y = 10.0 ** log_x, 10.0 ** log_y
        name = f"g{g:02d}"
        point_sets[("group", name)] = pd.DataFrame({"x": x, "y": y})
        with warnings.catch_warnings():   # small groups: weak-correlation notes expected
            warnings.simplefilter("ignore")
            for method in ("ols", "sma", "ma"):
                line_fits[("group", name, method)] = fit_line(x, y, method=method,
                                                              log_base=base)
    return line_fits, point_sets


def _per_fit(fit, sel) -> dict:
    x, y = sel["x"].to_numpy(), sel["y"].to_numpy()
    f, a = data_factors(fit, x, y), accuracy(fit, x, y)
    return {"see": a.see, "percent_see": a.percent_see, "percent_pe": a.percent_pe,
            "smearing_factor": f["smearing"], "parametric_factor": f["parametric"],
            "ratio_factor": f["ratio"]}


class TestAccuracyAndFactors:
    @pytest.mark.parametrize("base", [10, "e", 2])
    def test_equals_the_per_fit_accuracy_and_factors(self, base):
        line_fits, point_sets = _groups_of_unequal_size(base=base)
        saved, extra = accuracy_and_factors(line_fits, point_sets)
        assert list(extra) == list(line_fits) == list(saved)
        for key, fit in line_fits.items():
            want = _per_fit(fit, point_sets[key[:2]])
            for c in COLUMNS:
                # internal consistency: the vectorised sums against predict.accuracy and
                # predict.data_factors on each fit alone (same formulas, same summation
                # order); asked to 1e-12 relative, in practice equal to the last bit
                assert extra[key][c] == pytest.approx(want[c], rel=1e-12, abs=0), (key, c)
            assert saved[key]["smearing_factor"] == extra[key]["smearing_factor"]
            assert saved[key]["ratio_factor"] == extra[key]["ratio_factor"]

    def test_smearing_of_exact_residuals_is_their_mean_power(self):
        # exact law (Duan 1983, JASA 78:605): smearing = mean(10^e); residuals of an OLS
        # line with one point each at e = +d, -2d, +d (they sum to zero) around y = x
        d = 0.05
        x = np.array([1.0, 10.0, 100.0])
        y = x * 10.0 ** np.array([d, -2 * d, d])
        fit = fit_line(x, y, method="ols")
        _, extra = accuracy_and_factors({("pooled", "", "ols"): fit},
                                        {("pooled", ""): pd.DataFrame({"x": x, "y": y})})
        e = np.log10(y) - fit.intercept - fit.slope * np.log10(x)
        assert extra[("pooled", "", "ols")]["smearing_factor"] == pytest.approx(
            np.mean(10.0 ** e), rel=1e-14)   # exact law, formula above
        assert extra[("pooled", "", "ols")]["see"] == pytest.approx(
            math.sqrt(np.sum(e * e) / 1), rel=1e-14)   # exact law: SEE on n - 2 = 1 df

    def test_skips_point_sets_under_three_rows(self):
        line_fits, point_sets = _groups_of_unequal_size()
        point_sets[("group", "g00")] = point_sets[("group", "g00")].iloc[:2]
        saved, extra = accuracy_and_factors(line_fits, point_sets)
        assert ("group", "g00", "ols") not in extra and ("group", "g00", "ols") not in saved

    def test_non_positive_value_raises_the_per_fit_error(self):
        line_fits, point_sets = _groups_of_unequal_size()
        bad = point_sets[("group", "g01")].copy()
        bad.loc[bad.index[0], "y"] = -1.0
        point_sets[("group", "g01")] = bad
        with pytest.raises(DataError, match="y must be positive to take logarithms"):
            accuracy_and_factors(line_fits, point_sets)


class TestFactorsByGroup:
    def test_one_value_per_fit_from_its_own_rows(self):
        line_fits, point_sets = _groups_of_unequal_size()
        keys = [k for k in line_fits if k[2] == "sma"]
        sels = [point_sets[k[:2]] for k in keys]
        codes = np.repeat(np.arange(len(keys)), [len(s) for s in sels])
        x = np.concatenate([s["x"].to_numpy() for s in sels])
        y = np.concatenate([s["y"].to_numpy() for s in sels])
        cols = factors_by_group([line_fits[k] for k in keys], x, y, codes, 10.0)
        assert all(cols[c].shape == (len(keys),) for c in COLUMNS)
        for i, k in enumerate(keys):
            want = _per_fit(line_fits[k], sels[i])
            # internal consistency with the per-fit functions, 1e-12 relative
            assert cols["ratio_factor"][i] == pytest.approx(want["ratio_factor"], rel=1e-12)
            assert cols["percent_pe"][i] == pytest.approx(want["percent_pe"], rel=1e-12)


class TestManyGroupsSummedAtOnce:
    """Beyond ``_FEW_GROUPS`` groups the sums are one zero-led ``np.add.reduceat``."""

    def test_group_sums_equal_numpy_sum_of_each_group_bit_for_bit(self):
        # internal consistency: np.sum of each group's slice alone; sizes around numpy's
        # pairwise blocks (8, 128), groups of one point, and a large group
        from scaling.run.predictions import _FEW_GROUPS, _group_sums
        rng = np.random.default_rng(12)
        sizes = np.r_[1, 1, 2, 3, 7, 8, 9, 127, 128, 129, 255, 256, 257, 5000,
                      rng.integers(1, 300, 3 * _FEW_GROUPS)]
        starts = np.concatenate(([0], np.cumsum(sizes[:-1])))
        w = rng.normal(size=int(sizes.sum())) * rng.uniform(0.0, 1e3, int(sizes.sum()))
        want = np.array([np.sum(w[a:a + m]) for a, m in zip(starts, sizes)])
        assert np.array_equal(_group_sums(sizes, starts)(w), want)
        w[starts[5] + 2] = np.nan   # a missing value spoils its own group only
        got = _group_sums(sizes, starts)(w)
        assert np.isnan(got[5]) and np.isfinite(np.delete(got, 5)).all()

    @pytest.mark.parametrize("n_groups", [3, 200])
    def test_factors_of_many_groups_equal_each_fit_alone(self, n_groups):
        # internal consistency: per-fit predict.accuracy and predict.data_factors, to the
        # last bit (the ratio factor, whose per-fit form divides in another order, to
        # 1e-12 relative), on groups of 3 to 60 points (simulation); methods sharing one
        # summing plan give the numbers each gives alone, bit for bit
        rng = np.random.default_rng(n_groups)
        sizes = rng.integers(3, 61, n_groups)
        sizes[0] = 3
        fits, sels = {m: [] for m in ("ols", "sma", "ma")}, []
        for n in sizes:
            log_x = rng.uniform(0, 3, n)
            log_y = 0.3 + 0.75 * log_x + rng.normal(0, 0.1, n)
            sel = pd.DataFrame({"x": 10.0 ** log_x, "y": 10.0 ** log_y})
            sels.append(sel)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                for m in fits:
                    fits[m].append(fit_line(sel["x"], sel["y"], method=m, log_base=10))
        codes = np.repeat(np.arange(n_groups), sizes)
        x = np.concatenate([s["x"].to_numpy() for s in sels])
        y = np.concatenate([s["y"].to_numpy() for s in sels])
        shared: dict = {}
        for m, these in fits.items():
            cols = factors_by_group(these, x, y, codes, 10.0, shared=shared)
            alone = factors_by_group(these, x, y, codes, 10.0)
            for i in (0, n_groups // 2, n_groups - 1):
                want = _per_fit(these[i], sels[i])
                for c in COLUMNS:
                    assert cols[c][i] == alone[c][i], (m, i, c)
                    if c == "ratio_factor":
                        assert cols[c][i] == pytest.approx(want[c], rel=1e-12, abs=0)
                    else:
                        assert cols[c][i] == want[c], (m, i, c)

    def test_stage_of_many_groups_gives_each_methods_lone_numbers(self):
        # internal consistency: accuracy_and_factors (chunks of whole groups, one summing
        # plan per chunk from the sets' lengths, byte-sized codes) against factors_by_group
        # of each method alone on all the groups at once, bit for bit
        rng = np.random.default_rng(29)
        sizes = rng.integers(3, 40, 150)
        point_sets, line_fits = {}, {}
        for g, n in enumerate(sizes):
            log_x = rng.uniform(0, 3, n)
            log_y = 0.3 + 0.75 * log_x + rng.normal(0, 0.1, n)
            point_sets[("group", f"g{g:03d}")] = pd.DataFrame({"x": 10.0 ** log_x,
                                                               "y": 10.0 ** log_y})
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                for m in ("ols", "sma"):
                    line_fits[("group", f"g{g:03d}", m)] = fit_line(
                        10.0 ** log_x, 10.0 ** log_y, method=m, log_base=10)
        _, extra = accuracy_and_factors(line_fits, point_sets)
        sets = list(point_sets.values())
        x = np.concatenate([s["x"].to_numpy() for s in sets])
        y = np.concatenate([s["y"].to_numpy() for s in sets])
        codes = np.repeat(np.arange(len(sets)), sizes)
        for m in ("ols", "sma"):
            keys = [k for k in line_fits if k[2] == m]
            alone = factors_by_group([line_fits[k] for k in keys], x, y, codes, 10.0)
            for i, key in enumerate(keys):
                for c in COLUMNS:
                    assert extra[key][c] == alone[c][i], (key, c)
