"""The words and marks of a run's predictions: an inverse run leads with its predicting line
and marks each given y; groups whose slopes differ predict from their own lines; numbers
near a round bound keep their digits; cautions follow the config's facts."""
from __future__ import annotations

import re
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
from numpy.testing import assert_allclose

from scaling.render.figure_natural import plot_natural
from scaling.render.answer import headline_of
from scaling.render.prediction_words import answer_primary, inverse_run, mass_from_measurement
from scaling.render.wording import (count_words, dose_scaling_applies, interval_numbers,
                                    number_text, unit_text, units_share_ancestry)
from scaling.run.pipeline import run_config

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def palaeo():
    return run_config(ROOT / "configs" / "palaeo.yaml", write=False, quiet=True)


@pytest.fixture(scope="module")
def fisheries():
    return run_config(ROOT / "configs" / "fisheries.yaml", write=False, quiet=True)


class TestInverseAnswer:
    def test_answer_exponent_is_the_predicting_lines(self, palaeo):
        head = headline_of(palaeo)
        inverse = palaeo.tables["inverse_predictions"]
        (method,) = set(inverse["method"])           # the line that read x off (OLS)
        assert head.primary == method == "ols"
        fit = palaeo.fits.query("scope == 'pooled' and method == @method").iloc[0]
        # internal consistency: the Answer's exponent is that line's, to its printed digits
        assert head.sentences[0].startswith(f"The OLS exponent is {fit['slope']:.3f} ")
        sma = palaeo.fits.query("scope == 'pooled' and method == 'sma'").iloc[0]
        assert f"{sma['slope']:.3f}" not in head.sentences[0]

    def test_answer_says_medians_without_correction_and_the_interval_type(self, palaeo):
        last = headline_of(palaeo).sentences[-1]
        assert last.startswith("Inverse prediction of x (the pooled OLS line solved for x;")
        assert "medians of x for the given y" in last
        assert "no back-transformation correction" in last
        assert "95% prediction interval" in last
        rows = palaeo.tables["inverse_predictions"]
        for r in rows.itertuples(index=False):   # internal consistency with the table
            assert (f"at y = {number_text(r.y)} mm, {number_text(r.x)} kg (95% prediction "
                    f"interval {interval_numbers(r.x_low, r.x_high)})") in last

    def test_answer_primary_only_changes_inverse_runs(self, palaeo, fisheries):
        assert inverse_run(palaeo.config) and answer_primary(palaeo.config) == "ols"
        assert not inverse_run(fisheries.config)
        assert answer_primary(fisheries.config) == fisheries.config.model.primary

    def test_inverse_figure_marks_each_given_y_once(self, palaeo):
        from matplotlib.figure import Figure
        ax = Figure().add_subplot()
        plot_natural(palaeo, ax=ax)
        rows = palaeo.tables["inverse_predictions"]
        marks = [ln for ln in ax.lines if ln.get_gid() in ("inverse", "inverse-extrapolated")]
        assert len(marks) == len(palaeo.config.prediction.y) == len(rows)
        for r in rows.itertuples(index=False):
            (mark,) = [m for m in marks if np.isclose(m.get_ydata()[0], r.y, rtol=1e-12)]
            # internal consistency: the mark sits at the x read off the line
            assert_allclose(mark.get_xdata()[0], r.x, rtol=1e-12)
            assert mark.get_gid() == ("inverse-extrapolated" if r.extrapolated else "inverse")
            face = mark.get_markerfacecolor()
            assert (face == "white") == bool(r.extrapolated)   # extrapolated: open
        title = ax.get_title(loc="left")
        assert title.startswith("Each given y read off the OLS line (medians of x)")
        assert "smearing" not in title

    def test_inverse_figure_bars_span_the_x_interval(self, palaeo):
        from matplotlib.collections import LineCollection
        from matplotlib.figure import Figure
        ax = Figure().add_subplot()
        plot_natural(palaeo, ax=ax)
        rows = palaeo.tables["inverse_predictions"]
        spans = []
        for c in ax.collections:
            if isinstance(c, LineCollection):
                for seg in c.get_segments():
                    if len(seg) == 2 and seg[0][1] == seg[1][1]:   # horizontal bars
                        spans.append((seg[0][1], seg[0][0], seg[1][0]))
        for r in rows.itertuples(index=False):
            hit = [s for s in spans if np.isclose(s[0], r.y, rtol=1e-12)]
            assert hit, r.y
            assert_allclose(hit[0][1:], [r.x_low, r.x_high], rtol=1e-12)


class TestGroupsThatDiffer:
    def test_first_screen_predicts_from_each_groups_own_line(self, fisheries):
        head = headline_of(fisheries)
        assert head.line == "groups"
        said = [s for s in head.sentences if s.startswith("Predicted y")]
        assert len(said) == 1
        sentence = said[0]
        assert "each stock's own OLS line" in sentence and "pooled OLS" not in sentence
        table = fisheries.tables["predictions"]
        for g, sub in table[table["scope"] == "group"].groupby("group"):
            values = ", ".join(number_text(v) + (" (extrapolated)" if e else "")
                               for v, e in zip(sub["y"], sub["extrapolated"]))
            # internal consistency: each stock's values are its own rows of predictions.csv
            assert f"{g} {values}" in sentence
        pooled = table[table["scope"] == "pooled"]
        assert not any(number_text(v) in sentence for v in pooled["y"])

    def test_prediction_sentence_said_once_on_the_first_screen(self, tmp_path, capsys):
        from scaling.cli import main
        assert main(["run", str(ROOT / "configs" / "fisheries.yaml"),
                     "--out", str(tmp_path / "out")]) == 0
        out = capsys.readouterr().out
        assert out.count("Predicted y") == 1

    def test_scaling_figure_draws_each_groups_own_line(self, fisheries):
        from scaling.render.figure_scaling import plot_scaling
        ax = plot_scaling(fisheries)
        legend = [t.get_text() for lg in ax.figure.legends for t in lg.get_texts()]
        assert "SMA, each stock's own line" in legend
        assert not any("common slope" in t for t in legend)
        groups = sorted(fisheries.data.points["group"].astype(str).unique())
        for i, g in enumerate(groups):
            fit = fisheries.line_fits[("group", g, "sma")]
            drawn = [ln for ln in ax.lines if len(ln.get_xdata()) == 40]
            # internal consistency: some drawn line has the group's own slope on log axes
            slopes = [np.polyfit(np.log10(ln.get_xdata()), np.log10(ln.get_ydata()), 1)[0]
                      for ln in drawn]
            assert np.min(np.abs(np.array(slopes) - fit.slope)) < 1e-9, g


class TestNumberText:
    # common practice, no source: a rounded bound must not read as an exact round value
    def test_a_bound_just_under_one_keeps_its_digits(self):
        assert number_text(0.99997) == "0.99997"
        assert interval_numbers(0.99997, 1.5294) == "0.99997 to 1.529"

    def test_ordinary_values_keep_four_significant_digits(self):
        assert [number_text(v) for v in (1.2441, 98.0512, 4497.3, 0.07799)] == [
            "1.244", "98.05", "4497", "0.07799"]

    def test_exact_round_values_stay_short(self):
        assert [number_text(v) for v in (1.0, 20.0, 1.5)] == ["1", "20", "1.5"]

    def test_round_looking_thousands_gain_a_digit(self):
        assert number_text(2000.4) == "2000.4"
        assert number_text(float("inf")) == "unbounded"

    def test_units_and_counts(self):
        assert unit_text("(cm**2)") == "cm²" and unit_text("(kg*m**-1)") == "kg·m⁻¹"
        assert count_words(1, "row") == "1 row" and count_words(3, "row") == "3 rows"
        assert count_words(1, "species") == "1 species"


def _cfg(*, group=None, unit=None, tree=None, y="y", y_unit="", label="", x="x"):
    return SimpleNamespace(
        data=SimpleNamespace(group=group, average_within=unit, tree=tree, x=x, y=y,
                             units={"y": y_unit}),
        figures=SimpleNamespace(labels={"y": label} if label else {}))


class TestCautionRules:
    @pytest.mark.parametrize("group, unit, tree, shares", [
        ("stock", None, None, False), ("site", "individual", None, False),
        ("clade", None, None, True), (None, "species", None, True),
        ("Order", None, None, True), ("taxon_id", None, None, True),
        ("stock", None, "tree.nwk", True), (None, None, None, False)])
    def test_ancestry_only_where_units_can_share_it(self, group, unit, tree, shares):
        assert units_share_ancestry(_cfg(group=group, unit=unit, tree=tree)) is shares

    @pytest.mark.parametrize("kw, dose", [
        (dict(group="clade", unit="species", y="resting_rate", y_unit="mW"), True),
        (dict(group="clade", y="bmr_mW", y_unit="mW"), True),
        (dict(unit="species", y="oxygen", y_unit="ml/min"), True),
        (dict(group="stock", y="weight_g", y_unit="g"), False),
        (dict(group="stock", y="metabolic_rate", y_unit="mW"), False),   # one species
        (dict(unit="species", y="femur_mm", y_unit="mm"), False)])
    def test_dose_only_for_rates_across_species(self, kw, dose):
        assert dose_scaling_applies(_cfg(**kw)) is dose

    def test_mass_from_a_measurement(self):
        assert mass_from_measurement(_cfg(y="body_mass_kg", x="femur_circumference_mm"))
        assert not mass_from_measurement(_cfg(y="femur_mm", x="body_mass_kg"))
        assert not mass_from_measurement(_cfg(y="biomass_kg", x="diameter_cm"))
        assert not mass_from_measurement(_cfg(y="weight_g", x="length_cm"))


def test_summary_lists_each_rule_by_its_words():
    # the rules name their facts: a change of words here is a change of rule
    from scaling.render import wording
    assert {"species", "genus", "family", "order", "clade", "taxon"} <= wording.TAXON_WORDS
    assert "stock" not in wording.TAXON_WORDS and "rate" in wording.RATE_WORDS
    assert re.search(r"tree", wording.units_share_ancestry.__doc__)
