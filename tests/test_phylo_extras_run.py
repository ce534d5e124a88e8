"""A run with a tree: evolutionary models, predictions from the tree, per-group phylogenetic
lines and residual checks (run level)."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from scaling.errors import ConfigError
from scaling.io.config import config_from_dict
from scaling.run.pipeline import analyse
from scaling.stats.phylogeny import fit_phylo, parse_newick
from scaling.stats.phylo_predict import lambda_covariance, predict_tips

from test_phylo import random_newick


def _run(tmp_path, table: pd.DataFrame, newick: str, **model):
    table.to_csv(tmp_path / "d.csv", index=False)
    (tmp_path / "t.nwk").write_text(newick, encoding="utf-8")
    raw = {"data": {"file": "d.csv", "x": "mass", "y": "rate", "species": "sp",
                    "average_within": "sp", "tree": "t.nwk",
                    **({"group": "g"} if "g" in table else {})},
           "model": {"methods": ["ols"], "phylogeny": model or None},
           "diagnostics": {"enabled": False}, "exponents": {"three_quarters": "3/4"},
           "prediction": {"x": [10.0], "correction": "none"}}
    cfg = config_from_dict(raw, base_dir=tmp_path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return cfg, analyse(cfg)


def _invented(n, seed):
    """Invented species on a random tree with a Brownian residual (simulation data)."""
    rng = np.random.default_rng(seed)
    text = random_newick(n, rng, ultrametric=True, polytomy=0.2, prefix="sp")
    tree = parse_newick(text)
    names = [tree.names[t] for t in tree.tips]
    v = lambda_covariance(tree, tree.tips, 1.0)
    X = 1.5 + np.linalg.cholesky(v) @ rng.normal(size=n) * 0.5
    Y = 0.2 + 0.7 * X + np.linalg.cholesky(v) @ rng.normal(size=n) * 0.1
    return text, tree, names, X, Y, rng


def test_species_without_y_are_predicted_from_their_relatives(tmp_path):
    text, tree, names, X, Y, _ = _invented(30, 21)
    table = pd.DataFrame({"sp": names, "mass": 10 ** X, "rate": 10 ** Y})
    table.loc[[4, 17], "rate"] = np.nan          # two species measured for x only
    cfg, res = _run(tmp_path, table, text)
    pred = res.tables["predictions"]
    tips = pred[(pred["scope"] == "phylo") & (pred["species"] != "")]
    assert list(tips["species"]) == [names[4], names[17]]
    # the rows are no longer dropped as missing y
    assert not res.dropped["row"].isin([5, 18]).any()
    # same numbers as fit_phylo's lambda and predict_tips called directly (internal consistency)
    keep = [i for i in range(30) if i not in (4, 17)]
    pf = fit_phylo(10 ** X[keep], 10 ** Y[keep], tree, [names[i] for i in keep])
    order = keep + [4, 17]
    cov = lambda_covariance(tree, tree.tips[order], pf.lam)
    tp = predict_tips(cov, X[keep], Y[keep], X[[4, 17]])
    assert_allclose(tips["y"].to_numpy(float), 10 ** tp.fit, rtol=1e-6)
    assert_allclose(tips["y_low"].to_numpy(float), 10 ** tp.low, rtol=1e-6)
    # and a typical new species at prediction.x
    new = pred[(pred["scope"] == "phylo") & (pred["species"] == "")]
    assert list(new["x"]) == [10.0]
    assert any("relatives" in m for m in res.messages)


def test_models_table_names_the_chosen_model_and_tests_lambda(tmp_path):
    text, _, names, X, Y, _ = _invented(25, 22)
    table = pd.DataFrame({"sp": names, "mass": 10 ** X, "rate": 10 ** Y})
    _, res = _run(tmp_path, table, text, model="kappa")
    models = res.tables["phylo_models"].set_index("model")
    assert set(models.index) >= {"lambda", "brownian", "independent", "ou", "kappa", "delta"}
    assert models.loc["kappa", "chosen"] and not models.loc["lambda", "chosen"]
    assert np.isfinite(models.loc["brownian", "p_value"])
    assert np.isfinite(models.loc["independent", "p_value"])
    assert models["delta_aicc"].min() == 0


def test_groups_get_phylogenetic_twins_and_sampling_error_a_model_row(tmp_path):
    text, _, names, X, Y, rng = _invented(24, 23)
    rows = []
    for i, s in enumerate(names):      # 1-3 individuals per species around the species mean
        for _ in range(int(rng.integers(1, 4))):
            rows.append({"sp": s, "g": "A" if i < 12 else "B",
                         "mass": 10 ** X[i], "rate": 10 ** (Y[i] + rng.normal(0, 0.05))})
    _, res = _run(tmp_path, pd.DataFrame(rows), text, sampling_error=True)
    twins = res.fits[res.fits["scope"] == "phylo_group"]
    assert sorted(twins["group"]) == ["A", "B"]
    assert twins["lambda"].notna().all()
    tests = res.slope_tests[res.slope_tests["scope"] == "phylo_group"]
    assert len(tests) == 2
    models = res.tables["phylo_models"].set_index("model")
    assert "lambda_sampling_error" in models.index


@pytest.mark.parametrize("phylogeny,where", [
    ({"model": "brownain"}, "model.phylogeny.model"),
    ({"sampling_error": "yes"}, "model.phylogeny.sampling_error"),
    ({"modle": "ou"}, "model.phylogeny.modle"),
])
def test_bad_phylogeny_keys_are_one_line_errors(tmp_path, phylogeny, where):
    raw = {"data": {"file": "d.csv", "x": "m", "y": "r"}, "model": {"phylogeny": phylogeny}}
    with pytest.raises(ConfigError) as err:
        config_from_dict(raw, base_dir=tmp_path)
    assert where in str(err.value) and "\n" not in str(err.value)


def test_saved_results_predict_a_new_species_by_the_pgls_line(tmp_path):
    from scaling.run.pipeline import run_config
    from scaling.run.saved_predictions import load_results
    text, _, names, X, Y, _ = _invented(20, 24)
    table = pd.DataFrame({"sp": names, "mass": 10 ** X, "rate": 10 ** Y})
    cfg, res = _run(tmp_path, table, text)
    run_config(cfg, out=tmp_path / "out", quiet=True)
    saved = load_results(tmp_path / "out")
    frame = saved.predict([10.0], method="pgls", correction="none")
    row = res.tables["predictions"]
    row = row[(row["scope"] == "phylo") & (row["species"] == "")]
    # internal consistency: the saved line reproduces the run's prediction
    assert_allclose(frame[["y", "y_low", "y_high"]].to_numpy(float),
                    row[["y", "y_low", "y_high"]].to_numpy(float), rtol=1e-10)
    with pytest.raises(ConfigError, match="--group"):
        saved.predict([10.0], method="pgls", group="A")


def test_sampling_error_line_is_gls_with_the_added_tip_variance(tmp_path):
    text, tree, names, X, Y, rng = _invented(24, 25)
    rows = []
    for i, s in enumerate(names):
        for _ in range(int(rng.integers(1, 4))):
            rows.append({"sp": s, "mass": 10 ** X[i], "rate": 10 ** (Y[i] + rng.normal(0, 0.1))})
    _, res = _run(tmp_path, pd.DataFrame(rows), text, sampling_error=True)
    m = res.tables["phylo_models"].set_index("model")
    row = res.fits[(res.fits["scope"] == "phylo") & (res.fits["method"] == "ols")].iloc[0]
    # the fits.csv line is the sampling-error GLS line of phylo_models.csv (internal
    # consistency; its likelihood is checked against the dense normal in test_phylo_models)
    assert row["lambda_estimate"] == "lambda_sampling_error"
    assert_allclose(row["slope"], m.loc["lambda_sampling_error", "slope"], rtol=1e-7)
    assert m.loc["lambda_sampling_error", "chosen"] and not m.loc["lambda", "chosen"]


def test_lambda_tests_use_the_likelihood_maximum_when_the_line_fixes_lambda(tmp_path):
    text, tree, names, X, Y, _ = _invented(25, 26)
    table = pd.DataFrame({"sp": names, "mass": 10 ** X, "rate": 10 ** Y})
    _, res = _run(tmp_path, table, text, **{"lambda": 0.3})
    m = res.tables["phylo_models"].set_index("model")
    pf = fit_phylo(10 ** X, 10 ** Y, tree, names)      # lambda by ML (internal consistency)
    assert_allclose(m.loc["lambda", "estimate"], pf.lam, atol=1e-5)
    assert_allclose(m.loc["independent", "lr_statistic"],
                    2 * (pf.loglik - m.loc["independent", "loglik"]), atol=1e-6)
    row = res.fits[(res.fits["scope"] == "phylo") & (res.fits["method"] == "ols")].iloc[0]
    assert row["lambda"] == 0.3 and row["lambda_estimate"] == "fixed"
