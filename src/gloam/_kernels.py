"""Optional compiled kernel for the fuzzy c-means iteration (needs numba).

One call does a whole membership update for every active start: squared
distances in the expanded form ``||x||^2 - 2 x.v + ||v||^2`` (one BLAS product
of augmented rows, clipped at 0), the memberships, each row's share of the
objective, the largest membership change, and the weighted sums
``sum_i u_ik^m [x_i, ||x_i||^2, 1]`` the next centroids are made of.  Rows are
processed in blocks that stay in cache, so nothing of size (n_samples,
n_clusters) is written except the memberships themselves, which are kept in the
kernel's block layout (:func:`to_blocks`): one contiguous stretch per block.

The one transcendental step per element, ``r^(-p) = 2^(-p log2 r)``, is a
branch-free scalar function of ``r`` written here, so the compiler turns the
loop over a block into SIMD code (it has no vector maths library to call):
``log2`` by the ``atanh`` series in ``s = (x - 1) / (x + 1)`` on a mantissa in
``[sqrt(1/2), sqrt(2))``, and ``2^t`` by splitting off the nearest integer and a
polynomial on ``|f| <= 1/2``; both polynomials are Chebyshev fits (computed at
40 digits) with errors near 2e-16, and base 2 makes the argument reduction
exact.  Exponent and mantissa are read and written through bit casts
(:func:`_bits`, :func:`_float`), and integer/float conversions use the
``1.5 * 2^52`` rounding constant, so every step has a SIMD instruction.  The
memberships agree with the float64 NumPy path to about 1e-14, far under the
1e-10 agreement with the reference that the tests ask for.

Loops that only map or accumulate into per-row arrays are kept to a few arrays
each, with the rows innermost, so they vectorise without reordering any sum:
results do not depend on the SIMD width.

References
----------
Muller, J.-M. (2016). *Elementary Functions: Algorithms and Implementation*,
3rd ed. Birkhauser (range reduction, polynomial approximation).
"""

from __future__ import annotations

import numba
import numpy as np
from llvmlite import ir
from numba import njit, prange, types
from numba.extending import intrinsic

__all__ = ["fcm_run", "fcm_update", "from_blocks", "powers", "set_threads", "to_blocks"]

_SQRT2 = 1.4142135623730951
_MANTISSA = 0x000FFFFFFFFFFFFF
_ONE_BITS = 0x3FF0000000000000
# x + 1.5 * 2^52 rounds x to an integer held in the low mantissa bits (|x| < 2^51).
_ROUNDER = 6755399441055744.0
_ROUNDER_BITS = 0x4338000000000000
_EXPONENT_ONE = 1023 << 52
# 2^-1020 is still a normal float64; clamping there keeps the exponent bits valid.
_EXP2_LIMIT = 1020.0
_SMALLEST_NORMAL = 2.2250738585072014e-308

# No "reassoc": the rounding-constant steps and the summation order must stay as written.
_FLAGS = {"contract", "nsz"}


@intrinsic
def _bits(typingctx, value):
    """The bits of a float64 as an int64 (a free register move)."""
    signature = types.int64(types.float64)

    def codegen(context, builder, signature, args):
        return builder.bitcast(args[0], ir.IntType(64))

    return signature, codegen


@intrinsic
def _float(typingctx, value):
    """The float64 whose bits are the given int64."""
    signature = types.float64(types.int64)

    def codegen(context, builder, signature, args):
        return builder.bitcast(args[0], ir.DoubleType())

    return signature, codegen


@njit(cache=True, error_model="numpy", fastmath=_FLAGS, inline="always")
def _log2(x):
    """log2 x for finite x > 0 (normal numbers); absolute error below 1e-15 + ulp(e)."""
    b = _bits(x)
    # Exponent as a float without an int -> float conversion: (bits >> 52) lands in the
    # low mantissa bits of the rounding constant.
    e = _float((b >> 52) | _ROUNDER_BITS) - (_ROUNDER + 1023.0)
    mant = _float((b & _MANTISSA) | _ONE_BITS)
    big = mant > _SQRT2
    mant = mant * 0.5 if big else mant
    e = e + 1.0 if big else e
    # log2(mant) = s Q(s^2) with s = (mant - 1) / (mant + 1) in [-0.1716, 0.1716] and
    # Q(z) = 2 atanh(s) / (s ln 2), here a degree-6 Chebyshev fit on [0, 0.02944]
    # (error of Q below 5.1e-16).
    s = (mant - 1.0) / (mant + 1.0)
    z = s * s
    q = 0.2429160853987535
    q = q * z + 0.2614442493522915
    q = q * z + 0.32061638813224547
    q = q * z + 0.4121984020482752
    q = q * z + 0.5770780172463286
    q = q * z + 0.9617966939243345
    q = q * z + 2.885390081777927
    return e + s * q


@njit(cache=True, error_model="numpy", fastmath=_FLAGS, inline="always")
def _exp2(t):
    """2^t for t <= 1020, t clamped at -1020 (results stay normal); relative error < 1e-15.

    Callers only pass ``t <= 0`` (up to rounding), hence no upper clamp.
    """
    t = max(t, -_EXP2_LIMIT)
    shifted = t + _ROUNDER  # round(t) in the low bits
    k = shifted - _ROUNDER
    f = t - k  # exact, |f| <= 1/2
    # 2^f by a degree-10 Chebyshev fit on [-1/2, 1/2] (error below 2.2e-16).
    poly = 7.072585949269223e-09
    poly = poly * f + 1.0208690299958306e-07
    poly = poly * f + 1.321544258792169e-06
    poly = poly * f + 1.5252657260200837e-05
    poly = poly * f + 0.0001540353044173605
    poly = poly * f + 0.0013333558230164974
    poly = poly * f + 0.009618129107606888
    poly = poly * f + 0.05550410866444772
    poly = poly * f + 0.24022650695910097
    poly = poly * f + 0.69314718055995
    poly = poly * f + 1.0
    # 2^k from the integer in the low bits (the constant's own bits shift out).
    return poly * _float((_bits(shifted) << 52) + _EXPONENT_ONE)


@njit(cache=True, error_model="numpy", fastmath=_FLAGS)
def _block_update(
    dist,
    nearest,
    floor,
    flagged,
    power,
    totals,
    aux,
    target,
    saved,
    change_rows,
    rows,
    n_clusters,
    m,
):
    """Memberships of one cache block from its squared distances, cluster-major.

    ``dist`` (n_clusters * rows) holds squared distances on entry and is kept;
    ``nearest`` (rows,) holds ``min_j D_ij`` and ``floor`` the coincidence
    thresholds.  On exit ``target`` (the block's stretch of the memberships)
    holds the new memberships, ``aux`` the ``u^m``, ``totals`` each row's share
    ``J_i`` of the objective and ``change_rows`` each row's largest membership
    change; ``saved`` keeps the old memberships of the rows that sit on a
    centroid (returned count, indices in ``flagged``), which
    :func:`_coinciding_rows` then finishes.  ``power`` is scratch.
    """
    minus_p = -1.0 / (m - 1.0)
    n_flagged = 0
    for i in range(rows):
        if nearest[i] <= floor[i]:
            flagged[n_flagged] = i
            n_flagged += 1
    for f in range(n_flagged):
        i = flagged[f]
        nearest[i] = 1.0
        for k in range(n_clusters):
            saved[f * n_clusters + k] = target[k * rows + i]
    # `floor` becomes 1 / min_j D_ij.
    for i in range(rows):
        floor[i] = 1.0 / nearest[i]
        totals[i] = 0.0
        change_rows[i] = 0.0
    # r = D / min_j D >= 1, so r^(-p) = 2^(-p log2 r) lies in (0, 1]: no overflow at any m.
    for k in range(n_clusters):
        base = k * rows
        for i in range(rows):
            value = _exp2(minus_p * _log2(dist[base + i] * floor[i]))
            power[base + i] = value
            totals[i] += value
    # J_i = min_j D_ij * S_i^(1 - m), one power per row (module docstring of fcm); `floor`
    # becomes J_i / S_i, `totals` J_i and `nearest` 1 / S_i.
    for i in range(rows):
        share = nearest[i] * _exp2((1.0 - m) * _log2(totals[i]))
        inverse = 1.0 / totals[i]
        floor[i] = share * inverse
        totals[i] = share
        nearest[i] = inverse
    # u = r^(-p) / S, straight into the memberships.
    for k in range(n_clusters):
        base = k * rows
        for i in range(rows):
            new = power[base + i] * nearest[i]
            change_rows[i] = max(change_rows[i], abs(target[base + i] - new))
            target[base + i] = new
    # u^m = u J_i / D = r^(-p) (J_i / S_i) / D.
    for k in range(n_clusters):
        base = k * rows
        for i in range(rows):
            aux[base + i] = power[base + i] * floor[i] / dist[base + i]
    return n_flagged


@njit(cache=True, error_model="numpy", fastmath=_FLAGS)
def _coinciding_rows(
    dist,
    flagged,
    n_flagged,
    thresholds,
    target,
    aux,
    totals,
    saved,
    change_rows,
    rows,
    n_clusters,
    m,
):
    """Rows on a centroid: membership 1 there, split evenly between coinciding centroids."""
    for f in range(n_flagged):
        i = flagged[f]
        hits = 0
        for k in range(n_clusters):
            if dist[k * rows + i] <= thresholds[i]:
                hits += 1
        share = 1.0 / hits
        powered = share**m
        contribution = 0.0
        largest = 0.0
        for k in range(n_clusters):
            e = k * rows + i
            new = share if dist[e] <= thresholds[i] else 0.0
            target[e] = new
            aux[e] = powered if new > 0.0 else 0.0
            contribution += aux[e] * dist[e]
            largest = max(largest, abs(saved[f * n_clusters + k] - new))
        totals[i] = contribution
        change_rows[i] = largest


@njit(cache=True, error_model="numpy", fastmath=_FLAGS, parallel=True)
def powers(values, m, out):
    """``out = values ** m`` for memberships in [0, 1] (1-D); below 2^-1022 counts as 0."""
    for i in prange(values.shape[0]):
        value = values[i]
        out[i] = _exp2(m * _log2(value)) if value >= _SMALLEST_NORMAL else 0.0


@njit(cache=True, error_model="numpy", parallel=True)
def to_blocks(sample_major, chunk_rows, block_rows, blocked):
    """(s, n, c) memberships into the kernel's layout ``blocked`` (s, c * n).

    Rows go in the blocks of :func:`fcm_update` (``chunk_rows`` per parallel
    unit, ``block_rows`` per block); block ``[lo, lo + rows)`` is stored
    cluster-major, (c, rows), at offset ``c * lo``, so each block's memberships
    are one contiguous stretch of memory.
    """
    n_starts, n_samples, n_clusters = sample_major.shape
    n_chunks = (n_samples + chunk_rows - 1) // chunk_rows
    for unit in prange(n_starts * n_chunks):
        start = unit // n_chunks
        chunk_lo = (unit % n_chunks) * chunk_rows
        chunk_hi = min(chunk_lo + chunk_rows, n_samples)
        for lo in range(chunk_lo, chunk_hi, block_rows):
            rows = min(block_rows, chunk_hi - lo)
            offset = n_clusters * lo
            for i in range(rows):
                for k in range(n_clusters):
                    blocked[start, offset + k * rows + i] = sample_major[start, lo + i, k]


@njit(cache=True, error_model="numpy", parallel=True)
def from_blocks(blocked, chunk_rows, block_rows, sample_major):
    """The inverse of :func:`to_blocks`: ``blocked`` (s, c * n) into (s, n, c)."""
    n_starts, n_samples, n_clusters = sample_major.shape
    n_chunks = (n_samples + chunk_rows - 1) // chunk_rows
    for unit in prange(n_starts * n_chunks):
        start = unit // n_chunks
        chunk_lo = (unit % n_chunks) * chunk_rows
        chunk_hi = min(chunk_lo + chunk_rows, n_samples)
        for lo in range(chunk_lo, chunk_hi, block_rows):
            rows = min(block_rows, chunk_hi - lo)
            offset = n_clusters * lo
            for i in range(rows):
                for k in range(n_clusters):
                    sample_major[start, lo + i, k] = blocked[start, offset + k * rows + i]


@njit(cache=True, error_model="numpy", fastmath=_FLAGS, parallel=True)
def fcm_update(
    augmented_rows,
    augmented_centroids,
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
    augmented_rows : float64 (n_samples, n_features + 2), ``[x_i, ||x_i||^2, 1]``.
    augmented_centroids : float64 (n_starts, n_clusters, n_features + 2),
        ``[-2 v_k, 1, ||v_k||^2]``, so one product with the rows gives squared distances.
    memberships : float64 (n_starts, n_clusters * n_samples), in the block layout of
        :func:`to_blocks`; the old memberships on entry, the new ones (optimal for
        the centroids) on exit for active starts.
    active : int64 (n_active,), the starts to update.
    m : fuzzifier.  coincidence_relative : see ``gloam.fcm._COINCIDENCE_RELATIVE``.
    chunk_rows, block_rows : rows per parallel work unit and per cache block.
    acc : float64 (n_active * n_chunks, n_clusters, n_features + 2), overwritten with
        each unit's ``sum_i u_ik^m [x_i, ||x_i||^2, 1]`` over its rows (new memberships).
    row_objective, change : float64 (n_active * n_chunks,), overwritten with each
        unit's share of ``J_m`` and its largest absolute membership change.
    """
    n_samples, width = augmented_rows.shape
    n_clusters = augmented_centroids.shape[1]
    n_chunks = (n_samples + chunk_rows - 1) // chunk_rows
    n_units = active.shape[0] * n_chunks
    for unit in prange(n_units):
        start = active[unit // n_chunks]
        chunk = unit % n_chunks
        size = n_clusters * block_rows
        dist_buffer = np.empty(size)
        power = np.empty(size)
        aux_buffer = np.empty(size)
        nearest = np.empty(block_rows)
        floor = np.empty(block_rows)
        thresholds = np.empty(block_rows)
        totals = np.empty(block_rows)
        flagged = np.empty(block_rows, dtype=np.int64)
        saved = np.empty(size)
        change_rows = np.empty(block_rows)
        partial = np.empty((n_clusters, width))
        weights = augmented_centroids[start]
        largest = 0.0
        for k in range(n_clusters):
            largest = max(largest, weights[k, width - 1])
        unit_acc = acc[unit]
        unit_acc[:, :] = 0.0
        objective_sum = 0.0
        largest_change = 0.0
        chunk_lo = chunk * chunk_rows
        chunk_hi = min(chunk_lo + chunk_rows, n_samples)
        for lo in range(chunk_lo, chunk_hi, block_rows):
            rows = min(block_rows, chunk_hi - lo)
            total = n_clusters * rows
            block = augmented_rows[lo : lo + rows]
            # Squared distances, cluster-major dist[k * rows + i], through BLAS.
            dist = dist_buffer[:total].reshape((n_clusters, rows))
            np.dot(weights, block.T, dist)
            dist_flat = dist_buffer[:total]
            for i in range(rows):
                nearest[i] = np.inf
                thresholds[i] = coincidence_relative * (block[i, width - 2] + largest + 1.0)
                floor[i] = thresholds[i]
            for k in range(n_clusters):
                base = k * rows
                for i in range(rows):
                    value = max(dist_flat[base + i], 0.0)
                    dist_flat[base + i] = value
                    nearest[i] = min(nearest[i], value)
            target = memberships[start, n_clusters * lo : n_clusters * lo + total]
            n_flagged = _block_update(
                dist_flat,
                nearest,
                floor,
                flagged,
                power,
                totals,
                aux_buffer,
                target,
                saved,
                change_rows,
                rows,
                n_clusters,
                m,
            )
            _coinciding_rows(
                dist_flat,
                flagged,
                n_flagged,
                thresholds,
                target,
                aux_buffer,
                totals,
                saved,
                change_rows,
                rows,
                n_clusters,
                m,
            )
            for i in range(rows):
                objective_sum += totals[i]
                largest_change = max(largest_change, change_rows[i])
            np.dot(aux_buffer[:total].reshape((n_clusters, rows)), block, partial)
            unit_acc += partial
        row_objective[unit] = objective_sum
        change[unit] = largest_change


@njit(cache=True, error_model="numpy", fastmath=_FLAGS)
def fcm_run(
    augmented_rows,
    centroids,
    memberships,
    m,
    tol,
    max_iter,
    coincidence_relative,
    chunk_rows,
    block_rows,
    objectives,
    n_iter,
    converged,
):
    """Iterate every start from ``centroids`` until ``tol`` or ``max_iter``, in place.

    The whole loop runs here so an iteration costs no interpreter time.  Each
    start stops on its own once its largest membership change is below ``tol``.

    Parameters
    ----------
    augmented_rows : float64 (n_samples, n_features + 2), see :func:`fcm_update`.
    centroids : float64 (n_starts, n_clusters, n_features); the first centroids on
        entry, on exit those the final memberships were computed from.
    memberships : float64 (n_starts, n_clusters * n_samples), block layout of
        :func:`to_blocks`; the initial memberships on entry (they only enter the first
        membership change), the final memberships on exit.
    m, tol, max_iter : fuzzifier, stopping threshold, iteration limit.
    coincidence_relative, chunk_rows, block_rows : see :func:`fcm_update`.
    objectives, n_iter, converged : (n_starts,) float64, int64, bool; overwritten
        with each start's ``J_m``, iterations done and whether it reached ``tol``.
    """
    n_starts, n_clusters, n_features = centroids.shape
    n_samples, width = augmented_rows.shape
    n_chunks = (n_samples + chunk_rows - 1) // chunk_rows
    augmented = np.empty((n_starts, n_clusters, width))
    acc = np.empty((n_starts * n_chunks, n_clusters, width))
    unit_objective = np.empty(n_starts * n_chunks)
    unit_change = np.empty(n_starts * n_chunks)
    active = np.arange(n_starts)
    n_active = n_starts
    for start in range(n_starts):
        converged[start] = False
        n_iter[start] = 0
    for iteration in range(1, max_iter + 1):
        for a in range(n_active):
            start = active[a]
            for k in range(n_clusters):
                norm = 0.0
                for j in range(n_features):
                    value = centroids[start, k, j]
                    augmented[start, k, j] = -2.0 * value
                    norm += value * value
                augmented[start, k, n_features] = 1.0
                augmented[start, k, n_features + 1] = norm
        units = n_active * n_chunks
        fcm_update(
            augmented_rows,
            augmented,
            memberships,
            active[:n_active],
            m,
            coincidence_relative,
            chunk_rows,
            block_rows,
            acc[:units],
            unit_objective[:units],
            unit_change[:units],
        )
        still = 0
        for a in range(n_active):
            start = active[a]
            total = 0.0
            largest = 0.0
            for chunk in range(a * n_chunks, (a + 1) * n_chunks):
                total += unit_objective[chunk]
                largest = max(largest, unit_change[chunk])
            objectives[start] = total
            n_iter[start] = iteration
            if largest < tol:
                converged[start] = True
                continue
            active[still] = start
            still += 1
            if iteration == max_iter:
                continue
            # Next centroids from sum_i u_ik^m [x_i, ||x_i||^2, 1] over the chunks.
            sums = acc[a * n_chunks].copy()
            for chunk in range(a * n_chunks + 1, (a + 1) * n_chunks):
                sums += acc[chunk]
            for k in range(n_clusters):
                for j in range(n_features):
                    centroids[start, k, j] = sums[k, j] / sums[k, n_features + 1]
        n_active = still
        if n_active == 0:
            break


def set_threads(n_threads: int) -> int:
    """Set numba's thread count (capped at its pool size); returns the previous count."""
    previous = numba.get_num_threads()
    numba.set_num_threads(max(1, min(int(n_threads), numba.config.NUMBA_NUM_THREADS)))
    return previous
