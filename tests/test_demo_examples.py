"""The four worked examples: their seeded data scripts and draft configs.

Expected values are the truths stated by the seeded scripts under
``demo_data/`` (invented data, simulations with a known truth); each check
asks that an interval of the fit contains the stated truth.  The configs run
with today's keys (planned keys are commented out in them).
"""
from __future__ import annotations

import importlib.util
import math
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from pandas.testing import assert_frame_equal

import scaling
from scaling.errors import ExtrapolationWarning
from scaling.stats.several_predictors import fit_multi

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_data"
CONFIGS = ROOT / "configs"


def _script(name: str):
    spec = importlib.util.spec_from_file_location(name, DEMO / f"{name}.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _run(name: str):
    return scaling.run_config(CONFIGS / f"{name}.yaml", write=False, quiet=True)


class TestDataScripts:
    @pytest.mark.parametrize("script,files", [
        ("make_fisheries", ["fish_length_weight.csv"]),
        ("make_forestry", ["forest_trees.csv", "forest_plot.csv"]),
        ("make_palaeo", ["bone_mass.csv", "fossils.csv"]),
        ("make_physiology", ["metabolic_rate.csv"]),
    ])
    def test_shipped_csv_files_are_what_the_seeded_script_writes(self, script, files):
        made = _script(script).make()
        frames = made if isinstance(made, tuple) else (made,)
        frames = [f for f in frames if isinstance(f, pd.DataFrame)]
        for frame, name in zip(frames, files):
            shipped = pd.read_csv(DEMO / name)
            assert_frame_equal(frame.reset_index(drop=True), shipped, check_dtype=False,
                               rtol=1e-12)

    def test_species_tree_is_ultrametric_and_names_every_species(self):
        # the tree written by make_physiology.py: every tip at the root age (80 Myr)
        table, newick = _script("make_physiology").make()
        assert (DEMO / "species_tree.nwk").read_text(encoding="utf-8").strip() == newick
        depths = _tip_depths(newick)
        assert set(depths) == set(table.species)
        assert max(abs(d - 80.0) for d in depths.values()) < 1e-3  # branch lengths to 4 dp


def _tip_depths(newick: str) -> dict:
    """Root-to-tip path lengths of a Newick string with branch lengths (a small parser)."""
    text = newick.strip().rstrip(";")
    depths: dict = {}
    pos = 0

    def length() -> float:
        nonlocal pos
        j = pos
        while j < len(text) and text[j] not in ",()":
            j += 1
        label, pos = text[pos:j], j
        return float(label.split(":")[1]) if ":" in label else 0.0

    def node(depth: float) -> None:
        nonlocal pos
        if text[pos] == "(":
            pos += 1
            spans = []
            # parse children first with depth 0, then shift by this node's length
            while True:
                before = dict(depths)
                node(0.0)
                spans.append({k: v for k, v in depths.items() if k not in before})
                if text[pos] == ",":
                    pos += 1
                    continue
                pos += 1   # ")"
                break
            own = length()
            for span in spans:
                for k in span:
                    depths[k] += own + depth
        else:
            j = pos
            while text[j] not in ":,()":
                j += 1
            name = text[pos:j]
            pos = j
            depths[name] = length() + depth

    node(0.0)
    return depths


class TestFisheriesExample:
    def test_each_stock_recovers_its_true_exponent(self):
        truth = _script("make_fisheries").STOCKS
        fits = _run("fisheries").fits
        ols = fits[(fits.scope == "group") & (fits.method == "ols")]
        assert len(ols) == 4
        for row in ols.itertuples():
            b = truth[row.group][0]  # stated truth (make_fisheries.py)
            assert row.slope_low < b < row.slope_high, (row.group, row.slope_low, row.slope_high)

    def test_stocks_differ_in_slope_because_estuary_is_allometric(self):
        tests = _run("fisheries").group_tests
        p = tests[(tests.method == "ols") & (tests.test == "slopes_equal")].p_value.iloc[0]
        assert p < 0.001  # truth: Estuary b = 3.2, the others 3 (make_fisheries.py)


class TestForestryExample:
    def test_diameter_only_fit_recovers_the_marginal_exponent(self):
        # truth: b = 2 + 1 x 0.55 with diameter alone (make_forestry.py's height curve)
        import yaml
        raw = yaml.safe_load((CONFIGS / "forestry.yaml").read_text(encoding="utf-8"))
        raw["data"].update(x="diameter_cm", units={"x": "cm", "y": "kg"})
        raw["model"] = {"methods": ["ols"]}
        raw["exponents"] = {"diameter_only": 2.55}
        raw["prediction"] = {}
        cfg = scaling.io.config.config_from_dict(raw, base_dir=CONFIGS)
        fit = scaling.run_config(cfg, write=False, quiet=True).fits.iloc[0]
        assert fit.slope_low < 2.55 < fit.slope_high

    def test_two_predictor_fit_and_plot_total_recover_the_truth(self):
        mod = _script("make_forestry")
        trees = pd.read_csv(DEMO / "forest_trees.csv")
        plot = pd.read_csv(DEMO / "forest_plot.csv")
        fit = fit_multi(trees[["diameter_cm", "height_m"]], trees.biomass_kg)
        # truth: exponents 2 and 1, log10 a = log10 0.025 (make_forestry.py)
        assert fit.slope_low[0] < 2 < fit.slope_high[0]
        assert fit.slope_low[1] < 1 < fit.slope_high[1]
        assert fit.intercept_ci.low < math.log10(0.025) < fit.intercept_ci.high
        with pytest.warns(ExtrapolationWarning):
            total = fit.predict_total(plot[["diameter_cm", "height_m"]])
        expected = mod.expected_plot_total(plot)   # 23,531 kg, stated in the script
        assert total.low < expected < total.high
        assert total.n_extrapolated == 1           # the 78 cm tree, outside 6-70 cm


class TestPalaeoExample:
    def test_forward_fit_and_fossil_prediction_recover_the_truth(self):
        mod = _script("make_palaeo")
        run = _run("palaeo_forward")
        fit = run.fits.iloc[0]
        assert fit.slope_low < mod.B < fit.slope_high              # truth 2.70
        assert fit.intercept_low < mod.LOG_A < fit.intercept_high  # truth -3.40
        pred = run.predictions
        f1 = pred[pred.x == 118].iloc[0]
        assert f1.y_low < mod.true_mass(118.0) < f1.y_high        # 156 kg on the true line
        assert pred[pred.x == 410].extrapolated.iloc[0]           # F2 beyond 320 mm

    def test_inverse_prediction_brackets_the_true_mass(self):
        mod = _script("make_palaeo")
        inv = _run("palaeo").tables["inverse_predictions"]
        for row in inv[inv.y == 118].itertuples():
            assert row.x_low < mod.true_mass(118.0) < row.x_high, row.method


class TestPhysiologyExample:
    def test_exponent_is_three_quarters_not_two_thirds(self):
        tests = _run("physiology").slope_tests
        pooled = tests[(tests.scope == "pooled") & (tests.method == "ols")]
        p = dict(zip(pooled.hypothesis, pooled.p_value))
        assert p["three_quarters"] > 0.05 and p["two_thirds"] < 0.001  # truth b = 0.75
