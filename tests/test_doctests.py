"""Run the >>> examples in the docstrings of the modules that carry them."""
from __future__ import annotations

import doctest

import pytest

import scaling.api
import scaling.stats.group_comparisons
import scaling.stats.line_results
import scaling.stats.schema
import scaling.stats.several_predictors
import scaling.io.starter
import scaling.stats.units

MODULES = [scaling.api, scaling.stats.group_comparisons, scaling.stats.line_results,
           scaling.stats.several_predictors, scaling.io.starter, scaling.stats.schema,
           scaling.stats.units]


@pytest.mark.parametrize("module", MODULES, ids=lambda m: m.__name__)
def test_docstring_examples_run(module):
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    assert result.attempted > 0, f"{module.__name__} has no examples"
    assert result.failed == 0, f"{result.failed} example(s) failed in {module.__name__}"
