"""With groups and several predictors, the figures and checks follow the Answer's model.

The partial-relationship figures draw the lines of the model the Answer leads
with (common exponents at each group's elevation, or each group's own fit),
and the collinearity warning reads the variance inflation factors of that
model.  Reference values: statsmodels OLS (the model with group dummies, and
each group's own rows) and ``variance_inflation_factor``; data: the Palmer
penguins (Horst, Hill & Gorman 2020, palmerpenguins R package; Gorman,
Williams & Fraser 2014, PLoS ONE 9:e90081), and invented data with a known
truth where the groups must differ.
"""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from matplotlib.lines import Line2D
from numpy.testing import assert_allclose
from statsmodels.stats.outliers_influence import variance_inflation_factor

import scaling
from scaling.io.config import config_from_dict
from scaling.render.figure_partial import plot_partial
from scaling.render.answer import headline_of

palmerpenguins = pytest.importorskip("palmerpenguins")


def _run(frame: pd.DataFrame, folder, x, y, group):
    path = folder / "data.csv"
    frame.to_csv(path, index=False)
    raw = {"data": {"file": str(path), "x": list(x), "y": y, "group": group},
           "model": {"methods": ["ols"]}, "exponents": {"isometry": [1.0] * len(x)}}
    return scaling.run_config(config_from_dict(raw), write=False, quiet=True)


def _lines(ax) -> list:
    """The drawn lines with data (legend-only artists have none)."""
    return [a for a in ax.get_lines() if isinstance(a, Line2D) and len(a.get_xdata()) > 1]


def _log_slope(line) -> float:
    x, y = np.log10(line.get_xdata()), np.log10(line.get_ydata())
    return float((y[-1] - y[0]) / (x[-1] - x[0]))


def _log_level(line, at: float) -> float:
    """The line's log10 y at log10 x = ``at`` (it is straight on log axes)."""
    x, y = np.log10(line.get_xdata()), np.log10(line.get_ydata())
    return float(y[0] + (at - x[0]) * (y[-1] - y[0]) / (x[-1] - x[0]))


@pytest.fixture(scope="module")
def penguin_run(penguins, tmp_path_factory):
    return _run(penguins, tmp_path_factory.mktemp("penguins"),
                ("flipper_length_mm", "bill_length_mm"), "body_mass_g", "species")


@pytest.fixture(scope="module")
def differing(tmp_path_factory):
    """Invented: three groups whose exponent of d differs (1.5, 2, 2.5; truth known)."""
    rng = np.random.default_rng(21)
    rows = []
    for g, b in (("a", 1.5), ("b", 2.0), ("c", 2.5)):
        d, h = 10 ** rng.uniform(0.5, 1.7, 40), 10 ** rng.uniform(0.6, 1.5, 40)
        m = 0.05 * d ** b * h * 10 ** rng.normal(0, 0.03, 40)
        rows.append(pd.DataFrame({"grp": g, "d": d, "h": h, "m": m}))
    frame = pd.concat(rows, ignore_index=True)
    return frame, _run(frame, tmp_path_factory.mktemp("differ"), ("d", "h"), "m", "grp")


class TestPartialFigureDrawsTheAnswersModel:
    def test_common_exponents_one_line_per_group_at_its_elevation(self, penguin_run,
                                                                  penguins):
        assert headline_of(penguin_run).line == "common"
        ref = smf.ols("lm ~ C(species) + lf + lb", penguins).fit()   # statsmodels, dummies
        means = penguins[["lf", "lb"]].mean()
        for term, j, other in (("flipper_length_mm", "lf", "lb"),
                               ("bill_length_mm", "lb", "lf")):
            lines = _lines(plot_partial(penguin_run, term))
            assert len(lines) == 3   # one per species, none pooled
            for line, species in zip(lines, ("Adelie", "Chinstrap", "Gentoo")):
                assert_allclose(_log_slope(line), ref.params[j], rtol=0, atol=1e-8)
                # level: the species' elevation with the other term at its mean log
                elevation = ref.params["Intercept"] + ref.params.get(
                    f"C(species)[T.{species}]", 0.0)
                expected = elevation + ref.params[other] * means[other]
                assert_allclose(_log_level(line, 0.0), expected, rtol=0, atol=1e-8)

    def test_differing_exponents_each_group_draws_its_own_fit(self, differing):
        frame, res = differing
        assert headline_of(res).line == "groups"
        lines = _lines(plot_partial(res, "d"))
        assert len(lines) == 3
        for line, g in zip(lines, ("a", "b", "c")):
            sub = frame[frame["grp"] == g].assign(ld=lambda f: np.log10(f["d"]),
                                                  lh=lambda f: np.log10(f["h"]),
                                                  lm=lambda f: np.log10(f["m"]))
            own = smf.ols("lm ~ ld + lh", sub).fit()   # statsmodels on the group's rows
            assert_allclose(_log_slope(line), own.params["ld"], rtol=0, atol=1e-8)

    def test_without_groups_the_pooled_line_is_drawn(self, penguins, tmp_path):
        path = tmp_path / "p.csv"
        penguins.to_csv(path, index=False)
        raw = {"data": {"file": str(path), "x": ["flipper_length_mm", "bill_length_mm"],
                        "y": "body_mass_g"}, "model": {"methods": ["ols"]}}
        res = scaling.run_config(config_from_dict(raw), write=False, quiet=True)
        (line,) = _lines(plot_partial(res, "flipper_length_mm"))
        ref = smf.ols("lm ~ lf + lb", penguins).fit()   # statsmodels, pooled
        assert_allclose(_log_slope(line), ref.params["lf"], rtol=0, atol=1e-8)


@pytest.fixture(scope="module")
def within(tmp_path_factory):
    """Invented: within each group h follows d closely (collinear), while the groups
    sit far apart in h, so the pooled predictors are only loosely correlated."""
    rng = np.random.default_rng(5)
    rows = []
    for i, g in enumerate("abcdef"):
        d = 10 ** rng.uniform(1.0, 1.6, 30)
        h = d * 10 ** (1.2 * i - 3 + rng.normal(0, 0.02, 30))
        m = 0.05 * d ** 2 * h * 10 ** (0.3 * i + rng.normal(0, 0.05, 30))
        rows.append(pd.DataFrame({"grp": g, "d": d, "h": h, "m": m}))
    frame = pd.concat(rows, ignore_index=True)
    return frame, _run(frame, tmp_path_factory.mktemp("vif"), ("d", "h"), "m", "grp")


class TestCollinearityReadsTheAnswersModel:

    def test_warning_cites_the_common_models_vif(self, within):
        frame, res = within
        assert headline_of(res).line == "common"
        ld, lh = np.log10(frame["d"]), np.log10(frame["h"])
        dummies = pd.get_dummies(frame["grp"]).to_numpy(dtype=float)
        exog = np.column_stack([dummies, ld, lh])
        k = dummies.shape[1]
        # statsmodels variance_inflation_factor of d and h in the model with group dummies
        vif_common = [variance_inflation_factor(exog, k + j, standardize=False)
                      for j in (0, 1)]
        pooled = np.column_stack([np.ones(len(frame)), ld, lh])
        vif_pooled = variance_inflation_factor(pooled, 1, standardize=False)   # pooled
        assert min(vif_common) > 10 > vif_pooled
        diag = res.tables["diagnostics"]
        rows = diag[(diag["scope"] == "common") & (diag["test"] == "VIF")]
        assert_allclose(rows["statistic"], vif_common, rtol=1e-6)
        vif_common = max(vif_common)
        said = [w for w in res.warnings if "strongly correlated" in w]
        assert len(said) == 1 and "within grps" in said[0]
        assert f"{np.sqrt(vif_common):.2g} times" in said[0]

    def test_pooled_vif_alone_does_not_warn_when_the_answer_is_within_groups(self, within):
        frame, res = within
        diag = res.tables["diagnostics"]
        pooled = diag[(diag["scope"] == "pooled") & (diag["test"] == "VIF")]
        assert not pooled["flagged"].astype(bool).any()   # the loose pooled correlation
        assert "pooled" not in " ".join(w for w in res.warnings if "strongly" in w)
