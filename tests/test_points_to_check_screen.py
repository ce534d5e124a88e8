"""The moments path's points_to_check screens every fit's factors and intervals in arrays.

The reference is the plain loop the screen replaces: fit_checks on every
estimable fit (internal consistency; fit_checks itself is tested in
test_influence.py against the rule's limits).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from scaling.render.findings import point_check_reason
from scaling.run.second_pass import _points_to_check
from scaling.stats.influence import SMEARING_RATIO_LIMIT, fit_checks
from scaling.stats.schema import POINTS_TO_CHECK_COLUMNS


def _loop(fits, all_fits, preds):
    estimates: dict = {}
    for p in preds.itertuples(index=False):
        estimates.setdefault((p.scope, p.group, p.method), []).append(
            (f"at x = {p.x:g} ", p.y, p.y_low, p.y_high))
    records = []
    for f in fits.itertuples(index=False):
        key = (f.scope, f.group, f.method)
        if key not in all_fits or not np.isfinite(f.smearing_factor):
            continue
        found = fit_checks(smearing_factor=f.smearing_factor,
                           parametric_factor=f.parametric_factor,
                           estimates=estimates.get(key, ()))
        records += [{"scope": key[0], "group": key[1], "method": key[2], **c.to_record(),
                     "reason": point_check_reason(c)} for c in found]
    table = pd.DataFrame(records, columns=POINTS_TO_CHECK_COLUMNS)
    table["row"] = table["row"].astype("Int64")
    return table


def test_screen_finds_what_a_loop_over_every_fit_finds():
    rng = np.random.default_rng(3)
    g = 60
    keys = [("pooled", "", m) for m in ("ols", "sma")] + [
        ("group", f"g{i}", m) for i in range(g) for m in ("ols", "sma")]
    n = len(keys)
    parametric = rng.uniform(1.0, 1.1, n)
    smearing = parametric * rng.uniform(0.9, 1.1, n)
    L = SMEARING_RATIO_LIMIT
    smearing[[3, 17, 40]] = parametric[[3, 17, 40]] * np.array([L * 1.01, 1 / L / 1.01, L])
    smearing[5] = np.nan                    # not estimable: skipped
    parametric[8] = 0.0                     # no ratio
    parametric[9] = np.inf
    fits = pd.DataFrame(keys, columns=["scope", "group", "method"])
    fits["n"] = 50
    fits["smearing_factor"] = smearing
    fits["parametric_factor"] = parametric
    all_fits = {k: object() for i, k in enumerate(keys) if i != 11}
    smearing[11] = parametric[11] * 2       # odd, but not an estimable fit: skipped
    fits["smearing_factor"] = smearing
    rows = []
    for i, k in enumerate(keys):
        for x in (10.0, 100.0):
            y = rng.uniform(1, 2)
            rows.append((*k, x, y, y * 0.9, y * 1.1))
    preds = pd.DataFrame(rows, columns=["scope", "group", "method", "x", "y", "y_low",
                                        "y_high"])
    preds.loc[[4, 31, 33, 90], "y"] = preds.loc[[4, 31, 33, 90], "y_high"] * 1.5
    preds.loc[[50], "y_low"] = np.nan       # no interval: not checked
    preds.loc[[50], "y"] = 1e9
    got = _points_to_check(fits, all_fits, preds, None, ("none", "", "ols"), None, 0.05, {})
    want = _loop(fits, all_fits, preds)
    assert len(want) >= 6                   # the planted checks are found
    pd.testing.assert_frame_equal(got, want)
