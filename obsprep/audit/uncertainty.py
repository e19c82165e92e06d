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

How the uncertainty depends on the value.  An estimate of F^2 built from squares is more
uncertain where F^2 is larger: its sampling variance is, for Gaussian errors, a quadratic
a x^2 + b x + c in the true x = F^2 (:attr:`BlockedEstimate.variance_model`; each estimator
states its own).  The block standard error is measured at the estimate itself, so an estimate
that came out low by chance also gets a standard error that is too small; where estimates are
combined (:mod:`obsprep.audit.verdict`) each standard error is carried to the common value by
that quadratic, :meth:`BlockedEstimate.se_at`, keeping the block measurement's scale (the
variance at the pooled value, as in scoring with the expected information, textbook).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

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
class Influence:
    """How each super-observation moves an estimate: estimate - its expectation is, to first
    order, the sum of ``values`` (the delta method; for a ratio R = sum a / sum c the value of
    row i is (a_i - R c_i) / sum c), with the rows' grid indices ``i``, ``j`` and ``day`` for
    blocks.  Two estimates on overlapping rows are correlated through the block sums of their
    influences (:func:`joint_correlation`)."""

    i: np.ndarray
    j: np.ndarray
    day: np.ndarray
    values: np.ndarray

    def plus(self, other: Influence, scale: float) -> Influence:
        """The influence of this estimate plus ``scale`` times ``other`` (an estimate that
        enters this one linearly, such as a partner's known F^2)."""
        return Influence(np.concatenate([self.i, other.i]), np.concatenate([self.j, other.j]),
                         np.concatenate([self.day, other.day]),
                         np.concatenate([self.values, scale * other.values]))


@dataclass(frozen=True)
class BlockedEstimate:
    """An estimate with its block standard error.

    ``value``; ``se`` its standard error; ``blocks`` G of the block size used and ``dof`` = G - 1;
    ``block_cells`` that size (cells); ``levelled``: False when the standard error was still
    growing at the largest block size the data allow; ``n`` the super-observations used;
    ``variance_model`` (a, b, c): the sampling variance is proportional to a x^2 + b x + c at a
    true value x (empty: taken as constant); ``se_fixed``: a part of ``se`` that does not
    depend on the value (a partner's uncertainty added in quadrature); ``influence``: the
    rows' contributions (:class:`Influence`), for correlations with other estimates."""

    value: float
    se: float
    blocks: int
    dof: int
    block_cells: int
    levelled: bool
    n: int
    variance_model: tuple = ()
    se_fixed: float = 0.0
    influence: Influence | None = field(default=None, compare=False, repr=False)

    def se_at(self, x: float) -> float:
        """The standard error this estimate would have if the true value were ``x``:
        se_fixed^2 + (se^2 - se_fixed^2) v(x) / v(value), v the variance model at max(., 0)
        (module docstring); ``se`` itself without a model."""
        if len(self.variance_model) != 3 or not np.isfinite(x):
            return self.se
        a, b, c = self.variance_model

        def model(t):
            t = max(float(t), 0.0)
            return a * t * t + b * t + c

        at_estimate = model(self.value)
        if not at_estimate > 0:
            return self.se
        scaled = max(self.se ** 2 - self.se_fixed ** 2, 0.0) * model(x) / at_estimate
        return float(np.sqrt(scaled + self.se_fixed ** 2))

    def with_variance_model(self, a: float, b: float, c: float) -> BlockedEstimate:
        """This estimate with the variance model a x^2 + b x + c (see :meth:`se_at`)."""
        return replace(self, variance_model=(float(a), float(b), float(c)))

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
    return replace(estimate, se=float(floor_se))


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

    estimate = _largest_over_sizes(variance_at, blocks, n, value)
    return replace(estimate, influence=Influence(blocks.i, blocks.j, blocks.day, residual / total))


#: the correlations of :func:`joint_correlation` are shrunk toward none until the matrix's
#: smallest eigenvalue is at least this (a near-singular matrix would give wild weights)
MIN_EIGENVALUE = 0.05


def joint_correlation(estimates: list[BlockedEstimate]) -> np.ndarray:
    """The correlation matrix of estimates made from overlapping super-observations.

    From the block sums of their influences (:class:`Influence`) over the union of their rows:
    C_kl = G / (G - 1) sum_g S_gk S_gl for S_gk the sum of estimate k's influence in block g,
    the cluster-robust covariance of several estimates at once ([CameronMiller2015]), at the
    largest block size any of them chose, halved until at least :data:`MIN_BLOCKS` blocks
    remain.  Estimates without influences are taken as uncorrelated with the others.  Shrunk
    toward the identity until its smallest eigenvalue is :data:`MIN_EIGENVALUE` or more.
    """
    k = len(estimates)
    correlation = np.eye(k)
    known = [m for m, e in enumerate(estimates) if e.influence is not None
             and e.influence.values.size]
    if len(known) < 2:
        return correlation
    parts = [estimates[m].influence for m in known]
    union = Blocks(np.concatenate([p.i for p in parts]), np.concatenate([p.j for p in parts]),
                   np.concatenate([p.day for p in parts]))
    owner = np.repeat(np.arange(len(parts)), [p.values.size for p in parts])
    values = np.concatenate([p.values for p in parts])
    cells = max(max(estimates[m].block_cells for m in known), 1)
    labels, g = union.labels(cells)
    while g < MIN_BLOCKS and cells > 1:
        cells //= 2
        labels, g = union.labels(cells)
    if g < 2:
        return correlation
    sums = np.zeros((g, len(parts)))
    np.add.at(sums, (labels, owner), values)
    covariance = sums.T @ sums
    scale = np.sqrt(np.diag(covariance))
    if not np.all(scale > 0):
        return correlation
    block = covariance / np.outer(scale, scale)
    correlation[np.ix_(known, known)] = block
    for shrink in np.linspace(0.0, 1.0, 21):
        candidate = (1.0 - shrink) * correlation + shrink * np.eye(k)
        if np.linalg.eigvalsh(candidate).min() >= MIN_EIGENVALUE:
            return candidate
    return np.eye(k)


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
