"""Standard errors that allow for super-observations whose errors are correlated in space and time.

Neighbouring super-observations share background errors (and, within a pass or a granule,
observation errors), so n of them carry far less than n independent pieces of evidence.  Every
estimate of the audit is a ratio of sums over super-observations, R = sum(a_i) / sum(c_i), or a
least-squares fit; its variance is taken from sums over *blocks* of super-observations, each
block B x B grid cells and one day, treated as independent of the others: the cluster-robust
("sandwich") variance with the small-sample factor G / (G - 1) for G blocks
([CameronMiller2015]):

.. math::
    \\operatorname{var}(R) \\approx \\frac{G}{G - 1}
        \\frac{\\sum_g \\big(\\sum_{i \\in g} (a_i - R\\, c_i)\\big)^2}{\\big(\\sum_i c_i\\big)^2}

(the delta method for a ratio, with the numerator's scatter summed inside each block).  With
B = 1 (each cell its own block) this is the usual standard error of independent values.

Block size: the variance grows with B while the blocks are smaller than the correlation of the
errors, and levels off once they are larger (the blocking method, [FlyvbjergPetersen1989]).  It
is computed for B = 1, 2, 4, ... cells while at least :data:`MIN_BLOCKS` blocks remain, and the
largest is used: conservative, since the maximum of the noisy estimates is kept, and safe for
weak correlations of long range (errors shared by a whole granule), which raise the variance
only a little per doubling but much over many (a rule stopping at the first level step would
miss them).  When it is still growing at the largest block size
(:attr:`BlockedEstimate.levelled` is False) the errors correlate over distances comparable to
the sampled area: the variance is then extrapolated by one more doubling at the growth of the
last one, and the standard error may still be too small; the audit says so.  Degrees of freedom
for intervals are G - 1 of the chosen size (Student's t, [CameronMiller2015]).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: fewest blocks a block size may leave (fewer make the variance itself too uncertain)
MIN_BLOCKS = 20
#: a block size's standard error counts as levelled when the next size raises it by less than
#: this many of its own relative standard errors 1 / sqrt(2 (G - 1)) (chi-square, textbook)
LEVEL_TOLERANCE = 2.0
SECONDS_PER_DAY = 86400.0


@dataclass(frozen=True)
class Blocks:
    """Where each super-observation lies, for grouping into blocks.

    ``i``, ``j``: grid indices (int); ``day``: whole days since any fixed time (int), so that
    blocks never span two days."""

    i: np.ndarray
    j: np.ndarray
    day: np.ndarray

    @classmethod
    def from_table(cls, table) -> Blocks:
        """Blocks of the rows of a super-observation table (columns i, j, time)."""
        i = np.asarray(table["i"], dtype=np.int64)
        j = np.asarray(table["j"], dtype=np.int64)
        time = np.asarray(table["time"], dtype="datetime64[ns]")
        seconds = np.where(np.isnat(time), 0, time.astype(np.int64) // 1_000_000_000)
        return cls(i, j, (seconds // int(SECONDS_PER_DAY)).astype(np.int64))

    def take(self, rows) -> Blocks:
        """The blocks of a subset of rows (boolean mask or indices)."""
        return Blocks(self.i[rows], self.j[rows], self.day[rows])

    def labels(self, cells: int) -> tuple[np.ndarray, int]:
        """Block label of each row for blocks of ``cells`` x ``cells`` grid cells and one day,
        and the number of distinct blocks."""
        if not self.i.size:
            return np.zeros(0, dtype=np.int64), 0
        bi = self.i // cells - (self.i // cells).min()
        bj = self.j // cells - (self.j // cells).min()
        day = self.day - self.day.min()
        key = (day * (int(bj.max()) + 1) + bj) * (int(bi.max()) + 1) + bi  # packed, int64
        _, inverse = np.unique(key, return_inverse=True)
        return inverse.ravel(), int(inverse.max()) + 1


@dataclass(frozen=True)
class BlockedEstimate:
    """An estimate with its block standard error.

    ``value``; ``se`` its standard error; ``blocks`` G of the block size used and ``dof`` = G - 1;
    ``block_cells`` that size (cells); ``levelled``: False when the standard error was still
    growing at the largest block size the data allow; ``n`` the super-observations used."""

    value: float
    se: float
    blocks: int
    dof: int
    block_cells: int
    levelled: bool
    n: int

    @property
    def usable(self) -> bool:
        """A finite value with a positive, finite standard error from enough blocks."""
        return bool(np.isfinite(self.value) and np.isfinite(self.se) and self.se > 0
                    and self.blocks >= MIN_BLOCKS)


NOT_ESTIMATED = BlockedEstimate(np.nan, np.nan, 0, 0, 0, False, 0)


def centred_squares(x) -> np.ndarray:
    """(x - mean x)^2 n / (n - 1): squared deviations whose mean is the sample variance with
    ddof = 1 (same units as x squared)."""
    x = np.asarray(x, dtype=np.float64)
    return (x - x.mean()) ** 2 * (x.size / (x.size - 1.0))


def gaussian_floor(expected_squares, denominator) -> float:
    """sqrt(2 sum e_i^2) / sum c_i: the standard error of sum x_i^2 / sum c_i for independent
    Gaussian x_i with E[x_i^2] = e_i (var(x^2) = 2 E[x^2]^2, textbook); the floor
    :func:`with_floor` applies.  Weighted sums pass the weighted terms."""
    e = np.asarray(expected_squares, dtype=np.float64)
    return float(np.sqrt(2.0 * np.sum(e * e)) / np.sum(denominator))


def with_floor(estimate: BlockedEstimate, floor_se: float) -> BlockedEstimate:
    """The estimate with its standard error raised to at least ``floor_se``.

    The floors used are those of Gaussian errors: a sum of squares of Gaussian values of
    covariance C has variance 2 tr(C^2) = 2 sum_ij C_ij^2 >= 2 sum_i C_ii^2 (Isserlis' theorem,
    textbook), so correlation can only raise it above what independent values of the same
    variances give.  Few blocks can make the block variance small by chance; the floor keeps a
    ratio of large, nearly cancelling sums (innovations dominated by the background) from
    looking precise."""
    if not np.isfinite(floor_se) or not np.isfinite(estimate.se) or estimate.se >= floor_se:
        return estimate
    return BlockedEstimate(estimate.value, float(floor_se), estimate.blocks, estimate.dof,
                           estimate.block_cells, estimate.levelled, estimate.n)


def block_sizes(blocks: Blocks) -> list[int]:
    """Block sizes 1, 2, 4, ... (cells) that leave at least :data:`MIN_BLOCKS` blocks."""
    sizes, cells = [], 1
    span = int(max(np.ptp(blocks.i), np.ptp(blocks.j))) + 1 if blocks.i.size else 0
    while cells <= max(span, 1):
        _, g = blocks.labels(cells)
        if g < MIN_BLOCKS:
            break
        sizes.append(cells)
        cells *= 2
    return sizes


def _largest_over_sizes(variance_at, blocks: Blocks, n: int, value: float) -> BlockedEstimate:
    """Run ``variance_at(labels, G)`` for every block size; keep the largest variance, and
    extrapolate it where it is still growing at the largest size (module docstring)."""
    sizes = block_sizes(blocks)
    if not sizes or not np.isfinite(value):
        return BlockedEstimate(value, np.nan, 0, 0, 0, False, n)
    results = []
    for cells in sizes:
        labels, g = blocks.labels(cells)
        results.append((variance_at(labels, g), g, cells))
    variance, g, cells = max(results, key=lambda r: r[0])
    levelled = False
    if len(results) >= 2:
        (previous, g_previous, _), (last, _, _) = results[-2], results[-1]
        noise = LEVEL_TOLERANCE / np.sqrt(2.0 * max(g_previous - 1, 1))
        levelled = bool(np.sqrt(max(last, 0.0)) <= np.sqrt(max(previous, 0.0)) * (1.0 + noise))
        if not levelled:
            # still growing: continue the last doubling's growth once more (geometric); for
            # weak growth this is the step of a shortfall decaying as 1/B, for strong growth
            # (correlations as long as the blocks) more, as the Monte Carlo tests need
            variance = max(variance, last * max(last, previous) / max(previous, 1e-300))
    return BlockedEstimate(value, float(np.sqrt(max(variance, 0.0))), g, g - 1, cells, levelled, n)


def blocked_ratio(numerator, denominator, blocks: Blocks) -> BlockedEstimate:
    """R = sum(numerator) / sum(denominator) with its block standard error (module docstring).

    Parameters
    ----------
    numerator, denominator : arrays, one term per super-observation (any units; the ratio's
        units are theirs)
    blocks : where each term lies
    """
    a = np.asarray(numerator, dtype=np.float64)
    c = np.asarray(denominator, dtype=np.float64)
    n = a.size
    total = float(c.sum()) if n else 0.0
    if n < 2 or not total > 0:
        return BlockedEstimate(np.nan, np.nan, 0, 0, 0, False, n)
    value = float(a.sum()) / total
    residual = a - value * c

    def variance_at(labels, g):
        sums = np.bincount(labels, weights=residual, minlength=g)
        return g / (g - 1.0) * float(np.sum(sums * sums)) / (total * total)

    return _largest_over_sizes(variance_at, blocks, n, value)


def blocked_least_squares(design, response, blocks: Blocks, weights=None) -> tuple[np.ndarray, np.ndarray, BlockedEstimate]:
    """(Weighted) least squares of ``response`` on the columns of ``design`` with the block
    (cluster-robust) covariance of the coefficients ([CameronMiller2015]):

    .. math:: V = \\frac{G}{G-1} (X^T W X)^{-1} \\Big(\\sum_g X_g^T W_g u_g u_g^T W_g X_g\\Big)
              (X^T W X)^{-1}

    taken at the block size where the variance of the first coefficient is largest.

    Returns the coefficients, their covariance matrix and a :class:`BlockedEstimate` describing
    the blocks (its value and se are those of the first coefficient).
    """
    x = np.asarray(design, dtype=np.float64)
    y = np.asarray(response, dtype=np.float64)
    w = np.ones(len(y)) if weights is None else np.asarray(weights, dtype=np.float64)
    n, p = x.shape
    nan = np.full((p, p), np.nan)
    if n <= p:
        return np.full(p, np.nan), nan, NOT_ESTIMATED
    xtx = x.T @ (x * w[:, None])
    if np.linalg.cond(xtx) > 1e12:
        return np.full(p, np.nan), nan, BlockedEstimate(np.nan, np.nan, 0, 0, 0, False, n)
    inverse = np.linalg.inv(xtx)
    beta = inverse @ (x.T @ (w * y))
    scores = x * (w * (y - x @ beta))[:, None]
    covariances = {}

    def variance_at(labels, g):
        sums = np.stack([np.bincount(labels, weights=scores[:, k], minlength=g) for k in range(p)],
                        axis=1)
        covariance = g / (g - 1.0) * inverse @ (sums.T @ sums) @ inverse
        covariances[g] = covariance
        return float(covariance[0, 0])

    summary = _largest_over_sizes(variance_at, blocks, n, float(beta[0]))
    if summary.blocks == 0:
        return beta, nan, summary
    return beta, covariances[summary.blocks], summary
