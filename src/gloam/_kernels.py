"""Optional compiled kernel for the fuzzy c-means iteration (needs numba).

One call of :func:`membership_pass` does a whole membership update of one
start: squared distances in the expanded form ``||x||^2 - 2 x.v + ||v||^2`` (one
BLAS product of augmented rows, clipped at 0), the memberships, each row's share
of the objective, the largest membership change, and the weighted sums
``sum_i u_ik^m [x_i, ||x_i||^2, 1]`` the next centroids are made of.  Rows are
processed in blocks that stay in cache, so nothing of size (n_samples,
n_clusters) is written except the memberships themselves, which are kept in the
kernel's block layout (:func:`to_blocks`): one contiguous stretch per block.
:func:`fcm_advance` runs iterations of one start, plain or accelerated by SQUAREM
(Varadhan & Roland 2008), with or without a noise class (Davé 1991).  Every
function releases the GIL and none starts threads of its own: the caller runs whole
starts on its threads, so no thread ever waits for another in the middle of a start,
and the numbers of a start do not depend on how many threads there are.

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
Davé, R. N. (1991). Characterization and detection of noise in clustering. *Pattern
Recognition Letters* 12:657-664.
Varadhan, R. & Roland, C. (2008). Simple and globally convergent methods for accelerating
the convergence of any EM algorithm. *Scandinavian Journal of Statistics* 35(2):335-353.
Muller, J.-M. (2016). *Elementary Functions: Algorithms and Implementation*,
3rd ed. Birkhauser (range reduction, polynomial approximation).
"""

from __future__ import annotations

import numpy as np
from llvmlite import ir
from numba import njit, types
from numba.extending import intrinsic

__all__ = ["fcm_advance", "from_blocks", "membership_pass", "to_blocks", "weighted_sums"]

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
    noise_distance,
    noise,
    saved_noise,
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

    With a finite ``noise_distance`` (``delta^2``, Davé 1991) there is one more class at
    that squared distance from every row: ``nearest`` becomes ``min(min_j D_ij, delta^2)``,
    its term enters ``S_i`` and ``J_i``, and ``noise`` (the block's rows) receives the noise
    memberships (its old values enter the change; ``saved_noise`` keeps those of the flagged
    rows).  ``inf`` gives plain fuzzy c-means and leaves ``noise`` untouched.
    """
    minus_p = -1.0 / (m - 1.0)
    with_noise = noise_distance < np.inf
    n_flagged = 0
    for i in range(rows):
        if nearest[i] <= floor[i]:
            flagged[n_flagged] = i
            n_flagged += 1
        elif with_noise:
            nearest[i] = min(nearest[i], noise_distance)
    for f in range(n_flagged):
        i = flagged[f]
        nearest[i] = 1.0
        for k in range(n_clusters):
            saved[f * n_clusters + k] = target[k * rows + i]
        if with_noise:
            saved_noise[f] = noise[i]
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
    if with_noise:
        # The noise class's term (delta^2 / a_i)^(-p) in (0, 1] waits in `change_rows`.
        for i in range(rows):
            value = _exp2(minus_p * _log2(noise_distance * floor[i]))
            change_rows[i] = value
            totals[i] += value
    # J_i = min_j D_ij * S_i^(1 - m), one power per row (module docstring of fcm); `floor`
    # becomes J_i / S_i, `totals` J_i and `nearest` 1 / S_i.
    for i in range(rows):
        share = nearest[i] * _exp2((1.0 - m) * _log2(totals[i]))
        inverse = 1.0 / totals[i]
        floor[i] = share * inverse
        totals[i] = share
        nearest[i] = inverse
    if with_noise:
        for i in range(rows):
            new = change_rows[i] * nearest[i]
            change_rows[i] = abs(noise[i] - new)
            noise[i] = new
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
    with_noise,
    noise,
    saved_noise,
):
    """Rows on a centroid: membership 1 there, split evenly between coinciding centroids.

    With the noise class such a row gets noise membership 0 (its old value, kept in
    ``saved_noise``, enters the change).
    """
    for f in range(n_flagged):
        i = flagged[f]
        largest = 0.0
        if with_noise:
            largest = saved_noise[f]
            noise[i] = 0.0
        hits = 0
        for k in range(n_clusters):
            if dist[k * rows + i] <= thresholds[i]:
                hits += 1
        share = 1.0 / hits
        powered = share**m
        contribution = 0.0
        for k in range(n_clusters):
            e = k * rows + i
            new = share if dist[e] <= thresholds[i] else 0.0
            target[e] = new
            aux[e] = powered if new > 0.0 else 0.0
            contribution += aux[e] * dist[e]
            largest = max(largest, abs(saved[f * n_clusters + k] - new))
        totals[i] = contribution
        change_rows[i] = largest


@njit(cache=True, error_model="numpy", nogil=True)
def to_blocks(sample_major, block_rows, blocked):
    """One start's (n, c) memberships into the kernel's layout ``blocked`` (c * n,).

    Block ``[lo, lo + rows)`` of ``block_rows`` rows is stored cluster-major,
    (c, rows), at offset ``c * lo``, so each block's memberships are one
    contiguous stretch of memory.
    """
    n_samples, n_clusters = sample_major.shape
    for lo in range(0, n_samples, block_rows):
        rows = min(block_rows, n_samples - lo)
        offset = n_clusters * lo
        for i in range(rows):
            for k in range(n_clusters):
                blocked[offset + k * rows + i] = sample_major[lo + i, k]


@njit(cache=True, error_model="numpy", nogil=True)
def from_blocks(blocked, block_rows, sample_major):
    """The inverse of :func:`to_blocks`: ``blocked`` (c * n,) into (n, c)."""
    n_samples, n_clusters = sample_major.shape
    for lo in range(0, n_samples, block_rows):
        rows = min(block_rows, n_samples - lo)
        offset = n_clusters * lo
        for i in range(rows):
            for k in range(n_clusters):
                sample_major[lo + i, k] = blocked[offset + k * rows + i]


@njit(cache=True, error_model="numpy", fastmath=_FLAGS, nogil=True)
def weighted_sums(augmented_rows, memberships, m, block_rows, sums):
    """``sums`` (c, d + 2) = ``sum_i u_ik^m [x_i, ||x_i||^2, 1]`` for one start's memberships.

    ``memberships`` (c * n,) is in the layout of :func:`to_blocks`; ``u^m`` is
    ``2^(m log2 u)`` as in the iteration, and a membership below the smallest
    normal float64 counts as 0.
    """
    n_samples, width = augmented_rows.shape
    n_clusters = sums.shape[0]
    powered = np.empty(n_clusters * block_rows)
    partial = np.empty((n_clusters, width))
    sums[:, :] = 0.0
    for lo in range(0, n_samples, block_rows):
        rows = min(block_rows, n_samples - lo)
        total = n_clusters * rows
        offset = n_clusters * lo
        for e in range(total):
            value = memberships[offset + e]
            powered[e] = _exp2(m * _log2(value)) if value >= _SMALLEST_NORMAL else 0.0
        np.dot(powered[:total].reshape((n_clusters, rows)), augmented_rows[lo : lo + rows], partial)
        sums += partial


@njit(cache=True, error_model="numpy", fastmath=_FLAGS, nogil=True)
def membership_pass(
    augmented_rows,
    centroids,
    memberships,
    m,
    block_rows,
    coincidence_relative,
    sums,
    noise_distance,
    noise,
):
    """One membership update of one start, in place; returns ``(J_m, largest change)``.

    Parameters
    ----------
    augmented_rows : float64 (n_samples, n_features + 2), ``[x_i, ||x_i||^2, 1]``.
    centroids : float64 (n_clusters, n_features).
    memberships : float64 (n_clusters * n_samples,), in the layout of :func:`to_blocks`;
        the old memberships on entry (they only enter the change), on exit the new
        ones, optimal for ``centroids``.
    m : fuzzifier.  coincidence_relative : see ``gloam.fcm._COINCIDENCE_RELATIVE``.
    block_rows : rows per cache block.
    sums : float64 (n_clusters, n_features + 2), overwritten with
        ``sum_i u_ik^m [x_i, ||x_i||^2, 1]`` over the new memberships, blocks in order.
    noise_distance : ``delta^2`` of a noise class (Davé 1991), or ``inf`` for none.
    noise : float64 (n_samples,), the noise memberships, updated in place like
        ``memberships`` (not read or written when ``noise_distance`` is ``inf``).

    Returns
    -------
    (float, float)
        The objective ``J_m`` of the new memberships with ``centroids`` (with the noise
        class, ``+ sum_i u_i0^m delta^2``) and the largest absolute membership change
        (noise memberships included).
    """
    n_samples, width = augmented_rows.shape
    n_clusters, n_features = centroids.shape
    # [-2 v_k, 1, ||v_k||^2]: one product with the augmented rows gives squared distances.
    weights = np.empty((n_clusters, width))
    largest = 0.0
    for k in range(n_clusters):
        norm = 0.0
        for j in range(n_features):
            value = centroids[k, j]
            weights[k, j] = -2.0 * value
            norm += value * value
        weights[k, n_features] = 1.0
        weights[k, n_features + 1] = norm
        largest = max(largest, norm)
    size = n_clusters * block_rows
    dist_buffer = np.empty(size)
    power = np.empty(size)
    aux_buffer = np.empty(size)
    saved = np.empty(size)
    nearest = np.empty(block_rows)
    floor = np.empty(block_rows)
    thresholds = np.empty(block_rows)
    totals = np.empty(block_rows)
    change_rows = np.empty(block_rows)
    flagged = np.empty(block_rows, dtype=np.int64)
    saved_noise = np.empty(block_rows)
    with_noise = noise_distance < np.inf
    partial = np.empty((n_clusters, width))
    sums[:, :] = 0.0
    objective_sum = 0.0
    largest_change = 0.0
    for lo in range(0, n_samples, block_rows):
        rows = min(block_rows, n_samples - lo)
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
        target = memberships[n_clusters * lo : n_clusters * lo + total]
        block_noise = noise[lo : lo + rows] if with_noise else noise
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
            noise_distance,
            block_noise,
            saved_noise,
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
            with_noise,
            block_noise,
            saved_noise,
        )
        for i in range(rows):
            objective_sum += totals[i]
            largest_change = max(largest_change, change_rows[i])
        np.dot(aux_buffer[:total].reshape((n_clusters, rows)), block, partial)
        sums += partial
    return objective_sum, largest_change


@njit(cache=True, error_model="numpy", fastmath=_FLAGS, nogil=True)
def _centroids_from_sums(sums, previous, out):
    """``out`` = ``sum_i u_ik^m x_i / sum_i u_ik^m``; a weightless cluster keeps ``previous``."""
    n_features = out.shape[1]
    for k in range(out.shape[0]):
        weight = sums[k, n_features + 1]
        for j in range(n_features):
            out[k, j] = sums[k, j] / weight if weight > 0.0 else previous[k, j]


@njit(cache=True, error_model="numpy", fastmath=_FLAGS, nogil=True)
def _squarem_point(anchor, image, next_image, step_max, out):
    """The SQUAREM extrapolation of three successive centroid sets; returns the step alpha.

    ``out`` may be ``next_image`` (each entry is read before it is written).

    With ``r = V1 - V0`` and ``v = V2 - 2 V1 + V0`` (``anchor``, ``image``, ``next_image``)
    the new point is ``V0 - 2 alpha r + alpha^2 v`` with the steplength ``alpha = -|r|/|v|``
    (scheme S3 of Varadhan & Roland 2008), kept in ``[-step_max, -1]``; ``alpha = -1`` gives
    ``V2`` itself, the plain iterate.
    """
    r_norm = 0.0
    v_norm = 0.0
    for k in range(anchor.shape[0]):
        for j in range(anchor.shape[1]):
            r = image[k, j] - anchor[k, j]
            v = next_image[k, j] - image[k, j] - r
            r_norm += r * r
            v_norm += v * v
    alpha = -1.0
    if v_norm > 0.0:
        alpha = max(-step_max, min(-1.0, -np.sqrt(r_norm / v_norm)))
    for k in range(anchor.shape[0]):
        for j in range(anchor.shape[1]):
            r = image[k, j] - anchor[k, j]
            v = next_image[k, j] - image[k, j] - r
            out[k, j] = anchor[k, j] - 2.0 * alpha * r + alpha * alpha * v
    return alpha


@njit(cache=True, error_model="numpy", fastmath=_FLAGS, nogil=True)
def fcm_advance(
    augmented_rows,
    sums,
    centroids,
    memberships,
    noise,
    m,
    noise_distance,
    tol,
    objective_tol,
    first,
    last,
    block_rows,
    coincidence_relative,
    trace,
    accelerate,
    anchor,
    image,
    saved_memberships,
    saved_noise,
    saved_sums,
    state,
):
    """Iterations ``first`` to ``last`` (counted from 1) of one start, in place.

    The state of a start is its memberships and the weighted sums made from them
    (with ``accelerate``, also ``anchor``, ``image`` and ``state``), so a run split into
    several calls gives the same numbers as one call: a caller may look at the
    objectives between calls (to prune trailing starts) without changing any start.
    The GIL is released, so threads can run different starts at once.

    An iteration is one membership pass (the costly part).  Plain iterations compute
    the centroids ``F(V)`` from the memberships of ``V``.  With ``accelerate`` the
    iterations run in cycles of three (SQUAREM, Varadhan & Roland 2008): iteration
    ``3j + 1`` is a plain one from ``V0 = F(W)``, iteration ``3j + 2`` a plain one from
    ``V1 = F(V0)``, and iteration ``3j + 3`` the pass at the extrapolation ``V'`` of
    ``V0, V1, V2 = F(V1)`` (:func:`_squarem_point`).  ``V'`` is kept only when its
    objective is at most that of ``V1`` (a monotonicity safeguard; the objective of a
    centroid set is that of its optimal memberships, Hathaway & Bezdek 1995); otherwise
    the start goes back to the memberships of ``V1``, so the next cycle begins at the
    plain iterate ``V2``.  The steplength bound ``state[0]`` grows four-fold when it
    was reached by an accepted step and shrinks four-fold (not below 1) after a
    rejected one.  The stopping tests look only at plain iterations (the first two
    of a cycle), so ``tol`` keeps its meaning: a plain step that changes no membership
    by ``tol`` or more.

    Parameters
    ----------
    augmented_rows : float64 (n_samples, n_features + 2), see :func:`membership_pass`.
    sums : float64 (n_clusters, n_features + 2), ``sum_i u_ik^m [x_i, ||x_i||^2, 1]``
        of the current memberships (:func:`weighted_sums` for the first call).
    centroids : float64 (n_clusters, n_features), the centroids the current memberships
        were computed from (any finite values before the first iteration); on exit
        those of the final memberships.
    memberships : float64 (n_clusters * n_samples,), layout of :func:`to_blocks`.
    noise : float64 (n_samples,), noise memberships (see :func:`membership_pass`).
    m, noise_distance, tol : fuzzifier, ``delta^2`` (``inf``: no noise class) and
        membership-change threshold.
    objective_tol : also stop when ``J_{t-1} - J_t <= objective_tol * J_t`` (0: off).
    first, last : the iterations to run; ``trace`` (max_iter,) receives the objective
        of the start's state after iteration ``t`` at ``t - 1`` (``trace[first - 2]``
        must hold the previous one).  It never rises.
    block_rows, coincidence_relative : see :func:`membership_pass`.
    accelerate : run SQUAREM cycles.  The remaining arrays are its state and scratch
        (untouched without it): ``anchor``, ``image`` (n_clusters, n_features) hold
        ``V0`` and ``V1``; ``saved_memberships``, ``saved_noise`` and ``saved_sums`` the
        memberships of ``V1`` during the extrapolated pass; ``state`` (2,) the steplength
        bound (start it at 1 or more) and the objective of ``V1``.

    Returns
    -------
    (int, bool)
        The last iteration done and whether a stopping test was met there.
    """
    for iteration in range(first, last + 1):
        phase = (iteration - 1) % 3 if accelerate else 0
        if phase == 2:
            # V2 = F(V1) from the sums of V1's memberships, then the extrapolation V'
            # (both in `centroids`, which holds V1 = `image` on entry).
            _centroids_from_sums(sums, image, centroids)
            alpha = _squarem_point(anchor, image, centroids, state[0], centroids)
            saved_memberships[:] = memberships
            saved_sums[:, :] = sums
            if noise_distance < np.inf:
                saved_noise[:] = noise
        else:
            _centroids_from_sums(sums, centroids, centroids)
            if phase == 0 and accelerate:
                anchor[:, :] = centroids
            elif accelerate:
                image[:, :] = centroids
        objective, change = membership_pass(
            augmented_rows,
            centroids,
            memberships,
            m,
            block_rows,
            coincidence_relative,
            sums,
            noise_distance,
            noise,
        )
        if phase == 1:
            state[1] = objective
        if phase == 2:
            if objective <= state[1]:
                if alpha <= -state[0]:
                    state[0] *= 4.0
            else:
                memberships[:] = saved_memberships
                sums[:, :] = saved_sums
                if noise_distance < np.inf:
                    noise[:] = saved_noise
                centroids[:, :] = image
                objective = state[1]
                state[0] = max(1.0, state[0] / 4.0)
        trace[iteration - 1] = objective
        if phase == 2:
            continue
        if change < tol:
            return iteration, True
        if objective_tol > 0.0 and iteration > 1:
            if trace[iteration - 2] - objective <= objective_tol * objective:
                return iteration, True
    return last, False
