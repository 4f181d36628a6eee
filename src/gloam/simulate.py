"""Simulated time-course experiments with a known answer, for benchmarks and tests.

Everything here is invented and deterministic given ``seed``.  One entry point,
:func:`simulate_experiment`, makes a genes x samples matrix, a sample sheet and a
truth table in the layouts the workflow reads, in several kinds:

``responses``
    A few distinct smooth temporal responses are planted.  Their shapes are drawn
    from a varied family (transient pulses and dips peaking at different times,
    sustained rises and falls with different midpoints, damped oscillations, daily
    rhythms), and a candidate is kept only when it is visible at the sampled times
    and its z-scored correlation with every shape kept before is at most
    :data:`MAX_SHAPE_CORRELATION`.  Each planted gene follows one shape, warped a
    little in time (its own small jitter; a phase shift for daily rhythms) and scaled
    to its own amplitude; a share of genes is flat (no time effect at all).
``gaussian``
    No clusters: every changing gene's log2 profile is one draw from a single
    multivariate Gaussian whose covariance is a squared-exponential kernel over
    ``log1p(time)``, so genes change smoothly over time but form a continuum.
``independent``
    No clusters and no shared shape: each changing gene's time-point means are
    independent Gaussian draws.

Noise: counts are negative binomial (a gamma-Poisson mixture with variance
``mu + dispersion * mu**2``) around ``base_mean * 2**profile * library_size``,
with uneven library sizes; log-scale data get Gaussian noise.  With two conditions
(``wt`` and ``mut``, sampled at the same times) a share of the planted genes
follows another planted shape, or none, in ``mut``.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from gloam.errors import GloamError
from gloam.io import write_table

__all__ = [
    "CONDITIONS",
    "DEFAULT_TIMES_HOURS",
    "KINDS",
    "MAX_SHAPE_CORRELATION",
    "SimulatedExperiment",
    "negative_binomial_counts",
    "response_shapes",
    "simulate_experiment",
]

#: Sampling times used when none are given (hours); deliberately uneven.
DEFAULT_TIMES_HOURS: tuple[float, ...] = (0.0, 0.5, 1.0, 2.0, 4.0, 6.0, 9.0, 12.0, 24.0, 48.0)
#: Kinds of experiment :func:`simulate_experiment` can make.
KINDS: tuple[str, ...] = ("responses", "gaussian", "independent")
#: Names of the conditions, in order, for ``n_conditions`` 1 and 2.
CONDITIONS: tuple[str, ...] = ("wt", "mut")
#: Largest Pearson correlation allowed between the z-scored sampled profiles of two
#: planted shapes (a gloam convention for "clearly distinct").
MAX_SHAPE_CORRELATION = 0.7

# A candidate shape must keep at least this share of its continuous range at the
# sampled times, or the sampling would miss the response.
_MIN_VISIBLE_SHARE = 0.5
# SD of the log of each planted gene's time warp (its shape jitter).
_WARP_LOG_SD = 0.08
# Length scale of the squared-exponential kernel of kind "gaussian", as a share of the
# range of log1p(time).
_GAUSSIAN_LENGTH_SHARE = 0.2
# Expected count at the first time point for a library of size 1: log-normal around 200.
_COUNT_BASE_LOG_MEAN = np.log(200.0)
_COUNT_BASE_LOG_SD = 1.0
# Base level of log-scale data (log2 intensity, proteomics-like).
_LOG_BASE_MEAN = 20.0
_LOG_BASE_SD = 2.0
# Library sizes are uniform in this range.
_LIBRARY_RANGE = (0.6, 1.6)
_MAX_SHAPE_DRAWS = 5000


@dataclass(frozen=True)
class SimulatedExperiment:
    """One simulated experiment with its planted answer.

    Attributes
    ----------
    matrix : DataFrame of shape (n_genes, n_samples)
        Index ``gene``; integer counts (``value_type == "counts"``) or log2 values.
    samples : DataFrame
        Sample sheet, one row per matrix column: ``sample``, ``time`` (hours),
        ``replicate`` (1, 2, ...), ``condition`` (``wt``, and ``mut`` with two conditions).
    truth : DataFrame
        One row per gene, in matrix order: ``gene``; ``response`` (a planted label
        ``R1``, ``R2``, ...; ``flat``; or ``unstructured`` for the changing genes of the
        structureless kinds); ``amplitude_log2`` (largest absolute log2 change from the
        first time point, 0 for flat genes); ``base_mean`` (the level at the first time
        point: expected count for a library of size 1, or the log2 value).  With two
        conditions also ``response_wt``, ``response_mut`` and ``switched`` (True when
        they differ), and ``response`` is ``response_wt`` for an unswitched gene and
        ``"<wt>><mut>"`` (e.g. ``R2>flat``) for a switched one, the label a clustering of
        the concatenated conditions can recover.
    n_planted : int
        Number of distinct planted shapes (0 for the structureless kinds).
    value_type : str
        ``counts`` or ``log``, as in the workflow's datasets table.
    shapes : DataFrame of shape (n_planted, 1 + n_timepoints)
        Index ``response`` (``R1``...): ``description`` (words), then the canonical
        shape at each time point (columns ``t<time>``; 0 at the first time point, peak
        absolute value 1).  Empty for the structureless kinds.
    """

    matrix: pd.DataFrame
    samples: pd.DataFrame
    truth: pd.DataFrame
    n_planted: int
    value_type: str
    shapes: pd.DataFrame

    def write(self, out_dir: str | os.PathLike[str]) -> dict[str, Path]:
        """Write the experiment as tab-separated files into ``out_dir`` (created if needed).

        Returns
        -------
        dict of str to Path
            ``matrix`` (``matrix.tsv``: ``gene``, then one column per sample),
            ``samples`` (``samples.tsv``), ``truth`` (``truth.tsv``) and ``shapes``
            (``shapes.tsv``: ``response``, ``description``, one column per time point).
        """
        directory = Path(out_dir)
        directory.mkdir(parents=True, exist_ok=True)
        paths = {name: directory / f"{name}.tsv" for name in ("matrix", "samples", "truth")}
        paths["shapes"] = directory / "shapes.tsv"
        write_table(self.matrix, paths["matrix"], index=True)
        write_table(self.samples, paths["samples"])
        write_table(self.truth, paths["truth"])
        write_table(self.shapes, paths["shapes"], index=True)
        return paths


# ------------------------------------------------------------------------ shape family


@dataclass(frozen=True)
class _Shape:
    """One planted shape: ``function(tau)`` with tau = hours since the first time point."""

    description: str
    function: Callable[[np.ndarray], np.ndarray]
    #: Period (hours) of an undamped rhythm: its genes' jitter is a phase shift, see
    #: :func:`_planted_profiles`.
    period: float | None = None


def _pulse(peak: float, sharpness: float, sign: float) -> Callable[[np.ndarray], np.ndarray]:
    # Gamma-like pulse: 0 at tau = 0, extreme at tau = peak, then back towards 0.
    def function(tau: np.ndarray) -> np.ndarray:
        ratio = tau / peak
        return sign * ratio**sharpness * np.exp(sharpness * (1.0 - ratio))

    return function


def _step(midpoint: float, width: float, sign: float) -> Callable[[np.ndarray], np.ndarray]:
    # Logistic step on the log1p(time) axis: early and late changes look alike in shape.
    def function(tau: np.ndarray) -> np.ndarray:
        return sign / (1.0 + np.exp(-(np.log1p(tau) - np.log1p(midpoint)) / width))

    return function


def _damped(period: float, decay: float, sign: float) -> Callable[[np.ndarray], np.ndarray]:
    def function(tau: np.ndarray) -> np.ndarray:
        return sign * np.sin(2.0 * np.pi * tau / period) * np.exp(-tau / decay)

    return function


def _rhythm(period: float, peak: float) -> Callable[[np.ndarray], np.ndarray]:
    def function(tau: np.ndarray) -> np.ndarray:
        return np.cos(2.0 * np.pi * (tau - peak) / period)

    return function


def _candidate(tau: np.ndarray, rng: np.random.Generator, family: int) -> _Shape | None:
    """Draw one candidate of shape ``family`` (0-5) for hours ``tau``; None if it cannot fit."""
    span = float(tau[-1])
    first = float(tau[1])

    def log_uniform(low: float, high: float) -> float:
        return float(np.exp(rng.uniform(np.log(low), np.log(high))))

    if family in (0, 1):
        if span / 2.0 <= first:
            return None
        peak = log_uniform(first, span / 2.0)
        sharpness = rng.uniform(1.0, 2.5)
        if family == 0:
            return _Shape(f"pulse peaking at {peak:.3g} h", _pulse(peak, sharpness, 1.0))
        return _Shape(f"dip deepest at {peak:.3g} h", _pulse(peak, sharpness, -1.0))
    if family in (2, 3):
        midpoint = log_uniform(first, 0.7 * span)
        width = rng.uniform(0.15, 0.5)
        if family == 2:
            return _Shape(f"sustained rise, midpoint {midpoint:.3g} h", _step(midpoint, width, 1.0))
        return _Shape(f"sustained fall, midpoint {midpoint:.3g} h", _step(midpoint, width, -1.0))
    if family == 4:
        period = log_uniform(span / 10.0, span / 2.0)
        decay = rng.uniform(0.5, 1.5) * period
        sign = float(rng.choice([-1.0, 1.0]))
        return _Shape(
            f"damped oscillation, period {period:.3g} h, decay {decay:.3g} h",
            _damped(period, decay, sign),
        )
    if span < 24.0:
        return None
    peak = rng.uniform(0.0, 24.0)
    return _Shape(
        f"daily rhythm (24 h period) peaking at {peak:.3g} h", _rhythm(24.0, peak), period=24.0
    )


_N_FAMILIES = 6


def _zscore_rows(values: np.ndarray) -> np.ndarray:
    centred = values - values.mean(axis=-1, keepdims=True)
    sd = centred.std(axis=-1, keepdims=True)
    return centred / np.where(sd > 0, sd, 1.0)


def _relative(function: Callable[[np.ndarray], np.ndarray], tau: np.ndarray) -> np.ndarray:
    """Values of ``function`` at ``tau`` minus its value at 0 (works row-wise on 2-D tau)."""
    return function(tau) - function(np.zeros_like(tau[..., :1]))


def _draw_shapes(tau: np.ndarray, n_shapes: int, rng: np.random.Generator) -> list[_Shape]:
    """Draw ``n_shapes`` visible, mutually distinct shapes for hours ``tau`` (sorted, tau[0]=0)."""
    grid = np.linspace(0.0, float(tau[-1]), 400)
    order = rng.permutation(_N_FAMILIES)
    accepted: list[_Shape] = []
    accepted_z: list[np.ndarray] = []
    for draw in range(_MAX_SHAPE_DRAWS):
        if len(accepted) == n_shapes:
            break
        shape = _candidate(tau, rng, int(order[draw % _N_FAMILIES]))
        if shape is None:
            continue
        sampled = _relative(shape.function, tau)
        continuous = _relative(shape.function, grid)
        continuous_range = np.ptp(continuous)
        if continuous_range <= 0 or np.ptp(sampled) < _MIN_VISIBLE_SHARE * continuous_range:
            continue
        z = _zscore_rows(sampled)
        if accepted_z and np.max(np.stack(accepted_z) @ z) / tau.size > MAX_SHAPE_CORRELATION:
            continue
        accepted.append(shape)
        accepted_z.append(z)
    if len(accepted) < n_shapes:
        raise GloamError(
            f"could not find {n_shapes} clearly distinct response shapes at {tau.size} time "
            f"points (found {len(accepted)}); ask for fewer responses or give more time points"
        )
    return accepted


def response_shapes(
    times: Sequence[float] | np.ndarray, n_responses: int, *, rng: int | np.random.Generator
) -> tuple[np.ndarray, list[str]]:
    """Draw ``n_responses`` clearly distinct response shapes sampled at ``times``.

    Parameters
    ----------
    times : array-like of shape (n_timepoints,)
        Sampling times in hours (at least 3 distinct values; sorted here).
    n_responses : int
        Number of shapes.
    rng : int or numpy.random.Generator
        Seed or generator of the draws.

    Returns
    -------
    shapes : ndarray of shape (n_responses, n_timepoints)
        log2 change from the first time point per unit amplitude: 0 at the first time
        point, peak absolute value 1, rows in the order drawn (``R1``, ``R2``, ...).
    descriptions : list of str
        One phrase per shape (e.g. ``"pulse peaking at 2.1 h"``).

    Raises
    ------
    GloamError
        If ``times`` is unusable or that many distinct shapes cannot be found.
    """
    generator = np.random.default_rng(rng)
    tau = _check_times(times) - float(np.min(times))
    drawn = _draw_shapes(tau, int(n_responses), generator)
    values = np.stack([_relative(shape.function, tau) for shape in drawn])
    return values / np.abs(values).max(axis=1, keepdims=True), [s.description for s in drawn]


# ------------------------------------------------------------------------------ noise


def negative_binomial_counts(
    mean: np.ndarray, dispersion: float | np.ndarray, *, rng: int | np.random.Generator
) -> np.ndarray:
    """Negative binomial counts with the given means and dispersion, as a gamma-Poisson mixture.

    Parameters
    ----------
    mean : ndarray of any shape
        Expected counts (>= 0).
    dispersion : float or ndarray broadcastable to ``mean``
        phi >= 0 in ``variance = mean + phi * mean**2``; 0 gives Poisson counts.
    rng : int or numpy.random.Generator
        Seed or generator of the draws.

    Returns
    -------
    ndarray of int64, same shape as ``mean``

    References
    ----------
    Anders S, Huber W (2010). Differential expression analysis for sequence count data.
    Genome Biology 11:R106.
    """
    generator = np.random.default_rng(rng)
    mean = np.asarray(mean, dtype=float)
    phi = np.broadcast_to(np.asarray(dispersion, dtype=float), mean.shape)
    rate = mean.copy()
    mixed = phi > 0
    # Gamma with shape 1/phi and scale mean*phi: mean `mean`, variance phi*mean**2.
    rate[mixed] = generator.gamma(1.0 / phi[mixed], mean[mixed] * phi[mixed])
    return generator.poisson(rate).astype(np.int64)


# ------------------------------------------------------------------------- entry point


def _check_times(times: Sequence[float] | np.ndarray) -> np.ndarray:
    values = np.asarray(times, dtype=float).ravel()
    if not np.isfinite(values).all():
        raise GloamError("simulation times must be finite numbers (hours); remove NaN or inf")
    if np.unique(values).size != values.size:
        raise GloamError("simulation times must be distinct; give each time point once")
    if values.size < 3:
        raise GloamError(f"simulation needs at least 3 time points, got {values.size}")
    return np.sort(values)


def _check_settings(
    kind: str,
    n_genes: int,
    n_responses: int,
    flat_share: float,
    amplitude_log2: tuple[float, float],
    n_replicates: int,
    value_type: str,
    n_conditions: int,
    switch_share: float,
    dispersion: float,
    log_noise_sd: float,
) -> None:
    if kind not in KINDS:
        raise GloamError(f"simulation kind must be one of {', '.join(KINDS)}, got {kind!r}")
    if value_type not in ("counts", "log"):
        raise GloamError(f"simulation value_type must be 'counts' or 'log', got {value_type!r}")
    if n_genes < 10:
        raise GloamError(f"simulation n_genes must be at least 10, got {n_genes}")
    if not 0.0 <= flat_share < 1.0:
        raise GloamError(f"simulation flat_share must be in [0, 1), got {flat_share}")
    if kind == "responses":
        n_changing = n_genes - int(round(n_genes * flat_share))
        if not 1 <= n_responses <= n_changing:
            raise GloamError(
                f"simulation n_responses must be between 1 and the {n_changing} non-flat genes, "
                f"got {n_responses}"
            )
    low, high = amplitude_log2
    if not 0.0 < low <= high:
        raise GloamError(
            f"simulation amplitude_log2 must be (low, high) with 0 < low <= high, got {low}, {high}"
        )
    if n_replicates < 1:
        raise GloamError(f"simulation n_replicates must be at least 1, got {n_replicates}")
    if n_conditions not in (1, 2):
        raise GloamError(f"simulation n_conditions must be 1 or 2, got {n_conditions}")
    if not 0.0 <= switch_share <= 1.0:
        raise GloamError(f"simulation switch_share must be in [0, 1], got {switch_share}")
    if dispersion < 0:
        raise GloamError(f"simulation dispersion must be >= 0, got {dispersion}")
    if log_noise_sd < 0:
        raise GloamError(f"simulation log_noise_sd must be >= 0, got {log_noise_sd}")


def _planted_profiles(
    shapes: list[_Shape],
    labels: np.ndarray,
    warp: np.ndarray,
    amplitude: np.ndarray,
    tau: np.ndarray,
) -> np.ndarray:
    """log2 profiles (n_genes, n_timepoints): each gene's own warped shape times its amplitude.

    A gene's warp ``w`` rescales time (``f(w * tau)``), which moves a pulse, dip or step by the
    same share of its own time.  For an undamped rhythm a rescaled time is a different period,
    and the genes of one response would drift out of phase cycle after cycle (by 48 h, several
    hours apart: a continuum, not one response); there the jitter is a phase shift of
    ``(w - 1) * period / 2`` instead, the same in every cycle.
    """
    profiles = np.zeros((labels.size, tau.size))
    for index, shape in enumerate(shapes):  # a loop over the few shapes, not over genes
        rows = labels == f"R{index + 1}"
        if not rows.any():
            continue
        if shape.period is None:
            values = _relative(shape.function, warp[rows, None] * tau[None, :])
        else:
            shift = (warp[rows, None] - 1.0) * shape.period / 2.0
            values = shape.function(tau[None, :] + shift) - shape.function(shift)
        peak = np.abs(values).max(axis=1, keepdims=True)
        profiles[rows] = amplitude[rows, None] * values / np.where(peak > 0, peak, 1.0)
    return profiles


def _structureless_profiles(
    kind: str, n_genes: int, tau: np.ndarray, target: float, rng: np.random.Generator
) -> np.ndarray:
    """Profiles without clusters, scaled so the median largest change from the first time
    point equals ``target`` (log2)."""
    if kind == "gaussian":
        x = np.log1p(tau)
        length = _GAUSSIAN_LENGTH_SHARE * np.ptp(x)
        kernel = np.exp(-((x[:, None] - x[None, :]) ** 2) / (2.0 * length**2))
        eigenvalues, eigenvectors = np.linalg.eigh(kernel)
        root = eigenvectors * np.sqrt(np.clip(eigenvalues, 0.0, None))
        draws = rng.standard_normal((n_genes, tau.size)) @ root.T
    else:
        draws = rng.standard_normal((n_genes, tau.size))
    change = np.abs(draws - draws[:, :1]).max(axis=1)
    return draws * (target / np.median(change))


def _time_label(hours: float) -> str:
    return np.format_float_positional(hours, trim="-").replace("-", "m").replace(".", "p")


def simulate_experiment(
    *,
    kind: str = "responses",
    n_genes: int = 2000,
    n_responses: int = 5,
    flat_share: float = 0.5,
    amplitude_log2: tuple[float, float] = (1.5, 3.0),
    times: Sequence[float] | np.ndarray | None = None,
    n_replicates: int = 3,
    value_type: str = "counts",
    n_conditions: int = 1,
    switch_share: float = 0.1,
    dispersion: float = 0.1,
    log_noise_sd: float = 0.3,
    seed: int = 0,
) -> SimulatedExperiment:
    """Simulate one time-course experiment with a known answer.

    Parameters
    ----------
    kind : {"responses", "gaussian", "independent"}
        Planted responses, or one of the two structureless kinds (see the module).
    n_genes : int
        Number of genes (at least 10).
    n_responses : int
        Number of distinct planted shapes (kind ``responses`` only).
    flat_share : float
        Share of genes with no time effect, in [0, 1); every kind has them.  The other
        genes are split as evenly as possible between the planted shapes.
    amplitude_log2 : (float, float)
        Range of the uniform draw of each planted gene's largest absolute log2 change from
        the first time point.  The structureless kinds are scaled so that their median
        largest change is the middle of this range.
    times : array-like of shape (n_timepoints,), optional
        Sampling times in hours (distinct; sorted here).  Default
        :data:`DEFAULT_TIMES_HOURS`.
    n_replicates : int
        Replicates per condition and time point (1: no replicates).
    value_type : {"counts", "log"}
        Negative binomial counts, or log2 values with Gaussian noise.
    n_conditions : {1, 2}
        With 2, conditions ``wt`` and ``mut`` share the time points; a share
        ``switch_share`` of the planted genes follows another planted shape, or is flat,
        in ``mut`` (the other choices equally likely).  The structureless kinds draw each
        condition independently.
    switch_share : float
        Share of planted genes whose response differs between conditions.
    dispersion : float
        Negative binomial dispersion phi (variance ``mu + phi * mu**2``), counts only.
    log_noise_sd : float
        SD of the Gaussian noise of log data (log2 units).
    seed : int
        Seed of the only random generator; the same seed gives the same experiment.

    Returns
    -------
    SimulatedExperiment

    Raises
    ------
    GloamError
        If a setting is out of range, or that many distinct shapes do not fit the times.

    Notes
    -----
    The expected count of gene g in sample j is ``base_mean_g * 2**profile_g(t_j) * s_j``
    with library size ``s_j`` uniform in [0.6, 1.6] and ``base_mean`` log-normal (median
    200).  Counts are negative binomial with variance ``mu + phi * mu**2``, the usual model
    of RNA-seq counts (Anders & Huber 2010).  Log data are ``level_g + profile_g(t_j)``
    plus Gaussian noise, with ``level`` ~ N(20, 2) (log2 intensities).  Kind ``gaussian``
    draws profiles from a Gaussian process with a squared-exponential covariance
    (Rasmussen & Williams 2006, eq. 2.16; equation number from memory) over
    ``log1p(hours)``, length scale a fifth of the range.

    References
    ----------
    Anders S, Huber W (2010). Differential expression analysis for sequence count data.
    Genome Biology 11:R106.
    Rasmussen CE, Williams CKI (2006). Gaussian Processes for Machine Learning. MIT Press.
    """
    _check_settings(
        kind,
        n_genes,
        n_responses,
        flat_share,
        amplitude_log2,
        n_replicates,
        value_type,
        n_conditions,
        switch_share,
        dispersion,
        log_noise_sd,
    )
    time_points = _check_times(DEFAULT_TIMES_HOURS if times is None else times)
    tau = time_points - time_points[0]
    rng = np.random.default_rng(seed)
    conditions = CONDITIONS[:n_conditions]
    n_times = time_points.size
    low, high = amplitude_log2

    n_flat = int(round(n_genes * flat_share))
    n_changing = n_genes - n_flat
    if kind == "responses":
        shapes = _draw_shapes(tau, n_responses, rng)
        names = [f"R{k}" for k in range(1, n_responses + 1)]
        changing_labels = np.resize(np.array(names, dtype=object), n_changing)
    else:
        shapes, names = [], []
        changing_labels = np.full(n_changing, "unstructured", dtype=object)
    labels = np.concatenate([changing_labels, np.full(n_flat, "flat", dtype=object)])
    labels = labels[rng.permutation(n_genes)]
    planted = np.isin(labels, names)

    amplitude = np.zeros(n_genes)
    amplitude[planted] = rng.uniform(low, high, planted.sum())
    warp = np.exp(rng.normal(0.0, _WARP_LOG_SD, n_genes))

    # Labels per condition: switched planted genes take another shape, or none, in "mut".
    condition_labels = [labels]
    switched = np.zeros(n_genes, dtype=bool)
    if n_conditions == 2:
        mut_labels = labels.copy()
        if names:
            planted_rows = np.flatnonzero(planted)
            n_switched = int(round(switch_share * planted_rows.size))
            rows = rng.choice(planted_rows, size=n_switched, replace=False)
            options = np.array([*names, "flat"], dtype=object)
            own = np.array([names.index(label) for label in labels[rows]], dtype=int)
            # Uniform over the options other than the gene's own shape.
            pick = rng.integers(0, options.size - 1, size=rows.size)
            pick = pick + (pick >= own)
            mut_labels[rows] = options[pick]
            switched[rows] = True
        condition_labels.append(mut_labels)

    blocks = []
    for condition_label in condition_labels:  # one block per condition (at most two)
        if kind == "responses":
            blocks.append(_planted_profiles(shapes, condition_label, warp, amplitude, tau))
        else:
            block = np.zeros((n_genes, n_times))
            changing = condition_label == "unstructured"
            block[changing] = _structureless_profiles(
                kind, int(changing.sum()), tau, (low + high) / 2.0, rng
            )
            blocks.append(block)
    if kind != "responses":
        amplitude = np.max(
            [np.abs(block - block[:, :1]).max(axis=1) for block in blocks], axis=0
        ) * (labels != "flat")
    profiles = np.hstack(blocks)  # (n_genes, n_conditions * n_times)

    sample_condition = np.repeat(np.array(conditions, dtype=object), n_times * n_replicates)
    sample_time = np.tile(np.repeat(time_points, n_replicates), n_conditions)
    sample_replicate = np.tile(np.arange(1, n_replicates + 1), n_times * n_conditions)
    sample_column = np.repeat(np.arange(n_conditions * n_times), n_replicates)
    sample_names = [
        f"{c}_{_time_label(t)}h_r{r}"
        for c, t, r in zip(sample_condition, sample_time, sample_replicate, strict=True)
    ]

    expected = profiles[:, sample_column]
    if value_type == "counts":
        base = np.exp(rng.normal(_COUNT_BASE_LOG_MEAN, _COUNT_BASE_LOG_SD, n_genes))
        library = rng.uniform(*_LIBRARY_RANGE, sample_column.size)
        mean = base[:, None] * np.exp2(expected) * library[None, :]
        values: np.ndarray = negative_binomial_counts(mean, dispersion, rng=rng)
    else:
        base = rng.normal(_LOG_BASE_MEAN, _LOG_BASE_SD, n_genes)
        values = base[:, None] + expected + rng.normal(0.0, log_noise_sd, expected.shape)

    width = len(str(n_genes))
    genes = [f"S{i:0{width}d}" for i in range(1, n_genes + 1)]
    matrix = pd.DataFrame(values, index=pd.Index(genes, name="gene"), columns=sample_names)
    samples = pd.DataFrame(
        {
            "sample": sample_names,
            "time": sample_time,
            "replicate": sample_replicate,
            "condition": sample_condition.astype(str),
        }
    )
    truth = pd.DataFrame({"gene": genes, "response": labels.astype(str)})
    if n_conditions == 2:
        wt = labels.astype(str)
        mut = condition_labels[1].astype(str)
        truth["response"] = np.where(switched, np.char.add(np.char.add(wt, ">"), mut), wt)
        truth["response_wt"] = wt
        truth["response_mut"] = mut
        truth["switched"] = switched
    truth["amplitude_log2"] = amplitude
    truth["base_mean"] = base

    shape_table = pd.DataFrame(
        {"description": [shape.description for shape in shapes]},
        index=pd.Index(names, name="response"),
    )
    if shapes:
        canonical = np.stack([_relative(shape.function, tau) for shape in shapes])
        canonical /= np.abs(canonical).max(axis=1, keepdims=True)
    else:
        canonical = np.zeros((0, n_times))
    for column, time in enumerate(time_points):
        shape_table[f"t{np.format_float_positional(time, trim='-')}"] = canonical[:, column]
    return SimulatedExperiment(
        matrix=matrix,
        samples=samples,
        truth=truth,
        n_planted=len(names),
        value_type=value_type,
        shapes=shape_table,
    )


# ------------------------------------------------------------- two conditions, switching

__all__ += ["SWITCH_KINDS", "simulate_switching"]

#: Values of the truth column ``change`` of :func:`simulate_switching`.
SWITCH_KINDS: tuple[str, ...] = ("none", "other_response", "lost_response")


def simulate_switching(
    *,
    n_genes: int = 2000,
    n_responses: int = 5,
    switch_share: float = 0.1,
    flat_share: float = 0.3,
    amplitude_log2: tuple[float, float] = (1.5, 3.0),
    times: Sequence[float] | np.ndarray | None = None,
    n_replicates: int = 3,
    value_type: str = "counts",
    dispersion: float = 0.1,
    log_noise_sd: float = 0.3,
    null: bool = False,
    seed: int = 0,
) -> SimulatedExperiment:
    """Two conditions with replicates, where a known set of genes changes its response.

    Conditions ``wt`` and ``mut`` (:data:`CONDITIONS`) are sampled at the same times, with
    ``n_replicates`` replicates each.  Planted genes follow one of ``n_responses`` distinct
    shapes in ``wt`` (:func:`simulate_experiment`, kind ``responses``); a share
    ``switch_share`` of them follows another planted shape, or none, in ``mut``.  Every
    other gene has the same expected log2 profile in both conditions, so a condition x
    time interaction exists exactly for the switched genes.

    Parameters
    ----------
    n_genes, n_responses, flat_share, amplitude_log2, times, value_type, dispersion,
    log_noise_sd, seed
        As in :func:`simulate_experiment`.
    switch_share : float
        Share of the planted genes whose response changes, in (0, 1] (ignored with
        ``null``).
    n_replicates : int
        Replicates per condition and time point, >= 2 (a test of the interaction needs
        them).
    null : bool
        No gene changes (every expected profile is the same in both conditions): data to
        check that a test of the interaction keeps its false discoveries at the level.

    Returns
    -------
    SimulatedExperiment
        As :func:`simulate_experiment` with two conditions; the truth table also has
        ``changed`` (bool: the expected profiles differ between the conditions, the same as
        ``switched``) and ``change``, one of :data:`SWITCH_KINDS`: ``none``,
        ``other_response`` (another planted shape in ``mut``) or ``lost_response`` (flat in
        ``mut``).

    Raises
    ------
    GloamError
        A setting out of range (as :func:`simulate_experiment`), fewer than 2 replicates, or
        ``switch_share`` not in (0, 1] without ``null``.
    """
    if n_replicates < 2:
        raise GloamError(
            f"simulate_switching needs n_replicates >= 2 (replicates make the interaction "
            f"testable), got {n_replicates}"
        )
    if not null and not 0.0 < switch_share <= 1.0:
        raise GloamError(
            f"simulate_switching switch_share must be in (0, 1] (or use null=True), got "
            f"{switch_share}"
        )
    experiment = simulate_experiment(
        kind="responses",
        n_genes=n_genes,
        n_responses=n_responses,
        flat_share=flat_share,
        amplitude_log2=amplitude_log2,
        times=times,
        n_replicates=n_replicates,
        value_type=value_type,
        n_conditions=2,
        switch_share=0.0 if null else switch_share,
        dispersion=dispersion,
        log_noise_sd=log_noise_sd,
        seed=seed,
    )
    truth = experiment.truth.copy()
    switched = truth["switched"].to_numpy(dtype=bool)
    lost = switched & (truth["response_mut"].to_numpy(dtype=str) == "flat")
    truth["changed"] = switched
    truth["change"] = np.where(lost, "lost_response", np.where(switched, "other_response", "none"))
    return SimulatedExperiment(
        matrix=experiment.matrix,
        samples=experiment.samples,
        truth=truth,
        n_planted=experiment.n_planted,
        value_type=experiment.value_type,
        shapes=experiment.shapes,
    )
