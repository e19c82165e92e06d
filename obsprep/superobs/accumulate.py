"""Mergeable per-group sums from which super-observations are made.

Raw observations are grouped by integer keys (the pipeline chooses them: quantity, sensor, time
slot, grid indices, ...).  Per group only a fixed set of numbers is kept, and two sets of numbers
for the same group combine exactly into the set for the union of their observations.  Files can
therefore be accumulated separately, in any split, and merged; merging the same accumulators in
the same order is bit-for-bit reproducible.

Numerical stability.  Values such as 273.15 K with a spread of millikelvin, or times such as
1.7e9 s with a spread of seconds, lose every significant digit of the spread in a sum of raw
squares.  Within a batch the mean and the sum of squared deviations about it (M2) are computed by
the corrected two-pass algorithm; batches are merged with the pairwise update of Chan, Golub &
LeVeque (1979, "Updating formulae and a pairwise algorithm for computing sample variances",
Stanford report STAN-CS-79-773; 1983, "Algorithms for computing the sample variance: analysis
and recommendations", *The American Statistician* 37, 242-247; references from memory):

.. math::
    n = n_a + n_b, \\quad \\delta = \\bar x_b - \\bar x_a, \\quad
    \\bar x = \\bar x_a + \\delta\\,n_b/n, \\quad M_2 = M_{2,a} + M_{2,b} + \\delta^2 n_a n_b / n

applied to k parts at once as :math:`M_2 = \\sum_k M_{2,k} + \\sum_k n_k (\\bar x_k - \\bar x)^2`
(repeated pairwise updates give exactly this), with the merged mean itself found by a corrected
two-pass step over the part means.  Weighted means merge the same way with weights in place of
counts.

Within a batch the mean and M2 are first taken about one shift ``c`` for the whole batch (its
mean value): ``M2 = S2 - S1^2 / n`` with ``S1 = sum (x - c)``, ``S2 = sum (x - c)^2``.  This
one-pass form loses about ``log10(n (mean - c)^2 / M2)`` digits; groups where that ratio exceeds
:data:`TWO_PASS_RATIO` are recomputed with the corrected two-pass algorithm above, so every group
keeps at least 11-12 significant digits of its spread.

Grouping is vectorised and sort-free when it can be: keys are packed into one int64 code in mixed
radix; when the code range is small enough (the usual case: grid cells x slots), the code itself
indexes the bins, so every per-group sum is one ``np.bincount`` and minima/maxima are
``np.minimum.at``/``np.maximum.at``.  Otherwise (wide or sparse keys) the codes are sorted once
(or sorted lexicographically when they do not fit in int64).  No Python loop runs over
observations or groups; memory is O(n) per batch.

The sums of a batch are taken by compiled kernels (:mod:`obsprep.superobs.batch_kernels`): the
packed code and the rows per code in one pass, then every sum of a row's bin in one pass, with
a bin's sums contiguous in memory.  Their arithmetic is that of the numpy computation here
(:func:`_reference_state`, one ``np.bincount`` per sum), which is kept as the reference.
"""

from __future__ import annotations

import math

import numpy as np

from obsprep.geo.sphere import cos_sin_degrees
from obsprep.superobs.error_model import total_error
from obsprep.superobs.errors import (
    constant_correlation_pairs,
    variance_of_mean,
    variance_of_weighted_mean,
)
from obsprep.superobs.spherical import mean_position

_INT64_MAX = int(np.iinfo(np.int64).max)

#: groups whose ``n (mean - shift)^2 / M2`` exceeds this get the two-pass M2 (module docstring)
TWO_PASS_RATIO = 1.0e4
#: keys are grouped by direct indexing when the packed code range is at most
#: max(_DIRECT_MIN_BINS, _DIRECT_BINS_PER_ROW * n) bins
_DIRECT_MIN_BINS = 1 << 22
_DIRECT_BINS_PER_ROW = 4

#: Per-group state kept by every accumulator: name -> meaning (units).
STATE_FIELDS: dict[str, str] = {
    "count": "number of raw observations (int64)",
    "value_mean": "mean of the values (units of the value)",
    "value_m2": "sum of squared deviations of the values about value_mean (units squared)",
    "value_min": "smallest value",
    "value_max": "largest value",
    "weighted_mean": "inverse-variance weighted mean of the values, weights 1/sigma^2",
    "sum_inverse_variance": "sum of 1/sigma^2 (the total weight of weighted_mean)",
    "sum_inverse_sigma": "sum of 1/sigma",
    "sum_variance": "sum of sigma^2",
    "sum_sigma": "sum of sigma",
    "time_mean": "mean time (s, relative to the caller's reference time)",
    "sum_x": "sum of unit-vector x components (see obsprep.superobs.spherical)",
    "sum_y": "sum of unit-vector y components",
    "sum_z": "sum of unit-vector z components",
    "depth_mean": "mean depth (m, positive down)",
    "depth_m2": "sum of squared deviations of the depths about depth_mean (m^2)",
    "depth_value_c2": "sum of (depth - depth_mean)(value - value_mean) (m times units of the value)",
    "depth_m3": "sum of (depth - depth_mean)^3 (m^3)",
    "depth_m4": "sum of (depth - depth_mean)^4 (m^4)",
    "depth2_value_c3": "sum of (depth - depth_mean)^2 (value - value_mean) (m^2 times units of "
                       "the value)",
    "weighted_m2": "sum of w (value - weighted_mean)^2, w = 1/sigma^2 (dimensionless)",
    "weighted_time_mean": "mean time with weights 1/sigma^2 (s)",
    "weighted_depth_mean": "mean depth with weights 1/sigma^2 (m)",
    "sum_weighted_x": "sum of unit-vector x components times 1/sigma^2",
    "sum_weighted_y": "sum of unit-vector y components times 1/sigma^2",
    "sum_weighted_z": "sum of unit-vector z components times 1/sigma^2",
    "sum_cross_covariance": "sum of the raw values' error covariance with a partner quantity "
                            "(drift x with drift y; units of the value squared; 0 for others)",
    "sum_weighted_cross_covariance": "sum of that covariance divided by sigma^2 sigma_partner^2",
}

#: Per-group sums of an accumulator whose groups still include the error-group key (before
#: :meth:`Accumulator.collapse`): within-group pair sums of the distance correlation model.
PAIR_FIELDS: dict[str, str] = {
    "pair_sum_sigma": "sum over pairs i != j of sigma_i sigma_j rho_ij (units squared)",
    "pair_sum_inverse_sigma": "sum over pairs i != j of rho_ij / (sigma_i sigma_j)",
}

#: Per-group error structure of a collapsed accumulator (one group = one super-observation
#: made of one or more error groups g: passes, granules, profiles); all add over error groups.
STRUCTURE_FIELDS: dict[str, str] = {
    "group_count": "number of error groups (int64)",
    "sum_group_sigma_squared": "sum over error groups of (sum of sigma in the group)^2",
    "sum_group_inverse_sigma_squared": "sum over error groups of (sum of 1/sigma in the group)^2",
    "within_pairs_sigma": "sum over pairs i != j of one error group of sigma_i sigma_j rho_ij",
    "within_pairs_inverse_sigma": "sum over pairs i != j of one error group of "
                                  "rho_ij / (sigma_i sigma_j)",
}

#: Per-group representative raw observation, kept when a thinning score is given.
REPRESENTATIVE_FIELDS: dict[str, str] = {
    "representative_score": "lowest score in the group",
    "representative_tiebreak": "tiebreak of the representative (int64)",
    "representative_value": "its value",
    "representative_error": "its 1-sigma error",
    "representative_time": "its time (s)",
    "representative_lon": "its longitude (degrees east)",
    "representative_lat": "its latitude (degrees north)",
    "representative_depth": "its depth (m)",
}

OUTPUT_COLUMNS = ("count", "value", "spread", "value_min", "value_max", "time", "lon", "lat",
                  "depth", "error_instrument", "error_representation", "error")

MODES = ("mean", "weighted", "thin")


# --------------------------------------------------------------------------------------------
# grouping

def _validate_keys(keys, where):
    if not isinstance(keys, dict) or not keys:
        raise TypeError(f"{where}: 'keys' must be a non-empty dict of name -> int64 array, "
                        f"got {type(keys).__name__}{' (empty)' if isinstance(keys, dict) else ''}")
    names = tuple(keys)
    clash = [name for name in names
             if name in OUTPUT_COLUMNS or not isinstance(name, str)]
    if clash:
        raise ValueError(f"{where}: key names must be strings other than the output columns "
                         f"{list(OUTPUT_COLUMNS)}; got {clash}")
    arrays = []
    length = None
    for name in names:
        array = np.asarray(keys[name])
        if array.ndim != 1:
            raise ValueError(f"{where}: key '{name}' must be 1-D, got shape {array.shape}")
        if array.dtype.kind not in "iub" and not (array.size == 0 and array.dtype.kind == "f"):
            raise TypeError(f"{where}: key '{name}' must hold integers (int64), "
                            f"got dtype {array.dtype}")
        if array.dtype.kind == "u" and array.size and int(array.max()) > _INT64_MAX:
            raise ValueError(f"{where}: key '{name}' has values above the int64 range")
        if length is None:
            length = len(array)
        elif len(array) != length:
            raise ValueError(f"{where}: key '{name}' has length {len(array)}, expected {length} "
                             f"like key '{names[0]}'")
        arrays.append(array.astype(np.int64, copy=False))
    return names, arrays


def _packed_code(key_arrays):
    """One int64 per row that sorts like the rows' key tuples, or None if it cannot fit.

    Each key becomes a digit ``key - min`` (or its dense rank when its range is wider than the
    number of rows), and the digits are packed in mixed radix, first key most significant.
    """
    n = len(key_arrays[0])
    digits, radices = [], []
    for array in key_arrays:
        low, high = int(array.min()), int(array.max())
        span = high - low + 1
        if span > max(n, 1):
            _, rank = np.unique(array, return_inverse=True)
            digits.append(rank.reshape(-1).astype(np.int64, copy=False))
            radices.append(int(rank.max()) + 1)
        else:
            digits.append(array - np.int64(low))
            radices.append(span)
    if math.prod(radices) > _INT64_MAX:
        return None
    if len(digits) == 1:
        return digits[0]
    code = np.zeros(n, dtype=np.int64)
    multiplier = 1
    for digit, radix in zip(digits[::-1], radices[::-1]):  # loop over keys, not rows
        if radix > 1:
            code += digit * np.int64(multiplier)
        multiplier *= radix
    return code


def _group_index(key_arrays):
    """Group rows by key tuple.

    Returns
    -------
    order : int array
        Row permutation putting the groups in ascending key order, rows of a group together.
    starts : int array
        Position in ``order`` where each group begins.
    inverse : int array
        Group number of each row (0..n_groups-1, groups in ascending key order).
    """
    n = len(key_arrays[0])
    if n == 0:
        empty = np.zeros(0, dtype=np.intp)
        return empty, empty, empty
    code = _packed_code(key_arrays)
    new_group = np.empty(n, dtype=bool)
    new_group[0] = True
    if code is not None:
        order = np.argsort(code)
        sorted_code = code[order]
        np.not_equal(sorted_code[1:], sorted_code[:-1], out=new_group[1:])
    else:
        # np.lexsort takes its primary key last
        order = np.lexsort(key_arrays[::-1])
        new_group[1:] = False
        for array in key_arrays:
            sorted_key = array[order]
            new_group[1:] |= sorted_key[1:] != sorted_key[:-1]
    starts = np.flatnonzero(new_group)
    inverse = np.empty(n, dtype=np.intp)
    inverse[order] = np.cumsum(new_group) - 1
    return order, starts, inverse


class _Grouping:
    """Rows -> bins for one batch.

    ``index`` (n,) is the bin of each row; ``n_bins`` the number of bins; ``count`` (n_bins,)
    int64 rows per bin; ``keep`` selects the occupied bins in ascending key order (None: every
    bin is occupied and already in that order); ``group_keys`` the key values of the occupied
    bins.  Per-bin sums are ``np.bincount(index, w, n_bins)``, then :meth:`compress`.
    """

    __slots__ = ("index", "n_bins", "count", "keep", "group_keys")

    def __init__(self, index, n_bins, count, keep, group_keys):
        self.index, self.n_bins, self.count = index, n_bins, count
        self.keep, self.group_keys = keep, group_keys

    def compress(self, per_bin):
        """Per-bin array -> per-group array (occupied bins, ascending key order)."""
        return per_bin if self.keep is None else per_bin[self.keep]

    def sum(self, weights):
        """Per-bin sum of ``weights`` (float64)."""
        return np.bincount(self.index, weights, self.n_bins)

    def minimum(self, values, initial):
        out = np.full(self.n_bins, initial, dtype=np.asarray(values).dtype)
        np.minimum.at(out, self.index, values)
        return out

    def maximum(self, values, initial):
        out = np.full(self.n_bins, initial, dtype=np.asarray(values).dtype)
        np.maximum.at(out, self.index, values)
        return out


def _direct_code(key_arrays, n):
    """(code, lows, radices) packing the keys in mixed radix (first key most significant) when
    the code range is small enough to index bins directly; else None."""
    direct = _direct_radices(key_arrays, n)
    if direct is None:
        return None
    lows, radices = direct
    code = None
    for array, low, radix in zip(key_arrays, lows, radices):  # loop over keys, not rows
        if radix == 1:
            continue  # a constant key adds nothing to the code (and may be a broadcast view)
        digit = array - np.int64(low) if low else array
        if code is None:
            code = digit.astype(np.int64, copy=True)
        else:
            code *= np.int64(radix)
            code += digit
    if code is None:
        code = np.zeros(n, dtype=np.int64)
    return code, lows, radices


def _direct_radices(key_arrays, n):
    """(lows, radices) of the keys when the mixed-radix code range is small enough to index
    bins directly, else None."""
    lows, radices = [], []
    for array in key_arrays:
        low, high = int(array.min()), int(array.max())
        lows.append(low)
        radices.append(high - low + 1)
    if math.prod(radices) > max(_DIRECT_MIN_BINS, _DIRECT_BINS_PER_ROW * n):
        return None
    return lows, radices


def _grouping(key_arrays) -> _Grouping:
    """Group rows by key tuple (see :class:`_Grouping`); groups in ascending key order."""
    n = len(key_arrays[0])
    if n == 0:
        empty = np.zeros(0, dtype=np.intp)
        return _Grouping(empty, 0, np.zeros(0, dtype=np.int64), None,
                         [np.zeros(0, dtype=np.int64) for _ in key_arrays])
    direct = _direct_code(key_arrays, n)
    if direct is not None:
        return _direct_grouping(*direct)
    order, starts, inverse = _group_index(key_arrays)
    first_rows = order[starts]
    count = np.diff(starts, append=n).astype(np.int64)
    return _Grouping(inverse, len(starts), count, None, [a[first_rows] for a in key_arrays])


def _direct_grouping(code, lows, radices) -> _Grouping:
    """The grouping of rows by a direct (mixed-radix) code, see :func:`_direct_code`."""
    n_codes = math.prod(radices)
    count = np.bincount(code, minlength=n_codes)
    occupied, group_keys, dense = _occupied_codes(count, lows, radices)
    if dense:
        # nearly every bin occupied: the code is the bin; empty bins are dropped at the end
        keep = None if len(occupied) == n_codes else occupied
        return _Grouping(code, n_codes, count, keep, group_keys)
    # else renumber the occupied codes 0..n_groups-1: one gather per row buys per-bin arrays
    # of the occupied bins only, cheaper for every sum that follows
    return _Grouping(_renumbering(occupied, n_codes)[code], len(occupied), count[occupied],
                     None, group_keys)


def _occupied_codes(count, lows, radices):
    """(occupied codes, their key values, whether nearly every code is occupied) from the rows
    per code of a direct grouping."""
    n_codes = len(count)
    occupied = np.flatnonzero(count)
    # decode the occupied codes back to key values (mixed radix, last key least significant)
    remainder = occupied.astype(np.int64)
    group_keys = [None] * len(radices)
    for position in range(len(radices) - 1, -1, -1):
        if radices[position] == 1:  # a constant key: one value, no memory per group
            group_keys[position] = np.broadcast_to(np.int64(lows[position]), occupied.shape)
            continue
        remainder, digit = np.divmod(remainder, np.int64(radices[position]))
        group_keys[position] = digit + np.int64(lows[position])
    return occupied, group_keys, 10 * len(occupied) >= 9 * n_codes


def _renumbering(occupied, n_codes):
    """code -> group number 0..len(occupied)-1 of the occupied codes."""
    renumber = np.empty(n_codes, dtype=np.intp)
    renumber[occupied] = np.arange(len(occupied))
    return renumber


def _grouping_of_parts(parts, key_names) -> _Grouping:
    """:func:`_grouping` of the concatenated keys of accumulators ``parts`` (merge), without
    concatenating every key when a direct code fits: each part's keys are packed into the
    common code, and only the codes are concatenated."""
    n = sum(a.n_groups for a in parts)
    if n == 0:
        return _grouping([np.zeros(0, dtype=np.int64) for _ in key_names])
    lows, radices = [], []
    for name in key_names:
        present = [a._keys[name] for a in parts if a.n_groups]
        low = min(int(k.min()) for k in present)
        high = max(int(k.max()) for k in present)
        lows.append(low)
        radices.append(high - low + 1)
    if math.prod(radices) > max(_DIRECT_MIN_BINS, _DIRECT_BINS_PER_ROW * n):
        return _grouping([np.concatenate([a._keys[name] for a in parts]) for name in key_names])
    codes = []
    for a in parts:
        code = np.zeros(a.n_groups, dtype=np.int64)
        for name, low, radix in zip(key_names, lows, radices):  # loop over keys, not rows
            if radix > 1:
                code *= np.int64(radix)
                code += a._keys[name] - np.int64(low)
        codes.append(code)
    return _direct_grouping(np.concatenate(codes), lows, radices)


def _representative_rows(grouping, score, tiebreak):
    """Row of each bin's lowest score, ties to the lowest tiebreak, then the lowest row."""
    n = len(score)
    lowest_score = grouping.minimum(score, np.inf)
    candidate = score == lowest_score[grouping.index]
    tiebreak_of_candidates = np.where(candidate, tiebreak, np.int64(_INT64_MAX))
    lowest_tiebreak = grouping.minimum(tiebreak_of_candidates, _INT64_MAX)
    chosen = candidate & (tiebreak == lowest_tiebreak[grouping.index])
    row = np.where(chosen, np.arange(n), n)
    return grouping.compress(grouping.minimum(row, n))


def _shifted_mean_and_m2(x, grouping, count_float, work=None, weights=None, total_weight=None):
    """Per-bin (weighted) mean and M2 of ``x``: one pass about the batch mean, two-pass where
    that loses too many digits (module docstring).  With ``weights`` (per row, total per bin
    ``total_weight``) M2 is :math:`\\sum w (x - \\bar x_w)^2`.  Empty bins give NaN.
    ``work``: a scratch array like ``x`` (overwritten)."""
    shift = float(np.mean(x)) if x.size else 0.0
    deviation = np.subtract(x, shift, out=work)
    if weights is None:
        total = count_float
        s1 = grouping.sum(deviation)
        s2 = grouping.sum(np.multiply(deviation, deviation, out=deviation))
    else:
        total = total_weight
        weighted = weights * deviation
        s1 = grouping.sum(weighted)
        s2 = grouping.sum(np.multiply(weighted, deviation, out=weighted))
        del weighted
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_deviation = s1 / total
        between = s1 * mean_deviation
        m2 = np.maximum(s2 - between, 0.0)
        mean = shift + mean_deviation
        risky = (between > TWO_PASS_RATIO * m2) & (count_float > 1)
    if risky.any():
        rows = np.flatnonzero(risky[grouping.index])
        with np.errstate(invalid="ignore", divide="ignore"):
            exact_mean, exact_m2 = _grouped_mean(
                x[rows], grouping.index[rows], grouping.n_bins,
                None if weights is None else weights[rows], total)
        mean = np.where(risky, exact_mean, mean)
        m2 = np.where(risky, exact_m2, m2)
    return mean, m2


#: the depth state of a group (see :data:`STATE_FIELDS`)
DEPTH_FIELDS = ("depth_mean", "depth_m2", "depth_m3", "depth_m4", "depth_value_c2",
                "depth2_value_c3", "weighted_depth_mean")


def _depth_moments(depth, value, value_mean, grouping, count_float) -> dict:
    """Per-bin mean depth, central depth moments of order 2-4 and the depth-value co-moments
    ``sum (d - dbar)(v - vbar)`` and ``sum (d - dbar)^2 (v - vbar)``.

    Power sums are taken about a first-pass mean :math:`d_f` and moved to the exact mean
    :math:`\\bar d = d_f + s` by the binomial theorem (with :math:`P_p = \\sum (d - d_f)^p`,
    :math:`P_1 = n s`): :math:`M_2 = P_2 - n s^2`, :math:`M_3 = P_3 - 3 s P_2 + 2 n s^3`,
    :math:`M_4 = P_4 - 4 s P_3 + 6 s^2 P_2 - 3 n s^4` (the corrected two-pass scheme of
    [Chan1983] carried to higher moments).  ``weighted_depth_mean`` is filled by the caller.
    """
    n_bins = grouping.n_bins
    if not depth.size or depth.min() == depth.max():
        zeros = np.zeros(n_bins)
        out = {name: zeros for name in DEPTH_FIELDS}
        out["depth_mean"] = np.full(n_bins, depth[0] if depth.size else np.nan)
        out["depth_varies"] = False
        return out
    index = grouping.index
    with np.errstate(invalid="ignore", divide="ignore"):
        first = grouping.sum(depth) / count_float
        d = depth - first[index]
        v = value - value_mean[index]
        p1 = grouping.sum(d)
        shift = p1 / count_float
        d2 = d * d
        p2 = grouping.sum(d2)
        p3 = grouping.sum(d2 * d)
        p4 = grouping.sum(d2 * d2)
        sum_v = grouping.sum(v)
        dv = grouping.sum(d * v)
        d2v = grouping.sum(d2 * v)
        n = count_float
        return {
            "depth_mean": first + shift,
            "depth_m2": np.maximum(p2 - n * shift ** 2, 0.0),
            "depth_m3": p3 - 3.0 * shift * p2 + 2.0 * n * shift ** 3,
            "depth_m4": np.maximum(p4 - 4.0 * shift * p3 + 6.0 * shift ** 2 * p2
                                   - 3.0 * n * shift ** 4, 0.0),
            # sum (d - s)(v) and sum (d - s)^2 v, v already about the exact value mean
            "depth_value_c2": dv - shift * sum_v,
            "depth2_value_c3": d2v - 2.0 * shift * dv + shift ** 2 * sum_v,
            "weighted_depth_mean": None,
            "depth_varies": True,
        }


def _shifted_mean(x, grouping, count_float, weights=None, total_weight=None, work=None):
    """Per-bin (weighted) mean of ``x`` about the batch mean: ``c + sum w (x - c) / W``.
    ``work``: a scratch array like ``x`` (overwritten)."""
    shift = float(np.mean(x)) if x.size else 0.0
    deviation = np.subtract(x, shift, out=work)
    with np.errstate(invalid="ignore", divide="ignore"):
        if weights is None:
            return shift + grouping.sum(deviation) / count_float
        return shift + grouping.sum(np.multiply(weights, deviation, out=deviation)) / total_weight


#: rows per block when unit vectors are evaluated (block arrays stay in the processor cache)
_UNIT_VECTOR_BLOCK = 1 << 16


def _unit_vector_sums(lon, lat, grouping, work, work_2, weights=None):
    """Per-bin sums of the unit vectors of the positions, the arithmetic of
    :func:`~obsprep.superobs.spherical.unit_vectors` (tangent half-angle identities) evaluated
    in cache-sized blocks into the scratch arrays ``work`` and ``work_2`` (overwritten).
    With per-row ``weights`` the weighted sums follow: six sums instead of three."""
    n = lon.size
    z = np.empty(n)
    block = min(_UNIT_VECTOR_BLOCK, max(n, 1))
    cos_lat = np.empty(block)
    for start in range(0, n, block):  # loop over blocks of rows, not rows
        stop = min(start + block, n)
        m = stop - start
        c, _ = cos_sin_degrees(lat[start:stop], cos_lat[:m], z[start:stop])
        x, y = cos_sin_degrees(lon[start:stop], work[start:stop], work_2[start:stop])
        np.multiply(x, c, out=x)
        np.multiply(y, c, out=y)
    sums = (grouping.sum(work), grouping.sum(work_2), grouping.sum(z))
    if weights is None:
        return sums
    return sums + tuple(grouping.sum(np.multiply(component, weights, out=component))
                        for component in (work, work_2, z))


def _pair_sums_of_rows(grouping, lon, lat, error, pair_correlation):
    """Per-bin within-group pair sums of the distance correlation model
    (:func:`obsprep.superobs.pairs.within_group_pair_sums`) for rows of one batch."""
    from obsprep.superobs.pairs import within_group_pair_sums
    from obsprep.superobs.spherical import unit_vectors

    order, starts = _bin_order(grouping.index, grouping.n_bins)
    x, y, z = unit_vectors(lon, lat)
    rho0, length_m = pair_correlation
    return within_group_pair_sums(order, starts, x, y, z, error, 1.0 / error, rho0, length_m)


def _bin_order(index, n_bins):
    """Rows sorted by bin (stable) and where each bin begins (empty bins included)."""
    order = np.argsort(index, kind="stable")
    count = np.bincount(index, minlength=n_bins)
    starts = (np.cumsum(count) - count).astype(np.intp)
    return order.astype(np.intp, copy=False), starts


def _pick_representative(score, tiebreak, order, starts, inverse):
    """Row index of each group's lowest score, ties to lowest tiebreak, then lowest row."""
    n = len(score)
    lowest_score = np.minimum.reduceat(score[order], starts)
    candidate = score == lowest_score[inverse]
    tiebreak_of_candidates = np.where(candidate, tiebreak, np.int64(_INT64_MAX))
    lowest_tiebreak = np.minimum.reduceat(tiebreak_of_candidates[order], starts)
    chosen = candidate & (tiebreak == lowest_tiebreak[inverse])
    row = np.where(chosen, np.arange(n), n)
    return np.minimum.reduceat(row[order], starts)


# --------------------------------------------------------------------------------------------
# stable grouped means

def _grouped_mean(x, inverse, n_groups, weight_per_row, total_weight):
    """Weighted group means by the corrected two-pass algorithm.

    Returns ``(mean, sum_sq)`` with ``sum_sq = sum w (x - mean)^2`` per group, computed as
    ``sum w d^2 - (sum w d)^2 / W`` with ``d = x - first-pass mean`` (the "corrected two-pass
    algorithm" of [Chan1983]), which stays accurate when the spread is tiny
    compared with the mean.
    ``weight_per_row`` None means unit weights.
    """
    weighted_x = x if weight_per_row is None else weight_per_row * x
    first_pass = np.bincount(inverse, weighted_x, n_groups) / total_weight
    deviation = x - first_pass[inverse]
    weighted_deviation = deviation if weight_per_row is None else weight_per_row * deviation
    sum_deviation = np.bincount(inverse, weighted_deviation, n_groups)
    mean = first_pass + sum_deviation / total_weight
    sum_sq = np.bincount(inverse, weighted_deviation * deviation, n_groups)
    sum_sq = np.maximum(sum_sq - sum_deviation * sum_deviation / total_weight, 0.0)
    return mean, sum_sq


# --------------------------------------------------------------------------------------------
# input checks

def _float_column(where, name, array, n, *, positive=False, low=None, high=None, check=True):
    """``array`` as float64 (n,) (a scalar repeated), its values checked unless not ``check``
    (then the caller checks them)."""
    array = np.asarray(array, dtype=np.float64)
    if array.ndim == 0:
        array = np.full(n, array.item())
    if array.shape != (n,):
        raise ValueError(f"{where}: '{name}' has shape {array.shape}, expected ({n},) like the keys")
    if not check:
        return np.ascontiguousarray(array)
    if n:
        # fast path: the extremes decide (NaN propagates through min and max)
        smallest, largest = array.min(), array.max()
        if (np.isfinite(smallest) and np.isfinite(largest) and (not positive or smallest > 0)
                and (low is None or (smallest >= low and largest <= high))):
            return array
    ok = np.isfinite(array)
    expected = "finite"
    if positive:
        ok &= array > 0
        expected = "finite and > 0"
    if low is not None:
        ok &= (array >= low) & (array <= high)
        expected = f"finite and within {low}..{high}"
    if not ok.all():
        bad = np.flatnonzero(~ok)
        raise ValueError(f"{where}: '{name}' must be {expected}; {len(bad)} of {n} entries are "
                         f"not, first at index {bad[0]} (value {array[bad[0]]!r})")
    return array


def _cross_covariance_columns(where, cross_covariance, partner_error, n, check=True):
    if cross_covariance is None and partner_error is None:
        return None, None
    if cross_covariance is None or partner_error is None:
        raise ValueError(f"{where}: 'cross_covariance' and 'partner_error' go together; "
                         f"got only one of them")
    return (_float_column(where, "cross_covariance", cross_covariance, n, check=check),
            _float_column(where, "partner_error", partner_error, n, positive=True, check=check))


def _pair_correlation(where, pair_correlation):
    if pair_correlation is None:
        return None
    try:
        rho0, length_m = (float(v) for v in pair_correlation)
    except (TypeError, ValueError):
        raise ValueError(f"{where}: 'pair_correlation' must be (rho0, length_m); "
                         f"got {pair_correlation!r}") from None
    if not (0.0 <= rho0 <= 1.0) or not (np.isfinite(length_m) and length_m > 0):
        raise ValueError(f"{where}: 'pair_correlation' must be (rho0 in 0..1, length_m > 0, "
                         f"finite); got {pair_correlation!r}")
    return rho0, length_m


def _per_group(name, value, n_groups, *, low, high):
    array = np.asarray(value, dtype=np.float64)
    if array.ndim == 0:
        array = np.full(n_groups, array.item())
    elif array.shape != (n_groups,):
        raise ValueError(f"finalize: '{name}' must be a scalar or an array of one value per "
                         f"group, shape ({n_groups},); got shape {array.shape}")
    bad = ~((array >= low) & (array <= high))
    if bad.any():
        index = np.flatnonzero(bad)[0]
        raise ValueError(f"finalize: '{name}' must be within {low}..{high}; group {index} "
                         f"has {array[index]!r}")
    return array


def _merge_state(parts, key_names, collapsed, pair_correlation, has_representative):
    """The merged per-group state of accumulators ``parts`` (see :meth:`Accumulator.merge`):
    ``(state, group_keys, grouping)``."""
    grouping = _grouping_of_parts(parts, key_names)
    group_keys = dict(zip(key_names, grouping.group_keys))
    inverse, n_groups = grouping.index, grouping.n_bins
    n_rows = len(inverse)

    def part(name):
        # one field of every part at a time: a merge of big partial results would
        # otherwise hold every field twice
        return np.concatenate([a._state[name] for a in parts])

    def total(values):
        return np.bincount(inverse, values, n_groups)

    part_count = part("count").astype(np.float64)
    count = total(part_count).astype(np.int64)
    value_min = grouping.minimum(part("value_min"), np.inf)
    value_max = grouping.maximum(part("value_max"), -np.inf)
    count_float = count.astype(np.float64)
    state = {"count": count, "value_min": value_min, "value_max": value_max}
    # k-way Chan-Golub-LeVeque: M2 = sum M2_k + sum n_k (mean_k - mean)^2 (empty bins of a
    # direct grouping give NaN here and are dropped by compress)
    with np.errstate(invalid="ignore", divide="ignore"):
        part_value_mean = part("value_mean")
        value_mean, between = _grouped_mean(part_value_mean, inverse, n_groups, part_count,
                                            count_float)
        state["value_mean"] = value_mean
        state["value_m2"] = total(part("value_m2")) + between
        part_weight = part("sum_inverse_variance")
        sum_inverse_variance = total(part_weight)
        state["sum_inverse_variance"] = sum_inverse_variance
        state["weighted_mean"], weighted_between = _grouped_mean(
            part("weighted_mean"), inverse, n_groups, part_weight, sum_inverse_variance)
        state["weighted_m2"] = total(part("weighted_m2")) + weighted_between
        state["weighted_time_mean"], _ = _grouped_mean(part("weighted_time_mean"), inverse,
                                                       n_groups, part_weight,
                                                       sum_inverse_variance)
        state["weighted_depth_mean"], _ = _grouped_mean(part("weighted_depth_mean"), inverse,
                                                        n_groups, part_weight,
                                                        sum_inverse_variance)
        del part_weight
        state["time_mean"], _ = _grouped_mean(part("time_mean"), inverse, n_groups,
                                              part_count, count_float)
        part_depth_mean = part("depth_mean")
        depth_mean, depth_between = _grouped_mean(part_depth_mean, inverse, n_groups,
                                                  part_count, count_float)
        state["depth_mean"] = depth_mean
        # central moments move to the merged mean by the binomial theorem, with
        # delta = d_k - d and eps = v_k - v (Chan et al. for M2, the same algebra above it):
        # M3 = sum M3_k + 3 delta M2_k + n_k delta^3,
        # M4 = sum M4_k + 4 delta M3_k + 6 delta^2 M2_k + n_k delta^4,
        # C(d,v) = sum C_k + n_k delta eps,
        # C(d^2,v) = sum C2_k + 2 delta C_k + eps M2_k + n_k delta^2 eps
        delta = part_depth_mean - depth_mean[inverse]
        eps = part_value_mean - value_mean[inverse]
        del part_depth_mean, part_value_mean
        m2_k, m3_k, c_k = part("depth_m2"), part("depth_m3"), part("depth_value_c2")
        state["depth_m2"] = total(m2_k) + depth_between
        state["depth_m3"] = total(m3_k + 3.0 * delta * m2_k + part_count * delta ** 3)
        state["depth_m4"] = total(part("depth_m4") + 4.0 * delta * m3_k
                                  + 6.0 * delta ** 2 * m2_k + part_count * delta ** 4)
        state["depth_value_c2"] = total(c_k + part_count * delta * eps)
        state["depth2_value_c3"] = total(part("depth2_value_c3") + 2.0 * delta * c_k
                                         + eps * m2_k + part_count * delta ** 2 * eps)
        del delta, eps, m2_k, m3_k, c_k
        for name in ("sum_inverse_sigma", "sum_variance", "sum_sigma", "sum_x", "sum_y",
                     "sum_z", "sum_weighted_x", "sum_weighted_y", "sum_weighted_z",
                     "sum_cross_covariance", "sum_weighted_cross_covariance"):
            state[name] = total(part(name))
        extra = STRUCTURE_FIELDS if collapsed else PAIR_FIELDS
        for name in extra:
            state[name] = total(part(name))
        if collapsed:
            state["group_count"] = state["group_count"].round().astype(np.int64)
        elif pair_correlation is not None and n_rows > n_groups:
            # pairs between parts of one group, from the parts' mean positions and spreads
            cross_sigma, cross_inverse = _pairs_between_parts(parts, inverse, n_groups,
                                                              pair_correlation)
            state["pair_sum_sigma"] += cross_sigma
            state["pair_sum_inverse_sigma"] += cross_inverse
    names = (*STATE_FIELDS, *(STRUCTURE_FIELDS if collapsed else PAIR_FIELDS))
    state = {name: grouping.compress(state[name]) for name in names}
    if has_representative:
        if n_rows:
            row = _representative_rows(grouping, part("representative_score"),
                                       part("representative_tiebreak"))
        else:
            row = np.zeros(0, dtype=np.intp)
        for name in REPRESENTATIVE_FIELDS:
            state[name] = part(name)[row]
    return state, group_keys, grouping


def _pairs_between_parts(parts, inverse, n_groups, pair_correlation):
    """Pair sums between the parts of each merged group (parts of one error group in one cell
    accumulated separately: pieces of a file read in parts, chunks of rows).

    Each part k is a cloud of raw values with mean unit vector :math:`\\bar u_k` (the sums of
    unit vectors over the count) and spread :math:`r_k^2 = 1 - |\\bar u_k|^2` (the mean squared
    distance of its unit vectors from their mean direction, nearly planar at cell scales).  The
    separation of a value of part k and one of part l is modelled as the separation c of the
    means plus an isotropic Gaussian offset of variance :math:`R^2 (r_k^2 + r_l^2)` (half per
    axis), and the mean pair correlation :math:`E[\\rho_0 e^{-d/L}]` over it is found by a 6 x 6
    point Gauss-Hermite rule (numpy.polynomial.hermite_e); the pairs add
    :math:`2 E[\\rho]\\,S_k S_l` (S: the parts' sums of sigma; the same with 1/sigma).  Exact for
    parts small against L; the Gaussian cloud is an approximation for larger parts."""
    from obsprep.geo.sphere import EARTH_MEAN_RADIUS_M

    count = np.concatenate([a._state["count"] for a in parts]).astype(np.float64)
    mean_u = [np.concatenate([a._state[name] for a in parts]) / count
              for name in ("sum_x", "sum_y", "sum_z")]
    spread = np.maximum(1.0 - (mean_u[0] ** 2 + mean_u[1] ** 2 + mean_u[2] ** 2), 0.0)
    a = np.concatenate([p._state["sum_sigma"] for p in parts])
    b = np.concatenate([p._state["sum_inverse_sigma"] for p in parts])
    rho0, length_m = pair_correlation
    order, starts = _bin_order(inverse, n_groups)
    sizes = np.diff(np.r_[starts, len(order)])
    cross_a, cross_b = np.zeros(n_groups), np.zeros(n_groups)
    nodes, weights = np.polynomial.hermite_e.hermegauss(6)
    weights = np.outer(weights, weights).ravel() / (2.0 * np.pi)  # standard normal, 2-D
    along, across = np.meshgrid(nodes, nodes, indexing="ij")
    along, across = along.ravel(), across.ravel()
    for size in np.unique(sizes[sizes >= 2]):  # loop over part counts (a few), not rows
        groups = np.flatnonzero(sizes == size)
        first = starts[groups]
        for p in range(size):
            for q in range(p + 1, size):
                rp, rq = order[first + p], order[first + q]
                separation = EARTH_MEAN_RADIUS_M * np.sqrt(
                    sum((u[rp] - u[rq]) ** 2 for u in mean_u))
                offset = EARTH_MEAN_RADIUS_M * np.sqrt((spread[rp] + spread[rq]) / 2.0)
                distance = np.hypot(separation[:, None] + offset[:, None] * along,
                                    offset[:, None] * across)
                rho = rho0 * (np.exp(-distance / length_m) @ weights)
                cross_a[groups] += 2.0 * rho * a[rp] * a[rq]
                cross_b[groups] += 2.0 * rho * b[rp] * b[rq]
    return cross_a, cross_b


# --------------------------------------------------------------------------------------------

class Accumulator:
    """Mergeable per-group state for super-observations.

    A group is one combination of the integer keys.  Per group (arrays of length
    :attr:`n_groups`, groups in ascending lexicographic order of the keys in the given key
    order) the accumulator keeps:

    - ``count``: number of raw observations;
    - ``value_mean``, ``value_m2``: mean of the values and sum of squared deviations about it,
      merged with the pairwise formula of Chan, Golub & LeVeque (see the module docstring);
    - ``value_min``, ``value_max``;
    - ``weighted_mean`` with weights :math:`1/\\sigma_i^2`, and its total weight
      ``sum_inverse_variance`` = :math:`\\sum \\sigma_i^{-2}`, merged the same stable way;
    - ``sum_variance`` = :math:`\\sum\\sigma_i^2`, ``sum_sigma`` = :math:`\\sum\\sigma_i`,
      ``sum_inverse_sigma`` = :math:`\\sum\\sigma_i^{-1}` (errors of correlated means, see
      :mod:`obsprep.superobs.errors`);
    - ``time_mean`` (s, relative to the caller's reference), ``depth_mean`` (m), both merged as
      stable means;
    - ``sum_x``, ``sum_y``, ``sum_z``: sums of unit vectors of the positions (spherical mean);
    - when a thinning ``score`` was given, the representative raw observation: the one with the
      lowest score, ties to the lowest ``tiebreak``: ``representative_score``, ``_tiebreak``,
      ``_value``, ``_error``, ``_time``, ``_lon``, ``_lat``, ``_depth``.

    All are in :attr:`state` (read-only arrays; names and meanings in :data:`STATE_FIELDS` and
    :data:`REPRESENTATIVE_FIELDS`).  Build with :meth:`from_observations`, combine with
    :meth:`merge`, turn into super-observations with :meth:`finalize`.
    """

    def __init__(self, key_names, keys, state, has_representative, pair_correlation=None):
        # Internal: use from_observations, merge or collapse.
        self._key_names = tuple(key_names)
        self._keys = {name: keys[name] for name in self._key_names}
        self._state = dict(state)
        self._has_representative = bool(has_representative)
        self._pair_correlation = pair_correlation
        for array in (*self._keys.values(), *self._state.values()):
            array.flags.writeable = False

    # ---- read-only views ---------------------------------------------------------------------
    @property
    def key_names(self) -> tuple[str, ...]:
        """Names of the keys, in grouping (and sort) order."""
        return self._key_names

    @property
    def keys(self) -> dict[str, np.ndarray]:
        """Key values of each group: name -> int64 array of length :attr:`n_groups`."""
        return dict(self._keys)

    @property
    def n_groups(self) -> int:
        """Number of groups (distinct key combinations)."""
        return len(self._state["count"])

    @property
    def count(self) -> np.ndarray:
        """Number of raw observations per group (int64)."""
        return self._state["count"]

    @property
    def state(self) -> dict[str, np.ndarray]:
        """All per-group state arrays (read-only), see the class docstring."""
        return dict(self._state)

    @property
    def collapsed(self) -> bool:
        """Whether the groups hold their error structure (:data:`STRUCTURE_FIELDS`, after
        :meth:`collapse`) rather than within-group pair sums (:data:`PAIR_FIELDS`)."""
        return "group_count" in self._state

    @property
    def pair_correlation(self):
        """``(rho0, length_m)`` of the distance correlation model, or None (constant model)."""
        return self._pair_correlation

    @property
    def has_representative(self) -> bool:
        """Whether a thinning representative is kept (a score was given)."""
        return self._has_representative

    def __repr__(self):
        return (f"Accumulator(keys={list(self._key_names)}, n_groups={self.n_groups}, "
                f"n_observations={int(self.count.sum())})")

    # ---- construction ------------------------------------------------------------------------
    @classmethod
    def from_observations(cls, keys, value, error, time, lon, lat, depth, *,
                          score=None, tiebreak=None, cross_covariance=None, partner_error=None,
                          pair_correlation=None) -> Accumulator:
        """Accumulate one batch of raw observations.

        Parameters
        ----------
        keys : dict of str -> int64 array
            Grouping keys, all of the same length n; a group is one unique combination.  Output
            is sorted by the keys in this order.
        value : array (n,)
            Observed values, canonical units of the quantity.
        error : array (n,)
            1-sigma observation errors, same units, finite and > 0.
        time : array (n,)
            Seconds relative to a reference time the caller chooses (e.g. analysis time).
        lon, lat : array (n,)
            Degrees east (any range), degrees north (-90..90).
        depth : array (n,) or scalar
            Metres, positive down.
        score : array (n,) of float64, optional
            Thinning score: the representative raw observation of a group is the one with the
            lowest score.  Without a score no representative is kept and ``mode="thin"`` is
            unavailable.
        tiebreak : array (n,) of int64, optional
            Breaks ties in score (lowest wins).  Give one that is unique and independent of how
            files are split (e.g. file number * 2**32 + row); without it ties go to the first
            row of the batch (first accumulator on merge), which depends on the split.
        cross_covariance : array (n,), optional
            Error covariance of each raw value with its partner value of another quantity
            (the other drift component of the same vector), units of the value squared; with
            ``partner_error`` (the partner's 1-sigma error).  Kept as sums for the covariance
            of the two super-observations (:meth:`finalize`).
        pair_correlation : (float, float), optional
            ``(rho0, length_m)``: the errors of two values of one group correlate as
            :math:`\\rho_0 \\exp(-d/L)`, d the great-circle distance (m); the within-group pair
            sums are kept (:mod:`obsprep.superobs.pairs`).  Without it the correlation is a
            constant given at :meth:`collapse` or :meth:`finalize`.

        Returns
        -------
        Accumulator
        """
        return _from_observations(cls, keys, value, error, time, lon, lat, depth, score,
                                  tiebreak, cross_covariance, partner_error, pair_correlation,
                                  compiled=True)

    @classmethod
    def merge(cls, accumulators) -> Accumulator:
        """Combine accumulators of the same keys into one, exactly.

        The result equals (to rounding) the accumulator of all their observations at once, for
        any split; merging the same accumulators in the same order is bit-for-bit reproducible.
        Groups come out sorted by key.  Formulas: module docstring.

        Parameters
        ----------
        accumulators : sequence of Accumulator
            All with the same key names in the same order, and all with or all without a
            thinning representative (empty ones are exempt).

        Returns
        -------
        Accumulator
        """
        accumulators = list(accumulators)
        if not accumulators:
            raise ValueError("Accumulator.merge: expected at least one accumulator, got none")
        for position, accumulator in enumerate(accumulators):
            if not isinstance(accumulator, Accumulator):
                raise TypeError(f"Accumulator.merge: item {position} is a "
                                f"{type(accumulator).__name__}, expected an Accumulator")
        key_names = accumulators[0].key_names
        for position, accumulator in enumerate(accumulators):
            if accumulator.key_names != key_names:
                raise ValueError(f"Accumulator.merge: item {position} has keys "
                                 f"{list(accumulator.key_names)}, expected {list(key_names)} "
                                 f"like item 0")
        non_empty = [a for a in accumulators if a.n_groups]
        flags = {a.has_representative for a in (non_empty or accumulators)}
        if len(flags) > 1:
            raise ValueError("Accumulator.merge: some accumulators keep a thinning "
                             "representative (a score was given) and others do not")
        has_representative = flags.pop()
        parts = non_empty or accumulators[:1]
        kinds = {a.collapsed for a in parts}
        if len(kinds) > 1:
            raise ValueError("Accumulator.merge: some accumulators are collapsed (error "
                             "structure kept per super-observation) and others are not")
        collapsed = kinds.pop()
        pair_models = {a.pair_correlation for a in parts}
        if len(pair_models) > 1:
            raise ValueError(f"Accumulator.merge: the accumulators have different distance "
                             f"correlation models {sorted(map(str, pair_models))}")
        pair_correlation = pair_models.pop()
        state, group_keys, grouping = _merge_state(parts, key_names, collapsed,
                                                   pair_correlation, has_representative)
        return cls(key_names, group_keys, state, has_representative,
                   pair_correlation=pair_correlation)

    def collapse(self, key=None, within_correlation=0.0) -> Accumulator:
        """The super-observations of this accumulator with their error structure.

        ``key`` names the error-group key (pass, granule, profile): groups that differ only
        in it are one super-observation made of several error groups, whose errors are
        correlated within an error group and (by the ``across_correlation`` given to
        :meth:`finalize`) across them.  ``key=None``: every group is one error group.

        Within one error group g the pair sum is
        :math:`\\sum_{i \\ne j \\in g} \\sigma_i \\sigma_j \\rho_{ij}`: with the distance
        model (``pair_correlation`` given to :meth:`from_observations`) the kept pair sums; else
        :math:`\\rho [(\\sum_g \\sigma_i)^2 - \\sum_g \\sigma_i^2]` with the constant
        ``within_correlation`` rho (scalar or one value per group of this accumulator, 0..1),
        the same with :math:`1/\\sigma` for the weighted mean.  Merge the collapsed
        accumulators of different files (different error groups) with :meth:`merge`: every
        structure field adds.  An error group must not be split between accumulators that are
        collapsed separately (the pairs across the split would be lost).
        """
        if self.collapsed:
            raise ValueError("Accumulator.collapse: already collapsed")
        if key is not None and key not in self._key_names:
            raise ValueError(f"Accumulator.collapse: no key {key!r}; keys are "
                             f"{list(self._key_names)}")
        rho = _per_group("within_correlation", within_correlation, self.n_groups,
                         low=0.0, high=1.0)
        s = self._state
        with np.errstate(invalid="ignore"):
            group_sigma_squared = s["sum_sigma"] * s["sum_sigma"]
            group_inverse_squared = s["sum_inverse_sigma"] * s["sum_inverse_sigma"]
            if self._pair_correlation is not None:
                within_sigma = s["pair_sum_sigma"]
                within_inverse = s["pair_sum_inverse_sigma"]
            else:
                within_sigma = constant_correlation_pairs(s["sum_sigma"], s["sum_variance"], rho)
                within_inverse = constant_correlation_pairs(s["sum_inverse_sigma"],
                                                            s["sum_inverse_variance"], rho)
        state = {name: s[name] for name in (*STATE_FIELDS, *self._representative_names())}
        state.update({"group_count": np.ones(self.n_groups, dtype=np.int64),
                      "sum_group_sigma_squared": group_sigma_squared,
                      "sum_group_inverse_sigma_squared": group_inverse_squared,
                      "within_pairs_sigma": within_sigma,
                      "within_pairs_inverse_sigma": within_inverse})
        if key is None:  # the state arrays are read-only: shared, not copied
            return Accumulator(self._key_names, self._keys, state, self._has_representative)
        remaining = tuple(name for name in self._key_names if name != key)
        if not remaining:
            raise ValueError("Accumulator.collapse: at least one key must remain")
        view = Accumulator(remaining, self._keys, state, self._has_representative)
        return Accumulator.merge([view])

    def _representative_names(self):
        return tuple(REPRESENTATIVE_FIELDS) if self._has_representative else ()

    # ---- output ------------------------------------------------------------------------------
    def finalize(self, *, mode="mean", correlation=0.0, across_correlation=0.0,
                 representation_error=0.0, floor=0.0):
        """Super-observations, one row per group, as a pandas DataFrame.

        Parameters
        ----------
        mode : {"mean", "weighted", "thin"}
            ``"mean"``: equally weighted mean of the values, times, depths and positions, error
            from :func:`~obsprep.superobs.errors.variance_of_mean`.  ``"weighted"``:
            inverse-variance weighted mean of the values, times, depths and positions (weights
            :math:`1/\\sigma_i^2`), error from
            :func:`~obsprep.superobs.errors.variance_of_weighted_mean`.  ``"thin"``: the
            representative raw observation (lowest score); its value, time, position, depth and
            error.
        correlation : float or array (n_groups,)
            For an accumulator not yet collapsed: the common pairwise error correlation of the
            raw observations of a group (each group one error group, :meth:`collapse` with
            ``key=None``), 0..1.  Must be 0 for a collapsed accumulator (its within-group
            correlation was applied by :meth:`collapse`).
        across_correlation : float or array (n_groups,)
            Error correlation between values of different error groups of a super-observation,
            0..1 (default 0: independent).
        representation_error : float or array (n_groups,)
            1-sigma representation error (units of the value, >= 0), added in quadrature; it
            does not shrink with the count.
        floor : float or array (n_groups,)
            Lowest total error allowed (units of the value, >= 0).

        Returns
        -------
        pandas.DataFrame
            The key columns (int64), then ``count`` (raw observations in the group), ``value``,
            ``spread`` (sample standard deviation, ddof = 1; NaN for one observation),
            ``value_min``, ``value_max``, ``time`` (mean, s), ``lon``, ``lat`` (spherical mean,
            degrees), ``depth`` (mean, m), ``error_instrument``, ``error_representation`` and
            ``error`` = max(floor, sqrt(error_instrument^2 + error_representation^2)).
        """
        import pandas as pd  # only here: the accumulation path stays pandas-free

        if mode not in MODES:
            raise ValueError(f"finalize: mode must be one of {list(MODES)}, got {mode!r}")
        if self.collapsed:
            if np.any(np.asarray(correlation) != 0):
                raise ValueError("finalize: this accumulator is collapsed, its within-group "
                                 "correlation was applied by collapse(); give "
                                 "across_correlation only")
            accumulator = self
        else:
            accumulator = self.collapse(None, _per_group("correlation", correlation,
                                                         self.n_groups, low=0.0, high=1.0))
        n_groups = accumulator.n_groups
        across = _per_group("across_correlation", across_correlation, n_groups, low=0.0,
                            high=1.0)
        representation = _per_group("representation_error", representation_error, n_groups,
                                    low=0.0, high=np.inf)
        floor = _per_group("floor", floor, n_groups, low=0.0, high=np.inf)
        s = accumulator._state
        count = s["count"]
        with np.errstate(invalid="ignore", divide="ignore"):
            spread = np.where(count > 1, np.sqrt(s["value_m2"] / (count - 1)), np.nan)
        if mode == "thin":
            if not self._has_representative:
                raise ValueError("finalize: mode 'thin' needs a thinning score; pass score= "
                                 "(and tiebreak=) to Accumulator.from_observations")
            value = s["representative_value"]
            time = s["representative_time"]
            lon = np.asarray(s["representative_lon"], dtype=np.float64)
            lon = (lon + 180.0) % 360.0 - 180.0
            lat = s["representative_lat"]
            depth = s["representative_depth"]
            error_instrument = s["representative_error"]
        elif mode == "mean":
            value, time, depth = s["value_mean"], s["time_mean"], s["depth_mean"]
            lon, lat = mean_position(s["sum_x"], s["sum_y"], s["sum_z"])
            error_instrument = np.sqrt(variance_of_mean(
                s["sum_variance"], count, s["within_pairs_sigma"], s["sum_sigma"],
                s["sum_group_sigma_squared"], across))
        else:
            value, time = s["weighted_mean"], s["weighted_time_mean"]
            depth = s["weighted_depth_mean"]
            lon, lat = mean_position(s["sum_weighted_x"], s["sum_weighted_y"],
                                     s["sum_weighted_z"])
            error_instrument = np.sqrt(variance_of_weighted_mean(
                s["sum_inverse_variance"], s["within_pairs_inverse_sigma"],
                s["sum_inverse_sigma"], s["sum_group_inverse_sigma_squared"], across))
        error, _ = total_error(error_instrument, representation, floor)
        columns = {name: np.array(accumulator._keys[name]) for name in self._key_names}
        columns.update({
            "count": np.array(count, dtype=np.int64),
            "value": np.array(value, dtype=np.float64),
            "spread": spread,
            "value_min": np.array(s["value_min"]),
            "value_max": np.array(s["value_max"]),
            "time": np.array(time, dtype=np.float64),
            "lon": np.asarray(lon, dtype=np.float64),
            "lat": np.array(lat, dtype=np.float64),
            "depth": np.array(depth, dtype=np.float64),
            "error_instrument": np.array(error_instrument, dtype=np.float64),
            "error_representation": representation,
            "error": error,
        })
        return pd.DataFrame(columns)


# --------------------------------------------------------------------------------------------
# one batch: checks, then the sums by the compiled kernels or by numpy


def _from_observations(cls, keys, value, error, time, lon, lat, depth, score, tiebreak,
                       cross_covariance, partner_error, pair_correlation, *, compiled):
    """:meth:`Accumulator.from_observations`; ``compiled`` False: the plain numpy reference
    (:func:`_reference_state`) instead of the compiled kernels (:func:`_compiled_state`).
    Both give the same state (the kernels' docstrings say where it is not bit for bit)."""
    where = "Accumulator.from_observations"
    key_names, key_arrays = _validate_keys(keys, where)
    n = len(key_arrays[0])
    compiled = compiled and n > 0
    # with the kernels the values are checked in their pass (one pass, not two per column);
    # a batch the kernel finds wrong is checked here again for the one-line reason
    columns = _checked_columns(where, n, value, error, time, lon, lat, depth,
                               cross_covariance, partner_error, check=not compiled)
    score, tiebreak = _checked_score(where, n, score, tiebreak)
    pair_correlation = _pair_correlation(where, pair_correlation)
    state = grouping = None
    if compiled:
        from obsprep.superobs.batch_kernels import compiled as compiled_kernels

        bins = _compiled_grouping(key_arrays, compiled_kernels())
        state = _compiled_state(bins, *columns)
        if state is None:  # invalid input (raises here) or beyond the kernel's range
            columns = _checked_columns(where, n, value, error, time, lon, lat, depth,
                                       cross_covariance, partner_error, check=True)
        elif pair_correlation is not None or score is not None:
            grouping = bins.grouping()
        else:  # what the rest needs of a grouping: the number of bins and compress
            grouping = _Grouping(None, bins.n_bins, bins.count, bins.keep, bins.group_keys)
    value, error, time, lon, lat, depth, cross_covariance, partner_error = columns
    if state is None:
        grouping = _grouping(key_arrays)
        depth = np.broadcast_to(depth, (n,))
        state = _reference_state(grouping, value, error, time, lon, lat, depth,
                                 cross_covariance, partner_error)
    if pair_correlation is None:
        state["pair_sum_sigma"] = state["pair_sum_inverse_sigma"] = np.zeros(len(state["count"]))
    else:
        pair_sigma, pair_inverse_sigma = _pair_sums_of_rows(
            grouping, lon, lat, error, pair_correlation)
        state["pair_sum_sigma"] = grouping.compress(pair_sigma)
        state["pair_sum_inverse_sigma"] = grouping.compress(pair_inverse_sigma)
    state = {name: state[name] for name in (*STATE_FIELDS, *PAIR_FIELDS)}
    if score is not None:
        if n:
            row = _representative_rows(grouping, score, tiebreak)
        else:
            row = np.zeros(0, dtype=np.intp)
        for name, source in (("score", score), ("tiebreak", tiebreak), ("value", value),
                             ("error", error), ("time", time), ("lon", lon), ("lat", lat),
                             ("depth", np.broadcast_to(depth, (n,)))):
            state["representative_" + name] = source[row]
    group_keys = dict(zip(key_names, grouping.group_keys))
    return cls(key_names, group_keys, state, score is not None,
               pair_correlation=pair_correlation)


def _checked_columns(where, n, value, error, time, lon, lat, depth, cross_covariance,
                     partner_error, *, check):
    """The float columns of a batch as float64 arrays (n,); a scalar depth stays a scalar
    when not ``check`` (the kernels take it as the batch's one depth)."""
    value = _float_column(where, "value", value, n, check=check)
    error = _float_column(where, "error", error, n, positive=True, check=check)
    time = _float_column(where, "time", time, n, check=check)
    lon = _float_column(where, "lon", lon, n, check=check)
    lat = _float_column(where, "lat", lat, n, low=-90.0, high=90.0, check=check)
    if check or np.ndim(depth) != 0:
        depth = _float_column(where, "depth", depth, n, check=check)
    else:
        depth = np.float64(depth)
        if not np.isfinite(depth):
            _float_column(where, "depth", depth, n)  # raises, naming the column
    cross_covariance, partner_error = _cross_covariance_columns(
        where, cross_covariance, partner_error, n, check=check)
    return value, error, time, lon, lat, depth, cross_covariance, partner_error


def _checked_score(where, n, score, tiebreak):
    if tiebreak is not None and score is None:
        raise ValueError(f"{where}: 'tiebreak' given without 'score'; the tiebreak only "
                         f"orders observations of equal score")
    if score is not None:
        score = np.asarray(score, dtype=np.float64)
        if score.shape != (n,) or np.isnan(score).any():
            raise ValueError(f"{where}: 'score' must be a float array of shape ({n},) "
                             f"without NaN; got shape {score.shape}")
        if tiebreak is None:
            tiebreak = np.zeros(n, dtype=np.int64)
        else:
            tiebreak = np.asarray(tiebreak)
            if tiebreak.shape != (n,) or tiebreak.dtype.kind not in "iu":
                raise ValueError(f"{where}: 'tiebreak' must be an int64 array of shape "
                                 f"({n},); got dtype {tiebreak.dtype}, shape {tiebreak.shape}")
            tiebreak = tiebreak.astype(np.int64, copy=False)
    return score, tiebreak


def _compiled_state(bins, value, error, time, lon, lat, depth, cross_covariance,
                    partner_error):
    """The per-group state of :data:`STATE_FIELDS` of one batch (n > 0) by the compiled
    kernels of :mod:`obsprep.superobs.batch_kernels`: one pass over the rows for every sum,
    a second only for the groups that need the two-pass M2, a third only when the depth
    varies.  None when an input is invalid or beyond the kernels' range (the caller checks).
    """
    from obsprep.superobs import batch_kernels as bk

    kernels = bk.compiled()
    n_bins = bins.n_bins
    code, renumber = bins.code, bins.renumber
    varying_error = bool(error.min() != error.max())
    varying_depth = depth.ndim == 1 and bool(depth.min() != depth.max())
    has_cross = cross_covariance is not None
    depth_rows = depth if varying_depth else np.zeros(1)
    value_shift = float(np.mean(value))
    time_shift = float(np.mean(time))
    depth_shift = float(np.mean(depth)) if varying_depth else 0.0
    empty = np.zeros(1)
    state = _aligned_zeros(n_bins, bk.STRIDE)
    state[:, bk.MINIMUM] = np.inf
    state[:, bk.MAXIMUM] = -np.inf
    valid = kernels.accumulate_rows(
        code, renumber, state, value, error, time, lon, lat, depth_rows,
        cross_covariance if has_cross else empty, partner_error if has_cross else empty,
        value_shift, time_shift, depth_shift, varying_error, varying_depth, has_cross)
    if not valid:
        return None
    count = bins.count
    # every array of n_bins or n rows is allocated here, by numpy, which asks for huge pages
    moments = np.empty((n_bins, 4))
    risky = np.empty((n_bins, 2), dtype=bool)
    kernels.value_moments(state, count, value_shift, TWO_PASS_RATIO, varying_error, moments,
                          risky)
    risky_bins = risky[:, 0] | risky[:, 1]
    if risky_bins.any():
        rows = np.empty(int(count[risky_bins].sum()), dtype=np.int64)
        kernels.two_pass_moments(code, renumber, value, error, state, count, moments, risky,
                                 risky_bins, rows)
    depth_state = np.empty((n_bins, 6) if varying_depth else (1, 6))
    if varying_depth:
        kernels.depth_moments(code, renumber, depth, value, state, count, moments,
                              np.empty((n_bins, 8)), depth_state)
    keep = bins.keep if bins.keep is not None else np.zeros(0, dtype=np.intp)
    sigma = float(error[0])
    constant_depth = float(depth if depth.ndim == 0 else depth[0])
    n_groups = len(keep) if len(keep) else n_bins
    out = _field_rows(len(bk.OUTPUT_FIELDS), n_groups)
    kernels.group_state(state, count, keep, moments, depth_state, time_shift, depth_shift,
                        sigma, varying_error, varying_depth, constant_depth, has_cross, out)
    out = out[:, :n_groups]
    result = dict(zip(bk.OUTPUT_FIELDS, out))
    result["count"] = (count if bins.keep is None else count[bins.keep]).astype(np.int64,
                                                                              copy=False)
    return result


class _RowBins:
    """Rows -> bins of one batch for the kernels: the bin of row r is ``renumber[code[r]]``
    (``renumber`` empty: ``code[r]``); the other attributes as in :class:`_Grouping`."""

    __slots__ = ("code", "renumber", "n_bins", "count", "keep", "group_keys")

    def __init__(self, code, renumber, n_bins, count, keep, group_keys):
        self.code, self.renumber, self.n_bins = code, renumber, n_bins
        self.count, self.keep, self.group_keys = count, keep, group_keys

    def grouping(self) -> _Grouping:
        """The same bins as a :class:`_Grouping` (the bin of every row in one array)."""
        index = self.renumber[self.code] if len(self.renumber) else self.code
        return _Grouping(index, self.n_bins, self.count, self.keep, self.group_keys)


def _compiled_grouping(key_arrays, kernels) -> _RowBins:
    """:func:`_grouping` with the direct code and the rows per code in one compiled pass
    (:func:`obsprep.superobs.batch_kernels.packed_code_and_count`); the same bins."""
    n = len(key_arrays[0])
    no_renumbering = np.zeros(0, dtype=np.intp)
    direct = _direct_radices(key_arrays, n)
    if direct is None:
        grouping = _grouping(key_arrays)
        return _RowBins(grouping.index, no_renumbering, grouping.n_bins, grouping.count,
                        grouping.keep, grouping.group_keys)
    lows, radices = direct
    n_codes = math.prod(radices)
    varying = [position for position, radix in enumerate(radices) if radix > 1]
    if varying:  # a constant key adds nothing to the code (and may be a broadcast view)
        code, count = np.empty(n, dtype=np.int64), np.zeros(n_codes, dtype=np.int64)
        kernels.packed_code_and_count(
            tuple(np.ascontiguousarray(key_arrays[p]) for p in varying),
            np.array([lows[p] for p in varying], dtype=np.int64),
            np.array([radices[p] for p in varying], dtype=np.int64), code, count)
    else:
        code, count = np.zeros(n, dtype=np.int64), np.array([n], dtype=np.int64)
    occupied, group_keys, dense = _occupied_codes(count, lows, radices)
    if dense:
        keep = None if len(occupied) == n_codes else occupied
        return _RowBins(code, no_renumbering, n_codes, count, keep, group_keys)
    return _RowBins(code, _renumbering(occupied, n_codes), len(occupied), count[occupied], None,
                    group_keys)


def _field_rows(n_fields, n_groups):
    """An empty float64 array (n_fields, >= n_groups) for one field per row, written a column
    (group) at a time: its rows are padded so that they start 17 cache lines apart modulo
    4096 bytes; rows a multiple of 4096 bytes long would all fall into the same set of the
    processor cache (a grid of 800 x 880 x 4 cells is such a length) and evict each other."""
    row_bytes = 8 * n_groups
    pad = ((17 * 64 - row_bytes % 4096) % 4096) // 8
    return np.empty((n_fields, n_groups + pad))


def _aligned_zeros(rows, columns):
    """float64 zeros (rows, columns) whose rows start on 64-byte boundaries (cache lines),
    for ``columns`` a multiple of 8."""
    buffer = np.zeros(rows * columns + 8)
    offset = (-buffer.ctypes.data % 64) // 8
    return buffer[offset:offset + rows * columns].reshape(rows, columns)


def _reference_state(grouping, value, error, time, lon, lat, depth, cross_covariance,
                     partner_error):
    """The per-group state of :data:`STATE_FIELDS` of one batch by numpy, one
    ``np.bincount`` per sum: the reference the compiled kernels are tested against."""
    n = len(value)
    count_float = grouping.count.astype(np.float64)
    compress = grouping.compress

    # Two work buffers of n floats are reused by every per-row product below: fresh
    # temporaries of millions of rows cost more in page faults than the arithmetic.
    work = np.empty(n)
    work_2 = np.empty(n)
    value_mean, value_m2 = _shifted_mean_and_m2(value, grouping, count_float, work)
    weights = None  # per-row 1/sigma^2; None: one error for the whole batch
    if n and error.min() == error.max():
        # one error for the whole batch (a constant error rule): the error sums follow
        # from the counts, and every weighted mean is the plain mean
        sigma = float(error[0])
        weight = 1.0 / (sigma * sigma)
        sum_variance = count_float * (sigma * sigma)
        sum_sigma = count_float * sigma
        sum_inverse_sigma = count_float * (1.0 / sigma)
        sum_inverse_variance = count_float * weight
        weighted_mean = value_mean
        weighted_m2 = value_m2 * weight
    else:
        weights = np.divide(1.0, error)
        sum_inverse_sigma = grouping.sum(weights)
        np.multiply(weights, weights, out=weights)
        sum_inverse_variance = grouping.sum(weights)
        weighted_mean, weighted_m2 = _shifted_mean_and_m2(
            value, grouping, count_float, work, weights, sum_inverse_variance)
        sum_variance = grouping.sum(np.multiply(error, error, out=work))
        sum_sigma = grouping.sum(error)
    time_mean = _shifted_mean(time, grouping, count_float, work=work)
    weighted_time_mean = time_mean if weights is None else _shifted_mean(
        time, grouping, count_float, weights, sum_inverse_variance, work)
    depth_state = _depth_moments(depth, value, value_mean, grouping, count_float)
    depth_state["weighted_depth_mean"] = (
        depth_state["depth_mean"] if weights is None or not depth_state["depth_varies"]
        else _shifted_mean(depth, grouping, count_float, weights, sum_inverse_variance, work))
    sums = _unit_vector_sums(lon, lat, grouping, work, work_2, weights)
    if weights is None:  # constant weight: the weighted sums are the plain ones times it
        sums += tuple(total * weight for total in sums)
    if cross_covariance is None:
        sum_cross = sum_weighted_cross = np.zeros(grouping.n_bins)
    else:
        sum_cross = grouping.sum(cross_covariance)
        # weights of the two components' weighted means: 1/sigma^2 and 1/sigma_partner^2
        np.divide(cross_covariance, np.multiply(error, partner_error, out=work) ** 2,
                  out=work)
        sum_weighted_cross = grouping.sum(work)
    del work, work_2, weights
    value_min = grouping.minimum(value, np.inf)
    value_max = grouping.maximum(value, -np.inf)
    state = {
        "count": compress(grouping.count).astype(np.int64, copy=False),
        "value_mean": compress(value_mean),
        "value_m2": compress(value_m2),
        "value_min": compress(value_min),
        "value_max": compress(value_max),
        "weighted_mean": compress(weighted_mean),
        "weighted_m2": compress(weighted_m2),
        "sum_inverse_variance": compress(sum_inverse_variance),
        "sum_inverse_sigma": compress(sum_inverse_sigma),
        "sum_variance": compress(sum_variance),
        "sum_sigma": compress(sum_sigma),
        "time_mean": compress(time_mean),
        "weighted_time_mean": compress(weighted_time_mean),
        "sum_x": compress(sums[0]), "sum_y": compress(sums[1]), "sum_z": compress(sums[2]),
        "sum_weighted_x": compress(sums[3]), "sum_weighted_y": compress(sums[4]),
        "sum_weighted_z": compress(sums[5]),
        "sum_cross_covariance": compress(sum_cross),
        "sum_weighted_cross_covariance": compress(sum_weighted_cross),
    }
    for name in DEPTH_FIELDS:
        state[name] = compress(depth_state[name])
    for name in DEPTH_FIELDS:
        state[name] = compress(depth_state[name])
    return state


def merge_accumulators(accumulators) -> Accumulator:
    """Combine accumulators of the same keys; see :meth:`Accumulator.merge`."""
    return Accumulator.merge(accumulators)
