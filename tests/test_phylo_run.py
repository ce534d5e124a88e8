"""Tests of the phylogenetic stage of a run (scaling/phylo_stage.py via pipeline.analyse)."""
from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from scaling.cli import main
from scaling.io.config import config_from_dict, load_config
from scaling.errors import ConfigError, DataError
from scaling.stats.phylogeny import fit_phylo, read_newick
from scaling.run.pipeline import analyse
from scaling.render.answer import headline_of
from scaling.stats.newick import parse_newick
from scaling.stats.phylogeny import tree_covariance
from helpers_trees import clade_tree

ROOT = Path(__file__).resolve().parents[1]
PHYSIOLOGY = ROOT / "configs" / "physiology.yaml"


def _analyse(cfg):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return analyse(cfg)


def _write(tmp_path, species, x, y, newick, *, extra_data=None, phylogeny=None,
           methods=("ols", "sma", "ma")):
    """A small invented table and tree in tmp_path; returns the raw config mapping."""
    table = pd.DataFrame({"sp": species, "mass": x, "rate": y})
    table.to_csv(tmp_path / "d.csv", index=False)
    (tmp_path / "t.nwk").write_text(newick, encoding="utf-8")
    raw = {"data": {"file": "d.csv", "x": "mass", "y": "rate", "species": "sp",
                    "tree": "t.nwk", **(extra_data or {})},
           "model": {"methods": list(methods)}, "diagnostics": {"enabled": False},
           "exponents": {"three_quarters": "3/4"}, "prediction": {"x": [10.0]}}
    if phylogeny is not None:
        raw["model"]["phylogeny"] = phylogeny
    return raw


def _invented(n, seed=5):
    """Invented species with a log-linear relation (simulation data, not a reference)."""
    rng = np.random.default_rng(seed)
    X = rng.normal(1.5, 0.6, n)
    Y = 0.2 + 0.7 * X + rng.normal(0.0, 0.1, n)
    names = [f"sp_{i:02d}" for i in range(n)]
    return names, 10 ** X, 10 ** Y


def _star(names, length=1.0):
    return "(" + ",".join(f"{s}:{length}" for s in names) + ");"


def _caterpillar(names):
    """A non-star, ultrametric tree (tip i splits off at depth i)."""
    n = len(names)
    text = f"{names[-1]}:1.0,{names[-2]}:1.0"
    for i in range(n - 3, -1, -1):
        depth = n - 1 - i          # height of the inner clade
        text = f"({text}):1.0,{names[i]}:{depth + 0.0}"
        text = text
    return f"({text});"


class TestPhylogeneticRows:
    def test_rows_equal_fit_phylo_called_directly(self):
        cfg = load_config(PHYSIOLOGY)
        res = _analyse(cfg)
        pts = res.data.points      # the species means the run fitted
        tree = read_newick(cfg.data.tree)
        phylo = res.fits[res.fits["scope"] == "phylo"].set_index("method")
        assert list(phylo.index) == ["ols", "sma"]
        for method in ("ols", "sma"):
            direct = fit_phylo(pts["x"], pts["y"], tree, pts["unit"],
                               method=method, confidence=0.95, log_base=10)
            row = phylo.loc[method]
            # internal consistency: the run's row is fit_phylo on the raw rows
            assert_allclose([row["slope"], row["slope_low"], row["slope_high"],
                             row["intercept"], row["lambda"], row["lambda_low"],
                             row["lambda_high"], row["loglik"], row["aic"]],
                            [direct.slope, direct.slope_ci.low, direct.slope_ci.high,
                             direct.intercept, direct.lam, direct.lam_ci.low,
                             direct.lam_ci.high, direct.loglik, direct.aic], rtol=1e-12)
            assert row["lambda_estimate"] == "ml" and row["n"] == direct.n
            tests = res.slope_tests[(res.slope_tests["scope"] == "phylo")
                                    & (res.slope_tests["method"] == method)]
            for t in tests.itertuples():
                ref = direct.test_slope(t.exponent)
                # internal consistency: slope_tests.csv holds PhyloFit.test_slope
                assert_allclose([t.statistic, t.p_value], [ref.statistic, ref.p_value],
                                rtol=1e-12)
        # ordinary rows carry blank lambda columns
        assert res.fits.loc[~res.fits["scope"].str.startswith("phylo"), "lambda"].isna().all()

    def test_star_tree_reproduces_ordinary_fits(self, tmp_path):
        names, x, y = _invented(15)
        res = _analyse(config_from_dict(_write(tmp_path, names, x, y, _star(names)),
                                        base_dir=tmp_path))
        f = res.fits.set_index(["scope", "method"])
        cols = ["slope", "slope_low", "slope_high", "intercept", "intercept_low",
                "intercept_high", "r2"]
        for method in ("ols", "sma", "ma"):
            # exact law: a star tree with equal tip heights has V = c I, so GLS is the
            # ordinary fit (Grafen 1989, Phil. Trans. R. Soc. B 326:119)
            assert_allclose(f.loc[("phylo", method), cols].to_numpy(float),
                            f.loc[("pooled", method), cols].to_numpy(float), rtol=1e-9)

    def test_phylo_lines_reach_the_figure_and_pgls_predicts(self, tmp_path):
        names, x, y = _invented(12)
        res = _analyse(config_from_dict(_write(tmp_path, names, x, y, _caterpillar(names)),
                                        base_dir=tmp_path))
        # the PGLS line predicts for a typical new species (SMA and MA lines do not)
        assert set(res.predictions["scope"]) == {"pooled", "phylo"}
        assert set(res.predictions.loc[res.predictions["scope"] == "phylo", "method"]) == {"ols"}
        from scaling.render.figure_scaling import plot_scaling
        def labels(ax):
            return [h.get_label() for h in ax.figure.legends[0].legend_handles] \
                if ax.figure.legends else [t.get_text() for t in ax.get_legend().get_texts()]
        # by default the plot draws the primary method (SMA here) and its phylogenetic twin
        assert "phylogenetic SMA" in labels(plot_scaling(res))
        both = labels(plot_scaling(res, methods=["ols", "sma"]))
        assert "phylogenetic SMA" in both and "phylogenetic OLS" in both

    def test_fixed_lambda_is_recorded(self, tmp_path):
        names, x, y = _invented(10)
        raw = _write(tmp_path, names, x, y, _caterpillar(names), phylogeny={"lambda": 0.5},
                     methods=("ols",))
        res = _analyse(config_from_dict(raw, base_dir=tmp_path))
        row = res.fits[res.fits["scope"] == "phylo"].iloc[0]
        assert row["lambda"] == 0.5 and row["lambda_estimate"] == "fixed"
        assert np.isnan(row["lambda_low"])


class TestMismatchedNames:
    def test_species_without_tip_and_tips_without_data_are_listed(self, tmp_path):
        names, x, y = _invented(10)
        tree_names = names[:8] + ["sp_lonely", "sp_other"]
        res = _analyse(config_from_dict(_write(tmp_path, names, x, y, _star(tree_names)),
                                        base_dir=tmp_path))
        reasons = " | ".join(res.dropped["reason"])
        assert "'sp_08' has no tip" in reasons and "'sp_09' has no tip" in reasons
        assert "'sp_lonely' has no data" in reasons and "pruned" in reasons
        assert int(res.fits.loc[res.fits["scope"] == "phylo", "n"].iloc[0]) == 8
        assert int(res.fits.loc[res.fits["scope"] == "pooled", "n"].iloc[0]) == 10
        assert any("no tip in t.nwk" in w for w in res.warnings)

    def test_drops_are_written_to_dropped_rows_csv(self, tmp_path):
        names, x, y = _invented(10)
        raw = _write(tmp_path, names, x, y, _star(names[:8] + ["sp_lonely"]),
                     methods=("sma",))
        import yaml
        (tmp_path / "c.yaml").write_text(yaml.safe_dump(raw), encoding="utf-8")
        assert main(["run", str(tmp_path / "c.yaml"), "--out", str(tmp_path / "out"),
                     "--quiet"]) == 0
        dropped = pd.read_csv(tmp_path / "out" / "dropped_rows.csv", dtype=str,
                              keep_default_na=False)
        assert list(dropped["row"]) == ["9", "10", ""]   # data rows of sp_08, sp_09; a tip
        assert dropped["reason"].str.contains("pruned").sum() == 1


class TestLetterCase:
    """Species that match a tip except for letter case are named, never matched silently."""

    def test_case_differences_are_named_in_reasons_and_a_note(self, tmp_path):
        names, x, y = _invented(10)
        data_names = names[:8] + ["SP_08", "Sp 09"]    # tips are sp_08, sp_09
        res = _analyse(config_from_dict(_write(tmp_path, data_names, x, y, _star(names)),
                                        base_dir=tmp_path))
        reasons = list(res.dropped["reason"])
        assert ("sp 'SP_08' has no tip in tree t.nwk (tip 'sp_08' differs only in letter "
                "case): left out") in reasons[0]
        assert any("tip 'sp_09' has no data in column sp (sp 'Sp 09' differs only in letter "
                   "case): pruned" in r for r in reasons)
        assert ("2 species match a tip except for letter case (e.g. 'SP_08' vs 'sp_08'); "
                "names must match exactly, so correct the spelling in the data or in the "
                "tree.") in res.warnings
        # not matched: the phylogenetic fit uses the 8 exact names only
        assert int(res.fits.loc[res.fits["scope"] == "phylo", "n"].iloc[0]) == 8

    def test_too_few_exact_matches_say_that_case_differs(self, tmp_path):
        names, x, y = _invented(6)
        data_names = [n.upper() for n in names[:4]] + names[4:]
        raw = _write(tmp_path, data_names, x, y, _star(names))
        with pytest.raises(DataError, match=r"only 2 species of column sp match a tip of tree "
                                            r"t\.nwk; at least 3 are needed; 4 species match a "
                                            r"tip except for letter case \(e\.g\. 'SP_00' vs "
                                            r"'sp_00'\)"):
            _analyse(config_from_dict(raw, base_dir=tmp_path))

    def test_exact_names_give_no_case_note(self, tmp_path):
        names, x, y = _invented(10)
        res = _analyse(config_from_dict(_write(tmp_path, names, x, y, _star(names)),
                                        base_dir=tmp_path))
        assert not any("letter case" in w for w in res.warnings)


class TestBadTrees:
    @pytest.mark.parametrize("newick, what", [
        ("((a:1,b:-2):1,c:3);", "negative"),
        ("((a:1,b:2):1,c:3;", "character"),
    ])
    def test_bad_tree_exits_2_with_one_line_naming_the_file(self, tmp_path, capsys,
                                                            newick, what):
        names, x, y = _invented(3)
        raw = _write(tmp_path, ["a", "b", "c"], x, y, newick)
        import yaml
        (tmp_path / "c.yaml").write_text(yaml.safe_dump(raw), encoding="utf-8")
        code = main(["run", str(tmp_path / "c.yaml"), "--out", str(tmp_path / "out")])
        err = capsys.readouterr().err.strip().splitlines()
        assert code == 2 and len(err) == 1
        assert err[0].startswith("error: tree ") and "t.nwk" in err[0] and "character" in err[0]
        assert what in err[0]


class TestPhyloConfig:
    def test_species_column_missing_is_a_clear_error(self, tmp_path):
        names, x, y = _invented(5)
        raw = _write(tmp_path, names, x, y, _star(names))
        raw["data"]["species"] = "taxon"
        with pytest.raises(DataError, match=r"column 'taxon' \(data.species\) not found"):
            _analyse(config_from_dict(raw, base_dir=tmp_path))

    def test_tree_needs_species(self, tmp_path):
        raw = _write(tmp_path, ["a"], [1.0], [1.0], "(a:1);")
        del raw["data"]["species"]
        with pytest.raises(ConfigError, match=r"data.species: is required with data.tree"):
            config_from_dict(raw, base_dir=tmp_path)

    def test_species_needs_tree(self, tmp_path):
        raw = _write(tmp_path, ["a"], [1.0], [1.0], "(a:1);")
        del raw["data"]["tree"]
        with pytest.raises(ConfigError, match=r"data.species: is used only with data.tree"):
            config_from_dict(raw, base_dir=tmp_path)

    def test_average_within_must_be_the_species(self, tmp_path):
        raw = _write(tmp_path, ["a"], [1.0], [1.0], "(a:1);",
                     extra_data={"average_within": "site"})
        with pytest.raises(ConfigError, match=r"data.average_within: must be the species"):
            config_from_dict(raw, base_dir=tmp_path)

    def test_species_cannot_be_x(self, tmp_path):
        raw = _write(tmp_path, ["a"], [1.0], [1.0], "(a:1);", extra_data={"species": "mass"})
        with pytest.raises(ConfigError, match=r"data.species: 'mass' is also the x or y"):
            config_from_dict(raw, base_dir=tmp_path)

    @pytest.mark.parametrize("value, message", [
        ({"lambda": "mle"}, r"model.phylogeny.lambda: 'mle' is not ml, reml"),
        ({"lambda": 1.5}, r"model.phylogeny.lambda: Pagel's lambda must lie between 0 and 1"),
        ({"lamda": "ml"}, r"model.phylogeny.lamda: unknown key"),
        ("ml", r"model.phylogeny: expected a mapping"),
    ])
    def test_bad_phylogeny_settings(self, tmp_path, value, message):
        raw = _write(tmp_path, ["a"], [1.0], [1.0], "(a:1);", phylogeny=value)
        with pytest.raises(ConfigError, match=message):
            config_from_dict(raw, base_dir=tmp_path)

    def test_reml_is_passed_through(self, tmp_path):
        names, x, y = _invented(10)
        raw = _write(tmp_path, names, x, y, _caterpillar(names), phylogeny={"lambda": "reml"},
                     methods=("ols",))
        res = _analyse(config_from_dict(raw, base_dir=tmp_path))
        assert res.fits.loc[res.fits["scope"] == "phylo", "lambda_estimate"].iloc[0] == "reml"


@pytest.fixture(scope="module")
def physiology():
    """The physiology example analysed once for this module (read only)."""
    return _analyse(load_config(PHYSIOLOGY))


class TestPhysiologyExample:
    def test_recovers_the_stated_exponent(self, physiology):
        res = physiology
        phylo = res.fits[res.fits["scope"] == "phylo"]
        assert len(phylo) == 2
        for row in phylo.itertuples():
            # simulation truth: demo_data/make_physiology.py draws b = 0.75 in every clade
            assert row.slope_low <= 0.75 <= row.slope_high
        text = " ".join(res.messages)
        assert "Phylogenetic SMA over tree species_tree.nwk" in text
        assert "Not yet phylogenetic" in text
        assert "Phylogenetic group comparisons (SMA" in text

    def test_exponents_figure_leads_with_the_phylogenetic_answer(self, physiology):
        from scaling.render.figure_exponents import plot_exponents
        ax = plot_exponents(physiology, methods=["sma"])
        first = ax.get_yticklabels()[0]
        assert first.get_text().replace("\n", " ") == "Phylogenetic common slope within clades"
        assert first.get_fontweight() == "bold"
        row = physiology.fits.query("scope == 'phylo_common' and method == 'sma'").iloc[0]
        bars = [tuple(ln.get_xdata()) for ln in ax.lines
                if len(ln.get_xdata()) == 2 and abs(ln.get_ydata()[0]) < 0.5]
        # internal consistency: the first row's bar is the interval of fits.csv
        assert bars and np.allclose(bars[0], (row["slope_low"], row["slope_high"]))

    def test_group_tests_have_phylogenetic_rows_beside_the_ordinary_ones(self, physiology):
        res = physiology
        gt = res.tables["group_tests"]
        assert list(gt.columns[:1]) == ["scope"]
        assert {"lambda", "lambda_low", "lambda_high"} <= set(gt.columns)
        for scope in ("ordinary", "phylo"):
            part = gt[gt["scope"] == scope]
            assert sorted(part["method"].unique()) == ["ols", "sma"]
            assert set(part["test"]) == {"slopes_equal", "intercepts_equal", "shift_along_axis"}
        assert gt.loc[gt["scope"] == "ordinary", "lambda"].isna().all()
        phylo = gt[gt["scope"] == "phylo"]
        assert phylo["lambda"].between(0, 1).all()
        assert (phylo["lambda_low"] <= phylo["lambda"]).all()
        assert (phylo.loc[phylo["method"] == "sma", "p_method"]
                == "parametric_bootstrap(999)").all()
        pw = res.tables["pairwise_tests"]
        assert set(pw["scope"]) == {"ordinary", "phylo"}
        # phylo_common rows: fits.csv and their slope tests
        common = res.fits[res.fits["scope"] == "phylo_common"]
        assert sorted(common["method"]) == ["ols", "sma"]
        for row in common.itertuples():
            # simulation truth: demo_data/make_physiology.py draws b = 0.75 in every clade
            assert row.slope_low <= 0.75 <= row.slope_high
            lam = phylo.loc[phylo["method"] == row.method, "lambda"].iloc[0]
            assert row.lambda_estimate == "ml"
            # internal consistency: the row's lambda is the one its group tests used
            assert_allclose(res.fits.loc[common.index[common["method"] == row.method][0],
                                         "lambda"], lam, rtol=0)
        tests = res.slope_tests[res.slope_tests["scope"] == "phylo_common"]
        assert len(tests) == 2 * len(load_config(PHYSIOLOGY).exponents)

    def test_answer_leads_with_the_phylogenetic_result(self, physiology):
        from scaling.render.answer import headline_of
        res = physiology
        head = headline_of(res)
        first = head.sentences[0]
        assert first.startswith("Accounting for shared ancestry (Pagel's λ = ")
        assert "common within-clade SMA exponent" in first
        common = res.fits[(res.fits["scope"] == "phylo_common") & (res.fits["method"] == "sma")]
        assert f"{common['slope'].iloc[0]:.3f}" in first
        assert "3/4" in head.sentences[1] and "2/3" in head.sentences[1]
        assert "ancestry" in head.sentences[2]
        assert len(head.sentences) <= 4

    def test_ancestry_caution_only_without_a_tree(self, physiology):
        from dataclasses import replace
        from scaling.render.report import build_report, render_html
        cfg = load_config(PHYSIOLOGY)
        res = physiology
        caution = "too narrow without a phylogenetic correction"
        assert caution not in render_html(res, build_report(res))
        no_tree = replace(cfg, data=replace(cfg.data, tree=None, species=None))
        res2 = _analyse(no_tree)
        assert caution in render_html(res2, build_report(res2))
        assert "scope" not in res2.tables["group_tests"].columns


class TestCheckReportsTheTree:
    def test_check_says_how_species_matched_tips(self, capsys):
        assert main(["check", str(PHYSIOLOGY)]) == 0
        out = capsys.readouterr().out
        assert "tree OK: species_tree.nwk (48 tips): 48 of 48 species match a tip" in out
        assert "all 4 groups are clades of the tree" in out

    def test_check_lists_unmatched_species_pruned_tips_and_non_clades(self, tmp_path, capsys):
        names, x, y = _invented(9)
        newick = ("((sp_00:1,sp_01:1,sp_02:1):1,(sp_03:1,sp_04:1,sp_05:1):1,"
                  "(sp_06:1,sp_07:1,extra:1):1);")
        raw = _write(tmp_path, names, x, y, newick,
                     extra_data={"group": "g"})
        table = pd.read_csv(tmp_path / "d.csv")
        table["g"] = ["a", "a", "b", "b", "b", "b", "c", "c", "c"]
        table.to_csv(tmp_path / "d.csv", index=False)
        import yaml
        (tmp_path / "c.yaml").write_text(yaml.safe_dump(raw), encoding="utf-8")
        assert main(["check", str(tmp_path / "c.yaml")]) == 0
        out = capsys.readouterr().out
        assert "8 of 9 species match a tip" in out
        assert "1 species have no tip" in out and "sp_08" in out
        assert "1 tips have no data and will be pruned (extra)" in out
        assert "2 of 3 groups are not clades of the tree (a, b)" in out


def _brownian(newick, names, rng, scale):
    """Brownian motion on the tree (simulation), values in ``names`` order."""
    t = parse_newick(newick)
    index = {t.names[k]: i for i, k in enumerate(t.tips)}
    order = [index[s] for s in names]
    v = tree_covariance(t)[np.ix_(order, order)]
    return scale * (np.linalg.cholesky(v) @ rng.normal(size=len(names)))


class TestChecksFollowThePhylogeneticAnswer:
    def test_physiology_checks_are_the_phylogenetic_models(self, physiology):
        res = physiology
        diag = res.tables["diagnostics"]
        mine = diag[diag["scope"] == "phylo_common"]
        assert list(mine["method"].unique()) == ["sma"]          # the Answer's method
        assert list(mine["check"]) == ["normality", "constant_variance", "curvature",
                                       "influence"]
        assert "phylo_common" in set(res.tables["curvature"]["scope"])
        text = " ".join(res.messages)
        assert "Residuals of the phylogenetic common within-clade SMA model" in text
        assert ("Ignoring ancestry (species independent) — Residuals of the common "
                "within-clade SMA model") in text
        # simulation truth (demo_data/make_physiology.py): no curvature, normal errors
        assert not mine.set_index("check").loc["curvature", "flagged"]
        assert "moves this exponent" not in " ".join(headline_of(res).sentences)

    def test_planted_outlier_species_is_named_in_the_answer(self, tmp_path):
        # simulation with a known truth: b = 0.75, Brownian x and residuals on a tree of
        # four clades of 10; the species with the largest x gets y divided by 10^0.5
        rng = np.random.default_rng(3)
        newick, names, labels = clade_tree([10, 10, 10, 10], rng)
        X = 1.5 + _brownian(newick, names, rng, 0.8)
        Y = 0.75 * X + _brownian(newick, names, rng, 0.1)
        k = int(np.argmax(X))
        Y[k] -= 0.5
        raw = _write(tmp_path, names, 10 ** X, 10 ** Y, newick, methods=("ols",),
                     extra_data={"group": "clade"})
        pd.DataFrame({"sp": names, "clade": labels, "mass": 10 ** X,
                      "rate": 10 ** Y}).to_csv(tmp_path / "d.csv", index=False)
        raw["diagnostics"] = {"enabled": True}
        raw["groups"] = {"compare": True}
        res = _analyse(config_from_dict(raw, base_dir=tmp_path))
        answer = " ".join(headline_of(res).sentences)
        assert answer.startswith("Accounting for shared ancestry")
        assert f"({names[k]}, mass" in answer and "moves this exponent" in answer
        pts = res.tables["points_to_check"]
        moving = pts[(pts["scope"] == "phylo_common") & (pts["kind"] == "moves_answer")]
        assert list(moving["label"]) == [names[k]]
        assert any("Influence on the phylogenetic common within-clade OLS model" in m
                   for m in res.messages)

    def test_pooled_phylogenetic_line_is_checked_without_groups(self, tmp_path):
        names, x, y = _invented(20)
        raw = _write(tmp_path, names, x, y, _caterpillar(names), methods=("ols", "sma"))
        raw["diagnostics"] = {"enabled": True}
        res = _analyse(config_from_dict(raw, base_dir=tmp_path))
        diag = res.tables["diagnostics"]
        mine = diag[diag["scope"] == "phylo"]
        assert list(mine["method"].unique()) == ["sma"]
        assert any(m.startswith("Residuals of the phylogenetic SMA line") for m in res.messages)
        assert any(m.startswith("Ignoring ancestry (species independent) — Residuals of the "
                                "pooled SMA line") for m in res.messages)

    def test_answer_names_only_rows_that_move_the_phylogenetic_answer(self, physiology):
        from dataclasses import replace
        res = physiology
        pts = res.tables["points_to_check"]

        def row(scope, label):
            return {"scope": scope, "group": "", "method": "sma", "severity": "strong",
                    "kind": "moves_answer", "row": 7, "label": label, "value": 1.5,
                    "reason": f"Row 7 ({label}) moves this exponent from 0.753 to 0.700: "
                              "check it first."}
        ordinary_only = pd.concat([pts, pd.DataFrame([row("common", "sp_x")])],
                                  ignore_index=True)
        head = headline_of(replace(res, tables={**res.tables,
                                                "points_to_check": ordinary_only}))
        assert "sp_x" not in " ".join(head.sentences)     # the ordinary model's, not the Answer's
        both = pd.concat([ordinary_only, pd.DataFrame([row("phylo_common", "sp_y")])],
                         ignore_index=True)
        head = headline_of(replace(res, tables={**res.tables, "points_to_check": both}))
        assert "Row 7 (sp_y) moves this exponent" in head.sentences[-1]
