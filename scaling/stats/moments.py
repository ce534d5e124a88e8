"""Sufficient statistics of a bivariate sample, per group, in one vectorised pass.

Every line estimator in :mod:`scaling.stats.lines` reads these moments rather than
raw rows: ``n``, the means of X and Y, and the centred sums of squares and
products ``sxx``, ``syy``, ``sxy``.  A set of moments is a small frozen
dataclass of equally shaped arrays, so one call serves one group, ten
thousand groups, or a ``(B, groups)`` stack of bootstrap resamples.

Centred sums are accumulated with a two-pass algorithm (means first, then
sums of centred products), which keeps full precision when the logs have a
large offset.

Optionally (``higher=True``) the moments also carry three higher centred
sums, sum (X - mean_x)^3, sum (X - mean_x)^4 and sum (X - mean_x)^2 (Y - mean_y),
which the quadratic-term curvature test reads
(:mod:`scaling.stats.moment_curvature`).  They merge exactly by the same
shift-to-the-merged-mean update as the second-order sums (the Chan, Golub &
LeVeque 1983 pairwise update carried to third and fourth order; see
:func:`merge_moments`), so chunked and partitioned reads give the one-pass
values up to rounding.

:func:`sort_by_group` puts each group's rows together with one stable sort, and
:func:`group_extremes` reads every group's smallest and largest value from
that order in one pass (no scan of the rows per group).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Moments", "moments", "group_moments", "weighted_moments", "merge_moments",
           "combine_moments", "HIGHER_KEYS", "sort_by_group", "group_extremes"]


@dataclass(frozen=True, slots=True, kw_only=True)
class Moments:
    """Sample size, means and centred sums of one or many bivariate samples.

    All attributes are numpy arrays of one shape (a 0-d array for one sample).

    Attributes
    ----------
    n : ndarray
        Number of observations (or total weight).
    mean_x, mean_y : ndarray
        Means of X and Y.
    sxx, syy, sxy : ndarray
        Centred sums: sum (X - mean_x)^2, sum (Y - mean_y)^2,
        sum (X - mean_x)(Y - mean_y).
    sxxx, sxxxx, sxxy : ndarray or None
        Higher centred sums: sum (X - mean_x)^3, sum (X - mean_x)^4,
        sum (X - mean_x)^2 (Y - mean_y); None unless asked for
        (``group_moments(..., higher=True)``).
    """

    n: np.ndarray
    mean_x: np.ndarray
    mean_y: np.ndarray
    sxx: np.ndarray
    syy: np.ndarray
    sxy: np.ndarray
    sxxx: np.ndarray | None = None
    sxxxx: np.ndarray | None = None
    sxxy: np.ndarray | None = None

    @property
    def has_higher(self) -> bool:
        """True when the higher sums (``sxxx``, ``sxxxx``, ``sxxy``) are carried."""
        return self.sxxx is not None and self.sxxxx is not None and self.sxxy is not None

    @property
    def r(self) -> np.ndarray:
        """Pearson correlation; NaN where either variance is zero.

        Clipped to [-1, 1]: for collinear data rounding can give
        |Sxy| / sqrt(Sxx Syy) = 1 + 2e-16, which would make 1 - r^2 < 0.
        """
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.clip(self.sxy / np.sqrt(self.sxx * self.syy), -1.0, 1.0)

    def __getitem__(self, index) -> "Moments":
        # written out (no dict of the higher sums): a run packages one per fit
        sxxx, sxxxx, sxxy = self.sxxx, self.sxxxx, self.sxxy
        if sxxx is None or sxxxx is None or sxxy is None:
            return Moments(n=self.n[index], mean_x=self.mean_x[index],
                           mean_y=self.mean_y[index], sxx=self.sxx[index],
                           syy=self.syy[index], sxy=self.sxy[index])
        return Moments(n=self.n[index], mean_x=self.mean_x[index], mean_y=self.mean_y[index],
                       sxx=self.sxx[index], syy=self.syy[index], sxy=self.sxy[index],
                       sxxx=sxxx[index], sxxxx=sxxxx[index], sxxy=sxxy[index])

    def __reduce_ex__(self, protocol):
        # One Moments per fit travels to the figure process: numpy scalars are pickled
        # nine to one bytes object (a numpy scalar alone pickles slowly, through numpy's
        # reconstruction); anything else as a dataclass is.
        values = [getattr(self, k) for k in _PACKED]
        if values[6] is None and values[7] is None and values[8] is None:
            values = values[:6]
        if all(type(v) is np.float64 for v in values):
            return (_unpacked_moments, (np.array(values, dtype=np.float64).tobytes(),))
        return object.__reduce_ex__(self, protocol)

    def swapped(self) -> "Moments":
        """The moments with the roles of X and Y exchanged."""
        return Moments(
            n=self.n, mean_x=self.mean_y, mean_y=self.mean_x,
            sxx=self.syy, syy=self.sxx, sxy=self.sxy,
        )

    def to_dict(self) -> dict:
        """Plain floats (or lists of floats) for JSON."""
        return {
            name: np.asarray(getattr(self, name)).tolist()
            for name in ("n", "mean_x", "mean_y", "sxx", "syy", "sxy")
        }

    @classmethod
    def from_dict(cls, d: dict) -> "Moments":
        return cls(**{k: np.asarray(d[k], dtype=float)
                      for k in ("n", "mean_x", "mean_y", "sxx", "syy", "sxy")})


#: Names of the higher centred sums (None unless asked for).
HIGHER_KEYS = ("sxxx", "sxxxx", "sxxy")

_PACKED = ("n", "mean_x", "mean_y", "sxx", "syy", "sxy", *HIGHER_KEYS)


def _unpacked_moments(packed: bytes) -> Moments:
    """The Moments of one sample packed by ``Moments.__reduce_ex__`` (numpy scalars)."""
    values = np.frombuffer(packed, dtype=np.float64)
    if values.size == 6:
        n, mean_x, mean_y, sxx, syy, sxy = values     # iterating gives numpy scalars
        return Moments(n=n, mean_x=mean_x, mean_y=mean_y, sxx=sxx, syy=syy, sxy=sxy)
    n, mean_x, mean_y, sxx, syy, sxy, sxxx, sxxxx, sxxy = values
    return Moments(n=n, mean_x=mean_x, mean_y=mean_y, sxx=sxx, syy=syy, sxy=sxy,
                   sxxx=sxxx, sxxxx=sxxxx, sxxy=sxxy)


def moments(x, y, *, higher: bool = False) -> Moments:
    """Moments of one sample (0-d arrays).

    Parameters
    ----------
    x, y : array_like
        Equal-length 1-d arrays (already on the log scale).
    higher : bool
        Also the higher sums ``sxxx``, ``sxxxx``, ``sxxy``.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if x.ndim == 1 and x.shape == y.shape and x.size > _CHUNK:
        return _chunked_moments(x, y, None, 1, higher)[0]
    labels = np.zeros(x.shape, dtype=np.intp)
    return group_moments(x, y, labels, n_groups=1, higher=higher)[0]


def group_moments(x, y, labels, *, n_groups: int | None = None,
                  higher: bool = False) -> Moments:
    """Moments of every group at once.

    Parameters
    ----------
    x, y : array_like
        1-d arrays of equal length.
    labels : array_like of int
        Group index 0..G-1 of each row.
    n_groups : int, optional
        G; defaults to ``labels.max() + 1``.
    higher : bool
        Also the higher sums ``sxxx``, ``sxxxx``, ``sxxy`` (centred on each
        group's mean, like the others).

    Returns
    -------
    Moments
        Arrays of shape (G,).  Empty groups have n = 0 and NaN means.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    labels = np.asarray(labels, dtype=np.intp)
    if n_groups is None:
        n_groups = int(labels.max()) + 1 if labels.size else 0
    if (x.ndim == 1 and x.shape == y.shape == labels.shape and x.size > _CHUNK
            and int(labels.min()) >= 0 and int(labels.max()) < n_groups):
        return _chunked_moments(x, y, labels, n_groups, higher)
    n = np.bincount(labels, minlength=n_groups).astype(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        mx = np.bincount(labels, weights=x, minlength=n_groups) / n
        my = np.bincount(labels, weights=y, minlength=n_groups) / n
    dx = x - mx[labels]
    dy = y - my[labels]
    dxx = dx * dx
    extra = {}
    if higher:
        extra = {"sxxx": np.bincount(labels, weights=dxx * dx, minlength=n_groups),
                 "sxxxx": np.bincount(labels, weights=dxx * dxx, minlength=n_groups),
                 "sxxy": np.bincount(labels, weights=dxx * dy, minlength=n_groups)}
    return Moments(
        n=n,
        mean_x=mx,
        mean_y=my,
        sxx=np.bincount(labels, weights=dxx, minlength=n_groups),
        syy=np.bincount(labels, weights=dy * dy, minlength=n_groups),
        sxy=np.bincount(labels, weights=dx * dy, minlength=n_groups),
        **extra,
    )


#: Rows :func:`group_moments` handles at a time beyond this many: its temporary arrays
#: stay a few megabytes whatever the number of rows (the sums do not depend on it).
_CHUNK = 1 << 16


def _continued(acc: np.ndarray, labels: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """``acc`` plus ``weights`` summed into their groups, added one at a time in row
    order after ``acc[g]``: the sums one ``np.bincount`` over all the rows gives (it
    adds each weight to its group's sum in turn), carried on from a previous chunk."""
    if _ADD_AT_IN_ORDER:
        # np.add.at adds each weight in row order too, without copying seeds and rows
        out = np.array(acc, dtype=float)
        np.add.at(out, labels, weights)
        return out
    g = acc.size
    return np.bincount(np.concatenate([_SEEDS[:g] if g <= _SEEDS.size else np.arange(g),
                                       labels]),
                       weights=np.concatenate([acc, weights]), minlength=g)


_SEEDS = np.arange(1 << 14)

#: From numpy 1.25 on ``np.add.at`` is as fast as ``np.bincount`` (before, ten times
#: slower); both add in row order, so either gives the same bits.
_ADD_AT_IN_ORDER = np.lib.NumpyVersion(np.__version__) >= "1.25.0"


def _chunked_moments(x: np.ndarray, y: np.ndarray, labels: np.ndarray | None,
                     n_groups: int, higher: bool) -> Moments:
    """:func:`group_moments` a chunk of :data:`_CHUNK` rows at a time, with the same
    two passes and the same order of additions, so the same bits; ``labels`` None: one
    group."""
    size = x.size
    spans = [(lo, min(lo + _CHUNK, size)) for lo in range(0, size, _CHUNK)]
    ones = np.zeros(_CHUNK, dtype=np.intp) if labels is None else None

    def codes(lo: int, hi: int) -> np.ndarray:
        return ones[:hi - lo] if labels is None else labels[lo:hi]

    count = np.zeros(n_groups, dtype=np.int64)
    sum_x, sum_y = np.zeros(n_groups), np.zeros(n_groups)
    for lo, hi in spans:
        c = codes(lo, hi)
        count += np.bincount(c, minlength=n_groups)
        sum_x = _continued(sum_x, c, x[lo:hi])
        sum_y = _continued(sum_y, c, y[lo:hi])
    n = count.astype(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        mx = sum_x / n
        my = sum_y / n
    sums = {k: np.zeros(n_groups) for k in ("sxx", "syy", "sxy", *(HIGHER_KEYS if higher
                                                                    else ()))}
    for lo, hi in spans:
        c = codes(lo, hi)
        dx = x[lo:hi] - mx[c]
        dy = y[lo:hi] - my[c]
        dxx = dx * dx
        terms = {"sxx": dxx, "syy": dy * dy, "sxy": dx * dy}
        if higher:
            terms.update(sxxx=dxx * dx, sxxxx=dxx * dxx, sxxy=dxx * dy)
        for k, w in terms.items():
            sums[k] = _continued(sums[k], c, w)
    return Moments(n=n, mean_x=mx, mean_y=my, **sums)


def sort_by_group(labels, *, n_groups: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    """One stable sort that puts each group's rows together.

    Parameters
    ----------
    labels : array_like of int
        Group index 0..G-1 of each row.
    n_groups : int, optional
        G; defaults to ``labels.max() + 1``.

    Returns
    -------
    order : ndarray of intp
        Row positions, group by group; within a group in their original order.
    bounds : ndarray of intp, shape (G + 1,)
        The rows of group g are ``order[bounds[g]:bounds[g + 1]]`` (empty
        when the group has none).
    """
    labels = np.asarray(labels, dtype=np.intp)
    if n_groups is None:
        n_groups = int(labels.max()) + 1 if labels.size else 0
    # numpy sorts 16-bit keys by radix sort (linear); a stable sort gives the
    # same order whatever the key type.
    keys = labels.astype(np.int16) if n_groups <= np.iinfo(np.int16).max else labels
    order = np.argsort(keys, kind="stable")
    bounds = np.zeros(n_groups + 1, dtype=np.intp)
    np.cumsum(np.bincount(labels, minlength=n_groups), out=bounds[1:])
    return order, bounds


def group_extremes(values, order, bounds) -> tuple[np.ndarray, np.ndarray]:
    """Smallest and largest value of each group, in one pass over the sorted rows.

    Parameters
    ----------
    values : array_like, shape (rows,)
    order, bounds : ndarray
        From :func:`sort_by_group`.

    Returns
    -------
    low, high : ndarray, shape (G,)
        ``min`` and ``max`` of each group's values (NaN if one is NaN);
        ``+inf`` and ``-inf`` for an empty group.
    """
    v = np.asarray(values, dtype=float)[order]
    n_groups = bounds.size - 1
    low, high = np.full(n_groups, np.inf), np.full(n_groups, -np.inf)
    filled = bounds[1:] > bounds[:-1]
    # Empty groups have no segment: each start of a filled group runs to the next one.
    starts = bounds[:-1][filled]
    if starts.size:
        low[filled] = np.minimum.reduceat(v, starts)
        high[filled] = np.maximum.reduceat(v, starts)
    return low, high


def weighted_moments(x, y, weights) -> Moments:
    """Moments under row weights, vectorised over leading axes of ``weights``.

    With integer weights (counts of how often each row is drawn) this gives
    the moments of a resample without building it, so ``B`` bootstrap
    resamples are one ``(B, n) @ (n, 6)`` matrix product.

    Parameters
    ----------
    x, y : array_like, shape (n,)
    weights : array_like, shape (..., n)

    Returns
    -------
    Moments
        Arrays of shape ``weights.shape[:-1]``.

    Notes
    -----
    With X and Y first centred on their unweighted means (cx, cy), one
    product of the weights with the columns (1, cx, cy, cx^2, cy^2, cx cy)
    gives the total weight W and the weighted sums; then mean = sum / W and
    Sxx = sum w cx^2 - W mean_cx^2 (and likewise Syy, Sxy), the textbook
    identity for centred sums, exact up to rounding because the data are
    already centred.  Integer weights are converted to float64, in which
    the total weight and every count are exact.  A float64 weight array is
    used as it is (no copy), which matters for large bootstrap chunks.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    w = np.asarray(weights, dtype=float)
    design, xbar, ybar = weight_design(x, y)
    return moments_from_sums(w @ design, xbar, ybar)   # one pass over the weights


def weight_design(x: np.ndarray, y: np.ndarray):
    """Columns (1, cx, cy, cx^2, cy^2, cx cy) of :func:`weighted_moments` and the means.

    Split out so that a caller with many weight matrices for the same rows
    (the bootstrap chunks of :mod:`scaling.stats.resampling`) builds them once.
    """
    # Centre on the unweighted means first so the weighted sums stay precise.
    xbar, ybar = x.mean(), y.mean()
    cx, cy = x - xbar, y - ybar
    design = np.empty((x.size, 6))
    design[:, 0] = 1.0
    design[:, 1] = cx
    design[:, 2] = cy
    design[:, 3] = cx * cx
    design[:, 4] = cy * cy
    design[:, 5] = cx * cy
    return design, xbar, ybar


def moments_from_sums(sums: np.ndarray, xbar, ybar) -> Moments:
    """Moments from ``weights @ design`` (last axis: the six sums of :func:`weight_design`)."""
    n, sx, sy, sxx, syy, sxy = np.moveaxis(sums, -1, 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        mx = sx / n
        my = sy / n
        sxx = sxx - n * mx * mx
        syy = syy - n * my * my
        sxy = sxy - n * mx * my
    return Moments(n=n, mean_x=mx + xbar, mean_y=my + ybar,
                   sxx=sxx, syy=syy, sxy=sxy)


# --------------------------------------------------------------------------
# exact merging of moments (added for chunked and partitioned data)


def merge_moments(a: Moments, b: Moments) -> Moments:
    """Moments of the union of two samples, from their moments alone (element-wise).

    Parameters
    ----------
    a, b : Moments
        Arrays of one shape (or broadcastable); element i of each describes
        a part of the same group.  Parts with n = 0 (and NaN means) are
        allowed and leave the other part unchanged.

    Returns
    -------
    Moments

    Notes
    -----
    Pairwise update of Chan, Golub & LeVeque (1983, *Am. Stat.* 37:242,
    eq. 2.1), extended to the cross product: with n = n_a + n_b,
    d_x = mean_x,b - mean_x,a (and d_y likewise),

        mean_x = mean_x,a + d_x n_b / n
        Sxx = Sxx,a + Sxx,b + d_x^2 n_a n_b / n
        Sxy = Sxy,a + Sxy,b + d_x d_y n_a n_b / n

    which is exact in exact arithmetic and needs no raw rows.

    The higher sums (when both parts carry them) merge by shifting each
    part's centred sums to the merged mean: with u = X - mean_x,part,
    v = Y - mean_y,part and the part's offsets al = mean_x,part - mean_x,
    be = mean_y,part - mean_y (al = -d_x n_b / n for a, d_x n_a / n for b),
    and sum u = sum v = 0,

        sum (u + al)^3       = Sxxx + 3 al Sxx + n al^3
        sum (u + al)^4       = Sxxxx + 4 al Sxxx + 6 al^2 Sxx + n al^4
        sum (u + al)^2 (v + be) = Sxxy + be Sxx + 2 al Sxy + n al^2 be

    summed over the two parts.  This is the Chan, Golub & LeVeque (1983)
    update carried to third and fourth order (the same algebra as Pebay
    2008, Sandia report SAND2008-6212, eq. 3.1 for centred moments of any
    order); every term is formed from differences of means, so nothing
    large cancels when the logs sit far from zero (data near 1e+-12).
    """
    na, nb = np.asarray(a.n, dtype=float), np.asarray(b.n, dtype=float)
    n = na + nb
    only_a = nb == 0
    only_b = na == 0
    with np.errstate(divide="ignore", invalid="ignore"):
        dx = b.mean_x - a.mean_x
        dy = b.mean_y - a.mean_y
        fb = nb / n
        h = na * fb                      # n_a n_b / n
        out = {
            "mean_x": a.mean_x + dx * fb,
            "mean_y": a.mean_y + dy * fb,
            "sxx": a.sxx + b.sxx + dx * dx * h,
            "syy": a.syy + b.syy + dy * dy * h,
            "sxy": a.sxy + b.sxy + dx * dy * h,
        }
        if a.has_higher and b.has_higher:
            ax, ay = -dx * fb, -dy * fb          # offsets of part a from the merged mean
            fa = na / n
            bx, by = dx * fa, dy * fa            # offsets of part b
            out.update({k: _shifted(a, ax, ay, na)[k] + _shifted(b, bx, by, nb)[k]
                        for k in HIGHER_KEYS})
    for key in out:
        out[key] = np.where(only_a, getattr(a, key), np.where(only_b, getattr(b, key), out[key]))
    return Moments(n=n, **out)


def _shifted(p: Moments, al, be, n) -> dict:
    """A part's higher sums about a point shifted by (al, be) from its own means."""
    al2 = al * al
    return {"sxxx": p.sxxx + 3 * al * p.sxx + n * al2 * al,
            "sxxxx": p.sxxxx + 4 * al * p.sxxx + 6 * al2 * p.sxx + n * al2 * al2,
            "sxxy": p.sxxy + be * p.sxx + 2 * al * p.sxy + n * al2 * be}


def combine_moments(parts: Moments, codes, *, n_groups: int | None = None) -> Moments:
    """Merge many parts into their groups in one vectorised pass.

    Parameters
    ----------
    parts : Moments
        1-d arrays, one element per part (e.g. one per chunk x group).
    codes : array_like of int
        Group index 0..G-1 of each part; several parts may share a group.
    n_groups : int, optional
        G; defaults to ``codes.max() + 1``.

    Returns
    -------
    Moments
        Arrays of shape (G,); groups with no part have n = 0 and NaN means.

    Notes
    -----
    The k-part form of the Chan, Golub & LeVeque (1983) update: with
    n = sum n_i and mean = sum n_i mean_i / n,

        Sxy = sum Sxy_i + sum n_i (mean_x,i - mean_x)(mean_y,i - mean_y)

    (the between-part term of the usual decomposition of a sum of
    products).  Applying :func:`merge_moments` pairwise gives the same
    value; the between-part term is formed from differences to the merged
    mean, so no large sums cancel.
    """
    codes = np.asarray(codes, dtype=np.intp)
    if n_groups is None:
        n_groups = int(codes.max()) + 1 if codes.size else 0
    pn = np.asarray(parts.n, dtype=float)
    live = pn > 0
    codes, pn = codes[live], pn[live]
    p = parts[live]
    n = np.bincount(codes, weights=pn, minlength=n_groups)
    with np.errstate(divide="ignore", invalid="ignore"):
        mx = np.bincount(codes, weights=pn * p.mean_x, minlength=n_groups) / n
        my = np.bincount(codes, weights=pn * p.mean_y, minlength=n_groups) / n
    dx = p.mean_x - mx[codes]
    dy = p.mean_y - my[codes]
    extra = {}
    if p.has_higher:   # each part shifted to its group's merged mean (see merge_moments)
        extra = {k: np.bincount(codes, weights=v, minlength=n_groups)
                 for k, v in _shifted(p, dx, dy, pn).items()}
    return Moments(
        n=n, mean_x=mx, mean_y=my,
        sxx=np.bincount(codes, weights=p.sxx + pn * dx * dx, minlength=n_groups),
        syy=np.bincount(codes, weights=p.syy + pn * dy * dy, minlength=n_groups),
        sxy=np.bincount(codes, weights=p.sxy + pn * dx * dy, minlength=n_groups),
        **extra,
    )
