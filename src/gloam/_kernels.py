"""Optional compiled kernel for the fuzzy c-means iteration (needs numba).

One call does a whole membership update for every active start: squared
distances in the expanded form ``||x||^2 - 2 x.v + ||v||^2`` (clipped at 0),
the memberships, each row's share of the objective, the largest membership
change, and the weighted sums ``sum_i u_ik^m [x_i, 1]`` the next centroids are
made of.  Rows are processed in blocks that stay in cache, so nothing of size
(n_samples, n_clusters) is written except the memberships themselves.

The one transcendental step per element, ``r^(-p) = exp(-p ln r)``, uses
vectorisable polynomial ``ln`` and ``exp`` written here (the compiler has no
vector maths library to call): ``ln`` by the ``atanh`` series on a mantissa in
``[sqrt(1/2), sqrt(2))`` and ``exp`` by Cody-Waite reduction to ``|f| <= ln(2)/2``
and a degree-11 Taylor polynomial.  Their errors (below 1e-14 relative)
are far under the 1e-10 agreement with the float64 NumPy path that the tests ask
for.

References
----------
Cody, W. J. & Waite, W. (1980). *Software Manual for the Elementary Functions*.
Prentice-Hall.
"""

from __future__ import annotations

import math

import numba
import numpy as np
from numba import njit, prange

__all__ = ["fcm_update", "set_threads"]

_LN2_HI = 6.93147180369123816490e-01  # ln 2 with its low 32 bits zero: e * _LN2_HI is exact
_LN2_LO = 1.90821492927058770002e-10
_LOG2E = 1.4426950408889634
_SQRT2 = 1.4142135623730951
_MANTISSA = 0x000FFFFFFFFFFFFF
_ONE_BITS = 0x3FF0000000000000
# exp(-708) is still a normal float64; clamping there keeps the exponent bits valid.
_EXP_LIMIT = 708.0


_FLAGS = {"reassoc", "contract", "nsz"}


@njit(cache=True, error_model="numpy", fastmath={"contract", "nsz"})
def _ln_mantissa(mant, e):
    """ln(mant * 2^e) for mant in [1, 2) (exponent e as a float)."""
    big = mant > _SQRT2
    mant = mant * 0.5 if big else mant
    e = e + 1.0 if big else e
    s = (mant - 1.0) / (mant + 1.0)
    z = s * s
    # atanh series, truncated after z^7: the remainder is below 2e-14 for |s| <= 0.1716.
    poly = 1.0 / 15.0
    poly = poly * z + 1.0 / 13.0
    poly = poly * z + 1.0 / 11.0
    poly = poly * z + 1.0 / 9.0
    poly = poly * z + 1.0 / 7.0
    poly = poly * z + 1.0 / 5.0
    poly = poly * z + 1.0 / 3.0
    return e * _LN2_HI + (2.0 * s + 2.0 * s * z * poly + e * _LN2_LO)


@njit(cache=True, error_model="numpy", fastmath={"contract", "nsz"})
def _exp_reduced(t):
    """(exp(f), k) with exp(t) = exp(f) 2^k, t clamped to [-708, 708]."""
    t = min(max(t, -_EXP_LIMIT), _EXP_LIMIT)
    k = math.floor(t * _LOG2E + 0.5)
    f = (t - k * _LN2_HI) - k * _LN2_LO
    # Taylor series to f^11: the remainder is below 7e-15 for |f| <= ln(2) / 2.
    poly = 1.0 / 39916800.0
    poly = poly * f + 1.0 / 3628800.0
    poly = poly * f + 1.0 / 362880.0
    poly = poly * f + 1.0 / 40320.0
    poly = poly * f + 1.0 / 5040.0
    poly = poly * f + 1.0 / 720.0
    poly = poly * f + 1.0 / 120.0
    poly = poly * f + 1.0 / 24.0
    poly = poly * f + 1.0 / 6.0
    poly = poly * f + 0.5
    poly = poly * f + 1.0
    poly = poly * f + 1.0
    return poly, (np.int64(k) + 1023) << 52


@njit(cache=True, error_model="numpy", fastmath={"contract", "nsz"})
def _split(src_bits, exponents, mantissa_bits, size):
    """Exponent (as float) and mantissa bits (with exponent 0) of non-negative floats."""
    for i in range(size):
        b = src_bits[i]
        exponents[i] = float((b >> 52) - 1023)
        mantissa_bits[i] = (b & _MANTISSA) | _ONE_BITS


@njit(cache=True, error_model="numpy", fastmath={"contract", "nsz"})
def _power_rows(values, values_bits, power, out, tmp, tmp_bits, size):
    """out[:size] = values[:size] ** power for values > 0 (per-row quantities)."""
    _split(values_bits, out, tmp_bits, size)
    for i in range(size):
        out[i] = power * _ln_mantissa(tmp[i], out[i])
    for i in range(size):
        poly, bits = _exp_reduced(out[i])
        out[i] = poly
        tmp_bits[i] = bits
    for i in range(size):
        out[i] *= tmp[i]


@njit(cache=True, error_model="numpy", fastmath=_FLAGS)
def _column_totals(weights, rows, n_clusters, n_features, acc):
    """acc[k, d] += sum_i weights[k * rows + i]."""
    for k in range(n_clusters):
        base = k * rows
        total = 0.0
        for i in range(rows):
            total += weights[base + i]
        acc[k, n_features] += total


@njit(cache=True, error_model="numpy", fastmath={"contract", "nsz"}, parallel=True)
def fcm_update(
    samples,
    features,
    squared_norms,
    centroids,
    memberships,
    active,
    m,
    coincidence_relative,
    chunk_rows,
    block_rows,
    acc,
    row_objective,
    change,
):
    """One membership update of every active start, in place.

    Parameters
    ----------
    samples : float64 (n_samples, n_features), the data.
    features : float64 (n_features, n_samples), the same data feature-major.
    squared_norms : float64 (n_samples,), ``||x_i||^2``.
    centroids : float64 (n_starts, n_clusters, n_features).
    memberships : float64 (n_starts, n_samples, n_clusters); the old memberships on
        entry, the new ones (optimal for ``centroids``) on exit for active starts.
    active : int64 (n_active,), the starts to update.
    m : fuzzifier.  coincidence_relative : see ``gloam.fcm._COINCIDENCE_RELATIVE``.
    chunk_rows, block_rows : rows per parallel work unit and per cache block.
    acc : float64 (n_active * n_chunks, n_clusters, n_features + 1), overwritten with
        each unit's ``sum_i u_ik^m [x_i, 1]`` over its rows (new memberships).
    row_objective, change : float64 (n_active * n_chunks,), overwritten with each
        unit's share of ``J_m`` and its largest absolute membership change.
    """
    n_features, n_samples = features.shape
    n_clusters = centroids.shape[1]
    n_chunks = (n_samples + chunk_rows - 1) // chunk_rows
    p = 1.0 / (m - 1.0)
    n_units = active.shape[0] * n_chunks
    for unit in prange(n_units):
        start = active[unit // n_chunks]
        chunk = unit % n_chunks
        size = n_clusters * block_rows
        dist = np.empty(size)
        work = np.empty(size)
        logs = np.empty(size)
        scale = np.empty(size)
        dist_bits = dist.view(np.int64)
        scale_bits = scale.view(np.int64)
        nearest = np.empty(block_rows)
        nearest_log = np.empty(block_rows)
        floor = np.empty(block_rows)
        totals = np.empty(block_rows)
        row_j = np.empty(block_rows)
        row_tmp = np.empty(block_rows)
        nearest_bits = nearest.view(np.int64)
        totals_bits = totals.view(np.int64)
        row_tmp_bits = row_tmp.view(np.int64)
        flagged = np.empty(block_rows, dtype=np.int64)
        weights = -2.0 * centroids[start]
        vnorms = np.empty(n_clusters)
        largest = 0.0
        for k in range(n_clusters):
            vn = 0.0
            for j in range(n_features):
                vn += centroids[start, k, j] * centroids[start, k, j]
            vnorms[k] = vn
            largest = max(largest, vn)
        unit_acc = acc[unit]
        unit_acc[:, :] = 0.0
        objective_sum = 0.0
        largest_change = 0.0
        chunk_lo = chunk * chunk_rows
        chunk_hi = min(chunk_lo + chunk_rows, n_samples)
        for lo in range(chunk_lo, chunk_hi, block_rows):
            rows = min(block_rows, chunk_hi - lo)
            total = n_clusters * rows
            # Squared distances, cluster-major dist[k * rows + i]; the product through BLAS.
            products = np.dot(weights, np.ascontiguousarray(features[:, lo : lo + rows]))
            for i in range(rows):
                nearest[i] = np.inf
                floor[i] = coincidence_relative * (squared_norms[lo + i] + largest + 1.0)
            for k in range(n_clusters):
                base = k * rows
                vn = vnorms[k]
                for i in range(rows):
                    value = max(products[k, i] + (squared_norms[lo + i] + vn), 0.0)
                    dist[base + i] = value
                    nearest[i] = min(nearest[i], value)
            n_flagged = 0
            for i in range(rows):
                if nearest[i] <= floor[i]:
                    flagged[n_flagged] = i
                    n_flagged += 1
            for f in range(n_flagged):
                nearest[flagged[f]] = 1.0
            # ln r = ln D - ln min_j D >= 0, so r^(-p) = exp(-p ln r) lies in (0, 1].
            _split(nearest_bits, nearest_log, row_tmp_bits, rows)
            for i in range(rows):
                nearest_log[i] = _ln_mantissa(row_tmp[i], nearest_log[i])
            _split(dist_bits, logs, scale_bits, total)
            for k in range(n_clusters):
                base = k * rows
                for i in range(rows):
                    e = base + i
                    log_ratio = _ln_mantissa(scale[e], logs[e]) - nearest_log[i]
                    poly, bits = _exp_reduced(-p * log_ratio)
                    work[e] = poly
                    scale_bits[e] = bits
            for i in range(rows):
                totals[i] = 0.0
            for k in range(n_clusters):
                base = k * rows
                for i in range(rows):
                    e = base + i
                    value = work[e] * scale[e]
                    work[e] = value
                    totals[i] += value
            # J_i = min_j D_ij * S_i^(1 - m), one power per row (module docstring of fcm).
            _power_rows(totals, totals_bits, 1.0 - m, row_j, row_tmp, row_tmp_bits, rows)
            for i in range(rows):
                row_j[i] *= nearest[i]
                row_tmp[i] = 1.0 / totals[i]
            # u = r^(-p) / S and u^m = u J_i / D (into `logs`).
            for k in range(n_clusters):
                base = k * rows
                for i in range(rows):
                    e = base + i
                    u = work[e] * row_tmp[i]
                    work[e] = u
                    logs[e] = u * row_j[i] / dist[e]
            for f in range(n_flagged):
                i = flagged[f]
                hits = 0
                for k in range(n_clusters):
                    if dist[k * rows + i] <= floor[i]:
                        hits += 1
                share = 1.0 / hits
                powered = share**m
                contribution = 0.0
                for k in range(n_clusters):
                    e = k * rows + i
                    if dist[e] <= floor[i]:
                        work[e] = share
                        logs[e] = powered
                        contribution += powered * dist[e]
                    else:
                        work[e] = 0.0
                        logs[e] = 0.0
                row_j[i] = contribution
            for i in range(rows):
                objective_sum += row_j[i]
                row = memberships[start, lo + i]
                for k in range(n_clusters):
                    new = work[k * rows + i]
                    largest_change = max(largest_change, abs(row[k] - new))
                    row[k] = new
            _column_totals(logs, rows, n_clusters, n_features, unit_acc)
            unit_acc[:, :n_features] += np.dot(
                logs[:total].reshape((n_clusters, rows)), samples[lo : lo + rows]
            )
        row_objective[unit] = objective_sum
        change[unit] = largest_change


def set_threads(n_threads: int) -> int:
    """Set numba's thread count (capped at its pool size); returns the previous count."""
    previous = numba.get_num_threads()
    numba.set_num_threads(max(1, min(int(n_threads), numba.config.NUMBA_NUM_THREADS)))
    return previous
