"""Permutation tests of slope = b0 for every line method.

Under H0 two derived variables are uncorrelated (Warton, Wright,
Falster & Westoby 2006, *Biol. Rev.* 81:259): for OLS the residual
``U = Y - b0 X`` and ``V = X``; for SMA ``U = Y - b0 X`` and
``V = Y + b0 X``; for MA ``U = Y - b0 X`` and ``V = X + b0 Y``; for the
Deming line the MA pair after dividing Y by sqrt(lambda).  The scheme
permutes ``U`` against ``V`` (which breaks any association between
them while keeping both margins) and compares the absolute correlation
with the observed one.  This is exact when U and V are independent
under H0 (e.g. bivariate normal data, where uncorrelated means
independent) and approximate otherwise.  p = (1 + #{|r*| >= |r|}) /
(1 + n_perm) (Phipson & Smyth 2010, *Stat. Appl. Genet. Mol. Biol.*
9:39).
For the robust lines the same pairs are permuted but the statistic is
Kendall's S of U against V (a rank correlation, insensitive to outlying
values like the lines themselves): Theil-Sen and Siegel use the OLS pair
(for Theil-Sen this is the permutation version of Sen's 1968 test behind
its interval), robust SMA the SMA pair, robust MA the MA pair.

Input checks, the random generator, chunking and the progress bar are those
of :mod:`scaling.stats.resampling`; the Deming rescaling is
:func:`scaling.stats.deming.deming_factor`.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

from ..errors import ConfigError, DegenerateDataWarning
from .deming import deming_factor
from .resampling import RANK_PAIRS, _CELLS_PER_CHUNK, _check_xy, _chunk, _progress, make_rng
from .schema import MOMENT_METHODS, check_count, check_lam

__all__ = ["PermutationTest", "permutation_slope_test"]


@dataclass(frozen=True, slots=True, kw_only=True)
class PermutationTest:
    """Permutation test of slope = ``exponent``.

    Attributes
    ----------
    method : str
    exponent : float
    statistic : float
        Observed correlation of the two derived variables (see module notes);
        for the robust lines Kendall's tau-a, S / (n (n - 1) / 2).
    p_value : float
        Two-sided, (1 + exceedances) / (1 + n_perm).
    n_perm : int
    lam : float
        Error-variance ratio (Deming line only; 1 otherwise).
    scheme : str
        Plain description of what was permuted.
    """

    method: str
    exponent: float
    statistic: float
    p_value: float
    n_perm: int
    lam: float
    scheme: str

    def to_frame(self):
        import pandas as pd
        return pd.DataFrame([{
            "method": self.method, "exponent": self.exponent,
            "statistic": self.statistic, "p_value": self.p_value,
            "n_perm": self.n_perm, "scheme": self.scheme,
        }])



_SCHEMES = {
    "ols": "permute Y - b0 X against X",
    "sma": "permute Y - b0 X against Y + b0 X",
    "ma": "permute Y - b0 X against X + b0 Y",
    "deming": "permute Y' - b0' X against X + b0' Y' with Y' = Y/sqrt(lam), b0' = b0/sqrt(lam)",
}
for _name, _pair in RANK_PAIRS.items():
    _SCHEMES[_name] = _SCHEMES[_pair] + " (Kendall's S)"


def permutation_slope_test(log_x, log_y, exponent: float, *, method: str = "sma",
                           n_perm: int = 9999, lam: float = 1.0, seed=None,
                           chunk_size: int | None = None,
                           quiet: bool = True) -> PermutationTest:
    """Permutation p-value of the test slope = ``exponent``.

    Parameters
    ----------
    log_x, log_y : array_like, shape (n,)
        Data on the log scale.
    exponent : float
        Hypothesised slope b0.
    method : {"ols", "sma", "ma", "deming", "theil_sen", "siegel", "sma_robust", "ma_robust"}
        The robust lines use Kendall's S of their pair (module docstring).
    n_perm : int
    lam : float
        Error-variance ratio for the Deming line.
    seed : int, numpy.random.Generator or None
    chunk_size : int, optional
    quiet : bool

    Returns
    -------
    PermutationTest

    Notes
    -----
    The derived variables and the permutation scheme are in the module
    docstring (Warton et al. 2006 for the pairs; Phipson & Smyth 2010 for
    the p-value).  A permutation leaves the sums and sums of squares of U
    and V unchanged, so only the cross-product has to be recomputed:
    ``U[perm] @ V`` for a whole chunk of permutations at once.
    """
    X, Y = _check_xy(log_x, log_y)
    if (isinstance(exponent, bool) or not isinstance(exponent, (int, float, np.floating))
            or not math.isfinite(exponent)):
        raise ConfigError(f"exponent must be a finite number, not {exponent!r}")
    if method not in MOMENT_METHODS and method not in RANK_PAIRS:
        raise ConfigError(f"method must be one of {', '.join(MOMENT_METHODS + tuple(RANK_PAIRS))}"
                          f", not {method!r}")
    n_perm = check_count(n_perm, "n_perm")
    lam = check_lam(lam)
    rng = make_rng(seed)
    b0 = float(exponent)
    pair = RANK_PAIRS.get(method, method)
    if method == "deming":
        k = deming_factor(lam)
        Yd, bd = Y / k, b0 / k
        U, V = Yd - bd * X, X + bd * Yd
    elif pair == "ols":
        U, V = Y - b0 * X, X
    elif pair == "sma":
        U, V = Y - b0 * X, Y + b0 * X
    else:
        U, V = Y - b0 * X, X + b0 * Y
    # Sign and branch: the pairs above are uncorrelated at b0 and also at -b0
    # (SMA) or at the perpendicular -1/b0 (MA, Deming).  A b0 of the other
    # sign than the association of X and Y (SMA) or on the minor-axis side
    # (its direction spreads less than its perpendicular: var U > var V; MA)
    # is also tested by a second pair -- X against Y (is the sign of the
    # association certain?) or U + V against U - V (do the two axes differ?,
    # the Pitman-Morgan pair: Pitman 1939, Biometrika 31:9-12; Morgan 1939,
    # Biometrika 31:13-19; citations from memory) -- on the same permutations; p is the smaller
    # of the two, as for LineFit.test_slope.
    extra = None
    Uc, Vc = U - U.mean(), V - V.mean()
    if pair == "sma" and b0 * float((X - X.mean()) @ (Y - Y.mean())) < 0:
        extra = (Y, X, "; b0 of the other sign than the association: also Y against X, "
                       "p the smaller")
    elif pair in ("ma", "deming") and float(Uc @ Uc) > float(Vc @ Vc):
        extra = (U + V, U - V, "; b0 on the minor-axis side: also U + V against U - V, "
                              "p the smaller")
    pairs = [(U, V)] + ([extra[:2]] if extra else [])
    scheme = _SCHEMES[method] + (extra[2] if extra else "")
    lam_out = lam if method == "deming" else 1.0
    if method in RANK_PAIRS:
        stat, p = _kendall_permutation(pairs, n_perm=n_perm, rng=rng,
                                       chunk_size=chunk_size, quiet=quiet)
    else:
        stat, p = _pearson_permutation(pairs, n_perm=n_perm, rng=rng,
                                       chunk_size=chunk_size, quiet=quiet)
    if not math.isfinite(stat):
        warnings.warn("permutation_slope_test: a derived variable does not vary; "
                      "the p-value is not defined", DegenerateDataWarning, stacklevel=2)
    return PermutationTest(method=method, exponent=b0, statistic=stat, p_value=p,
                           n_perm=n_perm, lam=lam_out, scheme=scheme)


def _pearson_permutation(pairs, *, n_perm, rng, chunk_size, quiet) -> tuple:
    """Observed r of the first pair and the smallest permutation p over the pairs.

    Every pair is evaluated on the same permutations; each p is
    (1 + #{|r*| >= |r|}) / (1 + n_perm).
    """
    cent = []
    for U, V in pairs:
        U, V = U - U.mean(), V - V.mean()
        scale = math.sqrt(float(U @ U) * float(V @ V))
        if scale == 0:
            return math.nan, math.nan
        r_obs = float(U @ V) / scale
        # Guard against ties from rounding: exceedance if |r*| >= |r| (1 - 1e-12).
        cent.append((U, V, scale, r_obs, abs(r_obs) * (1 - 1e-12)))
    n = cent[0][0].size
    chunk = _chunk(chunk_size, n, n_perm)
    exceed = [0] * len(cent)
    done = 0
    bar = _progress(n_perm, quiet, "permutations")
    while done < n_perm:
        size = min(chunk, n_perm - done)
        perm = rng.permuted(np.broadcast_to(np.arange(n), (size, n)), axis=1)
        for k, (U, V, scale, _, threshold) in enumerate(cent):
            r = (U[perm] @ V) / scale
            exceed[k] += int(np.count_nonzero(np.abs(r) >= threshold))
        done += size
        if bar is not None:
            bar.update(size)
    if bar is not None:
        bar.close()
    return cent[0][3], min((1 + e) / (1 + n_perm) for e in exceed)


def _kendall_permutation(pairs, *, n_perm, rng, chunk_size, quiet) -> tuple:
    """Kendall's tau-a of the first pair and the smallest permutation p over the pairs."""
    n = pairs[0][0].size
    i, j = np.triu_indices(n, k=1)
    n_pairs = i.size
    prepared = []
    for U, V in pairs:
        sv = np.sign(V[j] - V[i])
        if not np.any(sv) or not np.any(U != U[0]):
            return math.nan, math.nan
        s_obs = float(np.sign(U[j] - U[i]) @ sv)
        # S is an integer: |S*| >= |S| exactly
        prepared.append((U, sv, s_obs, abs(s_obs) - 0.5))
    if chunk_size is None:
        chunk = max(1, min(n_perm, (8 * _CELLS_PER_CHUNK) // max(n_pairs, 1)))
    else:
        chunk = _chunk(chunk_size, n, n_perm)
    exceed = [0] * len(prepared)
    done = 0
    bar = _progress(n_perm, quiet, "permutations")
    while done < n_perm:
        size = min(chunk, n_perm - done)
        perm = rng.permuted(np.broadcast_to(np.arange(n), (size, n)), axis=1)
        for k, (U, sv, _, threshold) in enumerate(prepared):
            up = U[perm]
            s_perm = np.sign(up[:, j] - up[:, i]) @ sv
            exceed[k] += int(np.count_nonzero(np.abs(s_perm) > threshold))
        done += size
        if bar is not None:
            bar.update(size)
    if bar is not None:
        bar.close()
    return prepared[0][2] / n_pairs, min((1 + e) / (1 + n_perm) for e in exceed)
