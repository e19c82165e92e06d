"""Compiled loops that accumulate one batch of raw observations into per-bin sums.

:meth:`obsprep.superobs.accumulate.Accumulator.from_observations` groups the rows of a batch
into bins (one bin per key combination) and needs about twenty sums per bin.  Taken one at a
time (one ``np.bincount`` per sum) every sum is a pass over all rows with a random access per
row into an array of its own.  Here one pass over the rows updates every sum of a row's bin
together, and a bin's sums sit next to each other in memory (one row of a 2-D float64 array of
:data:`STRIDE` columns, three cache lines), so a row costs one visit to its bin.

The arithmetic is that of the numpy computation in ``accumulate.py`` operation for operation,
and the rows of a bin are added in the same order (row order, as ``np.bincount`` does), so the
sums are the same numbers, bit for bit, except the unit vectors: their sines and cosines come
from :func:`cos_sin_degrees` here (a few units in the last place from the tangent half-angle
formulas of :func:`obsprep.geo.sphere.cos_sin_degrees`).  Nothing is summed in parallel: a batch
is one sequential loop, so the result does not depend on the machine's threads.  No fast-math
flags are used (they would let the compiler reorder sums and fuse multiply-adds, which changes
the bits from one processor to another).

The loops are compiled with numba on first use (importing obsprep does not import numba) and
cached on disk, with the cache rule of :mod:`obsprep.superobs.pairs`: next to this file when its
``__pycache__`` is writable, else in numba's user cache directory (``$XDG_CACHE_HOME/numba`` or
``~/.cache/numba``), ``NUMBA_CACHE_DIR`` first when set; with no writable directory at all they
are compiled in memory for each process, with a warning.
"""

from __future__ import annotations

import functools
import math

import numpy as np

#: columns of the per-bin sums (:func:`accumulate_rows`); three 64-byte cache lines per bin,
#: the sums every batch needs in the first
STRIDE = 24
# line 1: every batch
S_DEVIATION = 0          #: sum (v - c_v), c_v the batch's value shift
S_DEVIATION_SQUARED = 1  #: sum (v - c_v)^2
MINIMUM = 2              #: smallest value
MAXIMUM = 3              #: largest value
S_TIME = 4               #: sum (t - c_t), s
S_X = 5                  #: sum of unit-vector x components
S_Y = 6                  #: sum of unit-vector y components
S_Z = 7                  #: sum of unit-vector z components
# line 2: errors that vary within the batch (w = 1/sigma^2)
S_INVERSE_SIGMA = 8      #: sum 1/sigma
S_INVERSE_VARIANCE = 9   #: sum w
S_W_DEVIATION = 10       #: sum w (v - c_v)
S_W_DEVIATION_SQUARED = 11  #: sum w (v - c_v)^2
S_VARIANCE = 12          #: sum sigma^2
S_SIGMA = 13             #: sum sigma
S_W_TIME = 14            #: sum w (t - c_t)
S_WX = 15                #: sum w x
# line 3
S_WY = 16                #: sum w y
S_WZ = 17                #: sum w z
S_DEPTH = 18             #: sum of depths (m), the first pass of the depth moments
S_W_DEPTH = 19           #: sum w (d - c_d)
S_CROSS = 20             #: sum of the cross covariances
S_W_CROSS = 21           #: sum cross / (sigma sigma_partner)^2

#: rows whose unit vectors are evaluated together (a block stays in the processor cache)
BLOCK = 1024
#: rows ahead whose bin's sums are fetched into the cache (:func:`_prefetch`): rows in random
#: bins then wait for memory together instead of one after the other (measured here: five times
#: faster for 20 M rows in 2.8 M random bins; 8 to 64 rows ahead all do about as well)
PREFETCH_ROWS = 16

_HALF_CIRCLE = 180.0
_RADIANS_PER_DEGREE = math.pi / 180.0

# Taylor coefficients of sin r / r and cos r in r^2: (-1)^k / (2k+1)! and (-1)^k / (2k)!
_S1, _S2, _S3, _S4 = -1.0 / 6.0, 1.0 / 120.0, -1.0 / 5040.0, 1.0 / 362880.0
_S5, _S6, _S7, _S8 = -1.0 / 39916800.0, 1.0 / 6227020800.0, -1.0 / 1307674368000.0, \
    1.0 / 355687428096000.0
_C1, _C2, _C3, _C4 = -0.5, 1.0 / 24.0, -1.0 / 720.0, 1.0 / 40320.0
_C5, _C6, _C7, _C8, _C9 = -1.0 / 3628800.0, 1.0 / 479001600.0, -1.0 / 87178291200.0, \
    1.0 / 20922789888000.0, -1.0 / 6402373705728000.0


def cos_sin_degrees(angle):
    """(cos, sin) of ``angle`` in degrees, |angle| up to 2^50 degrees.

    The angle is reduced to :math:`a = 90 k + r`, :math:`|r| \\le 45` degrees, exactly (both
    terms are multiples of the angle's last place), so the reduction adds no error; with
    :math:`\\rho = r \\pi / 180` (radians, one rounding)

    .. math::
        \\sin\\rho = \\rho \\sum_{m=0}^{8} \\frac{(-\\rho^2)^m}{(2m+1)!}, \\quad
        \\cos\\rho = \\sum_{m=0}^{9} \\frac{(-\\rho^2)^m}{(2m)!}

    (the Taylor series, [AbramowitzStegun1964] 4.3.65 and 4.3.66, from memory; the first term
    left out is below 2e-19 for :math:`|\\rho| \\le \\pi/4`), then rotated by :math:`k \\cdot 90`
    degrees: :math:`(\\cos a, \\sin a) = (c, s), (-s, c), (-c, -s), (s, -c)` for k mod 4 = 0..3.
    Accurate to a few units in the last place; exact at multiples of 90 degrees.  No branch
    and no library call, so the compiler can evaluate several rows at once.
    """
    k = math.floor(angle * (1.0 / 90.0) + 0.5)
    r = (angle - 90.0 * k) * _RADIANS_PER_DEGREE
    r2 = r * r
    s = r + r * r2 * (_S1 + r2 * (_S2 + r2 * (_S3 + r2 * (_S4 + r2 * (
        _S5 + r2 * (_S6 + r2 * (_S7 + r2 * _S8)))))))
    c = 1.0 + r2 * (_C1 + r2 * (_C2 + r2 * (_C3 + r2 * (_C4 + r2 * (
        _C5 + r2 * (_C6 + r2 * (_C7 + r2 * (_C8 + r2 * _C9))))))))
    quadrant = k - 4.0 * math.floor(k * 0.25)  # k mod 4, exact in floating point
    # selects and sign flips without branches (| not "or"), so that loops vectorise
    odd = (quadrant == 1.0) | (quadrant == 3.0)
    cos_a = s if odd else c
    sin_a = c if odd else s
    cos_sign = -1.0 if (quadrant == 1.0) | (quadrant == 2.0) else 1.0
    sin_sign = -1.0 if quadrant >= 2.0 else 1.0
    return cos_a * cos_sign, sin_a * sin_sign


def packed_code_and_count(keys, lows, radices, code, count):
    """The mixed-radix code of every row and the rows per code, one pass over the rows.

    ``keys`` a tuple of int64 arrays (the keys that vary, first most significant), ``lows`` and
    ``radices`` their smallest value and range (max - min + 1):
    :math:`c = (\\ldots((k_1 - l_1) R_2 + (k_2 - l_2)) R_3 + \\ldots) + (k_m - l_m)`, in
    0..n_codes-1 (n_codes the product of the radices).  Fills ``code`` (n,) and adds to
    ``count`` (n_codes,), both int64 (allocated by numpy, which asks for huge pages: page faults
    of fresh memory would otherwise cost as much as the loop).
    """
    n = len(keys[0])
    for r in range(n):
        c = 0
        for position in range(len(keys)):
            c = c * radices[position] + (keys[position][r] - lows[position])
        code[r] = c
        count[c] += 1


def _bin(code, renumber, r):
    """The bin of row r: ``renumber[code[r]]``, or ``code[r]`` when ``renumber`` is empty."""
    return renumber[code[r]] if len(renumber) else code[r]


def _prefetch(array, index):
    """Ask the processor to fetch the cache line of ``array.flat[index]`` for writing, without
    waiting for it.  A no-op here; :func:`compiled` puts the compiled intrinsic in its place."""


def _unit_vectors_block(lon, lat, start, stop, x, y, z):
    """x, y, z[0:stop-start] = the unit vectors cos(lat) cos(lon), cos(lat) sin(lon), sin(lat)
    of rows start..stop-1 (degrees in, dimensionless out)."""
    for k in range(stop - start):
        cos_lon, sin_lon = _cos_sin(lon[start + k])
        cos_lat, sin_lat = _cos_sin(lat[start + k])
        x[k] = cos_lon * cos_lat
        y[k] = sin_lon * cos_lat
        z[k] = sin_lat


def accumulate_rows(code, renumber, state, value, error, time, lon, lat, depth, cross, partner,
                    value_shift, time_shift, depth_shift, varying_error, varying_depth,
                    has_cross):
    """Add every row to the sums of its bin, one pass over the rows.

    ``state`` (n_bins, :data:`STRIDE`) float64 is updated in place; it starts at zero with
    ``MINIMUM`` at +inf and ``MAXIMUM`` at -inf.  For row r in bin b (:func:`_bin`), with
    :math:`\\delta v = v - c_v`, :math:`\\delta t = t - c_t` (the shifts, units of the value
    and s), :math:`w = (1/\\sigma)^2` and unit vector (x, y, z) of (lon, lat):

    - always: :math:`\\sum \\delta v`, :math:`\\sum \\delta v^2`, min v, max v,
      :math:`\\sum \\delta t`, :math:`\\sum x, \\sum y, \\sum z`;
    - ``varying_error``: :math:`\\sum 1/\\sigma`, :math:`\\sum w`, :math:`\\sum w\\,\\delta v`,
      :math:`\\sum (w\\,\\delta v)\\,\\delta v`, :math:`\\sum \\sigma^2`, :math:`\\sum \\sigma`,
      :math:`\\sum w\\,\\delta t`, :math:`\\sum x w, \\sum y w, \\sum z w`;
    - ``varying_depth``: :math:`\\sum d` (m) and, with ``varying_error``,
      :math:`\\sum w (d - c_d)`;
    - ``has_cross``: :math:`\\sum c` and :math:`\\sum c / (\\sigma \\sigma_p)^2` (c the cross
      covariance, units of the value squared; :math:`\\sigma_p` the partner's error).

    Returns True when every input was valid (finite; sigma and the partner's sigma > 0; lat
    within -90..90; |lon| below 2^50), else False and the sums are meaningless.
    """
    n = len(code)
    flat_state = state.reshape(-1)
    x = np.empty(BLOCK)
    y = np.empty(BLOCK)
    z = np.empty(BLOCK)
    valid = True
    for start in range(0, n, BLOCK):
        stop = min(start + BLOCK, n)
        _unit_vectors_block(lon, lat, start, stop, x, y, z)
        for r in range(start, stop):
            if len(renumber) and r + 2 * PREFETCH_ROWS < n:
                _prefetch(renumber, code[r + 2 * PREFETCH_ROWS])  # the bin needed next
            if r + PREFETCH_ROWS < n:
                ahead = _bin(code, renumber, r + PREFETCH_ROWS) * STRIDE
                _prefetch(flat_state, ahead)
                _prefetch(flat_state, ahead + 8)
                _prefetch(flat_state, ahead + 16)
            b = _bin(code, renumber, r)
            v = value[r]
            dv = v - value_shift
            dt = time[r] - time_shift
            ok = (abs(v) < math.inf) & (abs(dt) < math.inf) & (abs(lat[r]) <= 90.0) \
                & (abs(lon[r]) < 1.0e15)
            state[b, S_DEVIATION] += dv
            state[b, S_DEVIATION_SQUARED] += dv * dv
            if v < state[b, MINIMUM]:
                state[b, MINIMUM] = v
            if v > state[b, MAXIMUM]:
                state[b, MAXIMUM] = v
            state[b, S_TIME] += dt
            k = r - start
            state[b, S_X] += x[k]
            state[b, S_Y] += y[k]
            state[b, S_Z] += z[k]
            sigma = error[r]
            ok &= (sigma > 0.0) & (sigma < math.inf)
            if varying_error:
                inverse_sigma = 1.0 / sigma
                w = inverse_sigma * inverse_sigma
                state[b, S_INVERSE_SIGMA] += inverse_sigma
                state[b, S_INVERSE_VARIANCE] += w
                weighted = w * dv
                state[b, S_W_DEVIATION] += weighted
                state[b, S_W_DEVIATION_SQUARED] += weighted * dv
                state[b, S_VARIANCE] += sigma * sigma
                state[b, S_SIGMA] += sigma
                state[b, S_W_TIME] += w * dt
                state[b, S_WX] += x[k] * w
                state[b, S_WY] += y[k] * w
                state[b, S_WZ] += z[k] * w
                if varying_depth:
                    state[b, S_W_DEPTH] += w * (depth[r] - depth_shift)
            if varying_depth:
                d = depth[r]
                ok &= abs(d) < math.inf
                state[b, S_DEPTH] += d
            if has_cross:
                c = cross[r]
                p = partner[r]
                ok &= (abs(c) < math.inf) & (p > 0.0) & (p < math.inf)
                product = sigma * p
                state[b, S_CROSS] += c
                state[b, S_W_CROSS] += c / (product * product)
            valid &= ok
    return valid


def value_moments(state, count, value_shift, ratio, varying_error, moments, risky):
    """Per bin, the mean and M2 of the values from the shifted sums, and where they are risky.

    Fills ``moments`` (n_bins, 4): mean, M2, weighted mean, weighted M2, and ``risky``
    (n_bins, 2) bool: where the one-pass form loses too many digits (unweighted, weighted).
    With :math:`S_1 = \\sum \\delta v`, :math:`S_2 = \\sum \\delta v^2` and total n (or
    :math:`W = \\sum w`, :math:`S_1 = \\sum w \\delta v`, :math:`S_2 = \\sum w \\delta v^2`):
    :math:`\\bar v = c_v + S_1/n`, :math:`M_2 = \\max(S_2 - S_1 (S_1/n), 0)` ([Chan1983]); risky
    where :math:`S_1 (S_1/n) > \\text{ratio}\\, M_2` and n > 1.  Empty bins give NaN.
    """
    n_bins = state.shape[0]
    for b in range(n_bins):
        n = float(count[b])
        risky[b, 1] = False
        _one_pass(state[b, S_DEVIATION], state[b, S_DEVIATION_SQUARED], n, n, value_shift,
                  ratio, moments, risky, b, 0)
        if varying_error:
            _one_pass(state[b, S_W_DEVIATION], state[b, S_W_DEVIATION_SQUARED],
                      state[b, S_INVERSE_VARIANCE], n, value_shift, ratio, moments, risky, b, 1)


def _one_pass(s1, s2, total, n, shift, ratio, moments, risky, b, column):
    """moments[b, 2 column: 2 column + 2] and risky[b, column] from the shifted sums."""
    mean_deviation = s1 / total
    between = s1 * mean_deviation
    m2 = max(s2 - between, 0.0)
    moments[b, 2 * column] = shift + mean_deviation
    moments[b, 2 * column + 1] = m2
    risky[b, column] = (between > ratio * m2) and n > 1.0


#: columns of ``state`` that :func:`two_pass_moments` uses (free once the moments are taken):
#: raw sum, sum of deviations, sum of squared deviations; unweighted, then weighted
_TWO_PASS_COLUMNS = ((22, S_DEVIATION, S_DEVIATION_SQUARED),
                     (23, S_W_DEVIATION, S_W_DEVIATION_SQUARED))


def two_pass_moments(code, renumber, value, error, state, count, moments, risky, risky_bin,
                     rows):
    """Recompute mean and M2 of the risky bins by the corrected two-pass algorithm, in place.

    For a risky bin, :math:`f = \\sum x / n` (or :math:`\\sum w x / W`), :math:`e = x - f`,
    :math:`\\bar x = f + \\sum e / n`, :math:`M_2 = \\max(\\sum e^2 - (\\sum e)^2 / n, 0)`
    (weighted: :math:`\\sum w e` and :math:`\\sum (w e) e` with W; [Chan1983]).  One pass
    over all rows finds the rows of the risky bins (``risky_bin``: bool per bin, either column of
    ``risky``) into ``rows`` (int64, as many as they have), two over those rows add.  Scratch sums in the free columns of ``state``.
    """
    n_bins = state.shape[0]
    for b in range(n_bins):
        for column in range(2):
            if risky[b, column]:
                for scratch in _TWO_PASS_COLUMNS[column]:
                    state[b, scratch] = 0.0
    found = 0
    n = len(code)
    for r in range(n):
        if len(renumber) and r + PREFETCH_ROWS < n:
            _prefetch(renumber, code[r + PREFETCH_ROWS])
        if risky_bin[_bin(code, renumber, r)]:
            rows[found] = r
            found += 1
    for r in rows[:found]:
        b = _bin(code, renumber, r)
        if risky[b, 0]:
            state[b, 22] += value[r]
        if risky[b, 1]:
            inverse_sigma = 1.0 / error[r]
            state[b, 23] += inverse_sigma * inverse_sigma * value[r]
    for b in range(n_bins):  # raw sums -> first-pass means
        if risky[b, 0]:
            state[b, 22] = state[b, 22] / float(count[b])
        if risky[b, 1]:
            state[b, 23] = state[b, 23] / state[b, S_INVERSE_VARIANCE]
    for r in rows[:found]:
        b = _bin(code, renumber, r)
        if risky[b, 0]:
            e = value[r] - state[b, 22]
            state[b, S_DEVIATION] += e
            state[b, S_DEVIATION_SQUARED] += e * e
        if risky[b, 1]:
            inverse_sigma = 1.0 / error[r]
            e = value[r] - state[b, 23]
            weighted = inverse_sigma * inverse_sigma * e
            state[b, S_W_DEVIATION] += weighted
            state[b, S_W_DEVIATION_SQUARED] += weighted * e
    for b in range(n_bins):
        for column in range(2):
            if risky[b, column]:
                first_column, s1_column, s2_column = _TWO_PASS_COLUMNS[column]
                total = float(count[b]) if column == 0 else state[b, S_INVERSE_VARIANCE]
                s1 = state[b, s1_column]
                moments[b, 2 * column] = state[b, first_column] + s1 / total
                moments[b, 2 * column + 1] = max(state[b, s2_column] - s1 * s1 / total, 0.0)


def depth_moments(code, renumber, depth, value, state, count, moments, sums, out):
    """Per bin the depth moments of :func:`obsprep.superobs.accumulate._depth_moments`.

    Fills ``out`` (n_bins, 6), the columns in the order of :data:`OUTPUT_FIELDS`: mean depth
    (m), M2 (m^2), the co-moment :math:`C_2 = \\sum (d - \\bar d)(v - \\bar v)`, M3, M4 (m^3, m^4) and
    :math:`C_3 = \\sum (d - \\bar d)^2 (v - \\bar v)`.
    With the first-pass mean :math:`d_f = \\sum d / n`, :math:`P_p = \\sum (d - d_f)^p`,
    :math:`s = P_1 / n`: :math:`\\bar d = d_f + s`, :math:`M_2 = \\max(P_2 - n s^2, 0)`,
    :math:`M_3 = P_3 - 3 s P_2 + 2 n s^3`, :math:`M_4 = \\max(P_4 - 4 s P_3 + 6 s^2 P_2 - 3 n
    s^4, 0)`, and with :math:`V_1 = \\sum (v - \\bar v)`, :math:`D = \\sum (d - d_f)(v - \\bar v)`,
    :math:`E = \\sum (d - d_f)^2 (v - \\bar v)`: :math:`C_2 = D - s V_1`,
    :math:`C_3 = E - 2 s D + s^2 V_1` (the binomial theorem; [Chan1983] carried to higher
    moments).  ``sums`` (n_bins, 8) is scratch.
    """
    n_bins = state.shape[0]
    first = sums[:, 7]
    for b in range(n_bins):
        first[b] = state[b, S_DEPTH] / float(count[b])
        for column in range(7):
            sums[b, column] = 0.0  # P1..P4, V1, D, E
    flat_sums = sums.reshape(-1)
    n = len(code)
    for r in range(n):
        if r + PREFETCH_ROWS < n:
            _prefetch(flat_sums, _bin(code, renumber, r + PREFETCH_ROWS) * 8)
        b = _bin(code, renumber, r)
        d = depth[r] - first[b]
        v = value[r] - moments[b, 0]
        d2 = d * d
        sums[b, 0] += d
        sums[b, 1] += d2
        sums[b, 2] += d2 * d
        sums[b, 3] += d2 * d2
        sums[b, 4] += v
        sums[b, 5] += d * v
        sums[b, 6] += d2 * v
    for b in range(n_bins):
        n = float(count[b])
        shift = sums[b, 0] / n
        p2, p3, p4, sum_v, dv, d2v = (sums[b, 1], sums[b, 2], sums[b, 3], sums[b, 4],
                                      sums[b, 5], sums[b, 6])
        out[b, 0] = first[b] + shift
        out[b, 1] = max(p2 - n * (shift * shift), 0.0)
        out[b, 2] = dv - shift * sum_v
        out[b, 3] = p3 - 3.0 * shift * p2 + 2.0 * n * math.pow(shift, 3.0)
        out[b, 4] = max(p4 - 4.0 * shift * p3 + 6.0 * (shift * shift) * p2
                        - 3.0 * n * math.pow(shift, 4.0), 0.0)
        out[b, 5] = d2v - 2.0 * shift * dv + (shift * shift) * sum_v


#: rows of the output of :func:`group_state`, in this order
OUTPUT_FIELDS = ("value_mean", "value_m2", "value_min", "value_max", "weighted_mean",
                 "sum_inverse_variance", "sum_inverse_sigma", "sum_variance", "sum_sigma",
                 "time_mean", "sum_x", "sum_y", "sum_z", "depth_mean", "depth_m2",
                 "depth_value_c2", "depth_m3", "depth_m4", "depth2_value_c3", "weighted_m2",
                 "weighted_time_mean", "weighted_depth_mean", "sum_weighted_x",
                 "sum_weighted_y", "sum_weighted_z", "sum_cross_covariance",
                 "sum_weighted_cross_covariance")


def group_state(state, count, keep, moments, depth, time_shift, depth_shift, sigma,
                varying_error, varying_depth, constant_depth, has_cross, out):
    """The per-group state fields (:data:`OUTPUT_FIELDS`, one row each of ``out``, shape
    (len(OUTPUT_FIELDS), n_groups)) of the occupied bins.

    ``keep``: the occupied bins in group order (empty: bin g is group g).  Means are
    shift + sum of deviations / total (time: :math:`c_t + \\sum \\delta t / n`, weighted
    :math:`c_t + \\sum w \\delta t / W`; the weighted mean depth likewise about :math:`c_d`).
    With one error ``sigma`` for the whole batch (not ``varying_error``) the error sums follow
    from the counts: :math:`\\sum \\sigma^2 = n \\sigma^2`, :math:`\\sum \\sigma = n \\sigma`,
    :math:`\\sum 1/\\sigma = n (1/\\sigma)`, :math:`W = n w`, and the weighted statistics are
    the plain ones (M2 and the vector sums times w).  With a constant depth (not
    ``varying_depth``) the mean depth is ``constant_depth`` and the depth moments 0.
    """
    n_groups = len(keep) if len(keep) else state.shape[0]
    weight = 1.0 / (sigma * sigma)
    for g in range(n_groups):
        b = keep[g] if len(keep) else g
        n = float(count[b])
        out[0, g] = moments[b, 0]
        out[1, g] = moments[b, 1]
        out[2, g] = state[b, MINIMUM]
        out[3, g] = state[b, MAXIMUM]
        time_mean = time_shift + state[b, S_TIME] / n
        out[9, g] = time_mean
        out[10, g] = state[b, S_X]
        out[11, g] = state[b, S_Y]
        out[12, g] = state[b, S_Z]
        if varying_depth:
            for column in range(6):
                out[13 + column, g] = depth[b, column]
        else:
            out[13, g] = constant_depth
            for column in range(1, 6):
                out[13 + column, g] = 0.0
        if varying_error:
            total = state[b, S_INVERSE_VARIANCE]
            out[4, g] = moments[b, 2]
            out[5, g] = total
            out[6, g] = state[b, S_INVERSE_SIGMA]
            out[7, g] = state[b, S_VARIANCE]
            out[8, g] = state[b, S_SIGMA]
            out[19, g] = moments[b, 3]
            out[20, g] = time_shift + state[b, S_W_TIME] / total
            out[21, g] = (depth_shift + state[b, S_W_DEPTH] / total) if varying_depth \
                else out[13, g]
            out[22, g] = state[b, S_WX]
            out[23, g] = state[b, S_WY]
            out[24, g] = state[b, S_WZ]
        else:
            out[4, g] = moments[b, 0]
            out[5, g] = n * weight
            out[6, g] = n * (1.0 / sigma)
            out[7, g] = n * (sigma * sigma)
            out[8, g] = n * sigma
            out[19, g] = moments[b, 1] * weight
            out[20, g] = time_mean
            out[21, g] = out[13, g]
            out[22, g] = state[b, S_X] * weight
            out[23, g] = state[b, S_Y] * weight
            out[24, g] = state[b, S_Z] * weight
        out[25, g] = state[b, S_CROSS] if has_cross else 0.0
        out[26, g] = state[b, S_W_CROSS] if has_cross else 0.0


# --------------------------------------------------------------------------------------------
# compilation

_cos_sin = cos_sin_degrees  # rebound to the compiled function by compiled()

_OPTIONS = dict(nogil=True, error_model="numpy")

#: the plain-Python functions compiled by :func:`compiled`, callees before their callers
_KERNELS = ("cos_sin_degrees", "_bin", "_unit_vectors_block", "_one_pass",
            "packed_code_and_count", "accumulate_rows",
            "value_moments", "two_pass_moments", "depth_moments", "group_state")


#: inlined into their callers (the caller's loop vectorises, or the call costs more than it)
_INLINED = ("cos_sin_degrees", "_bin")


def _prefetch_intrinsic(numba):
    """:func:`_prefetch` as a numba intrinsic: LLVM's ``llvm.prefetch`` (write, keep in all
    cache levels, data) of the address of element ``index`` of a contiguous 1-D array."""
    from llvmlite import ir
    from numba.core import cgutils
    from numba.extending import intrinsic

    @intrinsic
    def prefetch(typing_context, array, index):
        def codegen(context, builder, signature, arguments):
            data = context.make_array(signature.args[0])(context, builder, arguments[0]).data
            byte_pointer = ir.IntType(8).as_pointer()
            i32 = ir.IntType(32)
            function = cgutils.get_or_insert_function(
                builder.module, ir.FunctionType(ir.VoidType(), [byte_pointer, i32, i32, i32]),
                "llvm.prefetch.p0i8")
            address = builder.bitcast(builder.gep(data, [arguments[1]]), byte_pointer)
            builder.call(function, [address, i32(1), i32(3), i32(1)])
            return context.get_dummy_value()

        return numba.types.void(array, index), codegen

    return prefetch


@functools.cache
def compiled():
    """The compiled kernels (built, or loaded from numba's on-disk cache, on first call):
    a namespace with the functions of :data:`_KERNELS` (leading underscores dropped)."""
    import types

    import numba  # here, not at module level: numba takes a few tenths of a second to import

    from obsprep.compiled import compile_cached

    cache = True
    namespace = globals()
    if not numba.config.DISABLE_JIT:  # an intrinsic cannot run as Python: keep the no-op
        namespace["_prefetch"] = _prefetch_intrinsic(numba)
    kernels = {}
    for name in _KERNELS:
        function = namespace[name]
        # the sine and cosine are inlined into the loop that calls them (vectorised there)
        options = dict(_OPTIONS, inline="always") if name in _INLINED else _OPTIONS
        kernel, cache = compile_cached(function, "obsprep.superobs.batch_kernels (the "
                                       "accumulation kernels)", cache=cache, **options)
        # callers compiled later find the compiled callee under the module-level name
        namespace["_cos_sin" if name == "cos_sin_degrees" else name] = kernel
        kernels[name.lstrip("_")] = kernel
    return types.SimpleNamespace(**kernels)
