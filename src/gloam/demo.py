"""Invented demo data: leaves of an alpine herb moved into the cold.

Scenario (invented for gloam, no real organism or experiment behind it): potted
plants of a small alpine herb are moved from 20 °C to 4 °C at time 0 and whole
leaves are sampled at ten unevenly spaced times over two days (0, 0.5, 1, 2, 4,
6, 9, 12, 24 and 48 h), three biological replicates each, and sequenced.  Most
genes do nothing; five groups of genes follow a planted temporal response:

``early_transient``
    a pulse peaking at 1 h and gone by 6 h (first wave of signalling);
``mid_transient``
    a broader pulse peaking at 6 h;
``late_sustained``
    a rise after about 9 h that stays up (acclimation);
``repressed``
    a fall within the first hours that stays down;
``oscillating``
    a daily rhythm (24 h period) that keeps running in the cold.

With ``with_mutant=True`` the same times are also sampled in an invented line lacking a
cold-signalling regulator (condition ``frl1``; the wild type is ``cold``).  In that line
a share of the planted genes responds differently: half of the ``late_sustained`` genes
never rise (acclimation is lost), and a third of the ``early_transient`` genes are
delayed into the ``mid_transient`` pulse; every other gene behaves as in the wild type.
The truth table then has ``response_frl1`` and ``switched``.

The remaining genes are ``flat`` (no change; only sampling noise) or
``unstructured`` (an independent random level at each time point, shared by the
replicates), so a clustering has something to ignore.  Counts are drawn from a
gamma-Poisson (negative binomial) model with gene-specific dispersion and
sample-specific library sizes.  Everything is deterministic given ``seed``.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from gloam.errors import GloamError
from gloam.io import write_table

__all__ = [
    "DEMO_TIMES_HOURS",
    "MUTANT_CONDITION",
    "MUTANT_SWITCHES",
    "PLANTED_RESPONSES",
    "DemoData",
    "response_profiles",
    "simulate_demo",
    "write_demo",
]

#: Sampling times of the demo (hours after the move to 4 °C); deliberately uneven.
DEMO_TIMES_HOURS: tuple[float, ...] = (0.0, 0.5, 1.0, 2.0, 4.0, 6.0, 9.0, 12.0, 24.0, 48.0)

#: Condition name of the invented mutant line (the wild type is ``cold``).
MUTANT_CONDITION = "frl1"
#: How the mutant line's responses differ: (wild-type response, mutant response, share of
#: the wild-type response's genes that switch).
MUTANT_SWITCHES: tuple[tuple[str, str, float], ...] = (
    ("late_sustained", "flat", 0.5),
    ("early_transient", "mid_transient", 1.0 / 3.0),
)

#: Names of the planted temporal responses, in the order used for the truth table.
PLANTED_RESPONSES: tuple[str, ...] = (
    "early_transient",
    "mid_transient",
    "late_sustained",
    "repressed",
    "oscillating",
)


@dataclass(frozen=True)
class DemoData:
    """One simulated experiment.

    Attributes
    ----------
    counts : DataFrame of shape (n_genes, n_samples)
        Raw integer counts; index = gene id, columns = sample names.
    samples : DataFrame
        Sample sheet with columns ``sample``, ``time`` (hours), ``replicate``, ``condition``.
    truth : DataFrame
        One row per gene: ``gene``, ``response`` (a name from :data:`PLANTED_RESPONSES`,
        ``flat`` or ``unstructured``), ``amplitude_log2`` (peak absolute log2 fold change
        of the planted response, 0 for flat genes), ``base_mean`` (expected count at
        time 0 for a library of average size).
    """

    counts: pd.DataFrame
    samples: pd.DataFrame
    truth: pd.DataFrame


def response_profiles(times: np.ndarray) -> np.ndarray:
    """Shape of each planted response at ``times``, peak absolute value 1.

    Parameters
    ----------
    times : ndarray of shape (n_timepoints,)
        Hours after the move into the cold.

    Returns
    -------
    ndarray of shape (len(PLANTED_RESPONSES), n_timepoints)
        Log2 fold change against time 0 per unit amplitude, rows in the order of
        :data:`PLANTED_RESPONSES`; every row is 0 at ``t = 0``.
    """
    t = np.asarray(times, dtype=float)

    def pulse(peak_hours: float) -> np.ndarray:
        # Gamma-like pulse: 0 at t = 0, maximum 1 at t = peak_hours, then decays.
        return (t / peak_hours) * np.exp(1.0 - t / peak_hours)

    def rise(midpoint_hours: float, width_hours: float) -> np.ndarray:
        curve = 1.0 / (1.0 + np.exp(-(t - midpoint_hours) / width_hours))
        start = 1.0 / (1.0 + np.exp(midpoint_hours / width_hours))
        return (curve - start) / (1.0 - start)

    profiles = np.vstack(
        [
            pulse(1.0),
            pulse(6.0),
            rise(12.0, 2.5),
            -(1.0 - np.exp(-t / 1.5)),
            np.cos(2.0 * np.pi * t / 24.0) - 1.0,
        ]
    )
    return profiles / np.abs(profiles).max(axis=1, keepdims=True)


def simulate_demo(
    *,
    seed: int = 20261201,
    n_genes: int = 3000,
    n_replicates: int = 3,
    planted_fraction: float = 0.5,
    flat_fraction: float = 0.3,
    times: tuple[float, ...] = DEMO_TIMES_HOURS,
    with_mutant: bool = False,
) -> DemoData:
    """Simulate the cold-response demo experiment.

    Parameters
    ----------
    seed : int
        Seed of the only random generator used; the same seed gives the same data.
    n_genes : int
        Total number of genes (at least 50).
    n_replicates : int
        Biological replicates per time point.
    planted_fraction : float
        Share of genes carrying one of the planted responses, split evenly between them.
    flat_fraction : float
        Share of genes with no change; the rest are ``unstructured``.
    times : tuple of float
        Sampling times in hours.
    with_mutant : bool
        Also sample the invented ``frl1`` line at the same times (see the module): the
        genes whose response changes there are marked ``switched`` in the truth table.

    Returns
    -------
    DemoData

    Raises
    ------
    GloamError
        If a size or fraction is out of range.

    Notes
    -----
    Counts follow a gamma-Poisson mixture, i.e. a negative binomial with mean
    ``s_j * mu_gt`` and variance ``mu + phi_g * mu**2``, the usual model of RNA-seq
    counts (Robinson & Smyth 2007; Love, Huber & Anders 2014).  Dispersions follow
    a decreasing mean trend plus log-normal scatter (common practice in simulation).

    References
    ----------
    Robinson MD, Smyth GK (2007). Moderated statistical tests for assessing
    differences in tag abundance. Bioinformatics 23:2881-2887.
    Love MI, Huber W, Anders S (2014). Moderated estimation of fold change and
    dispersion for RNA-seq data with DESeq2. Genome Biology 15:550.
    """
    if n_genes < 50:
        raise GloamError(f"demo n_genes must be at least 50, got {n_genes}")
    if n_replicates < 1:
        raise GloamError(f"demo n_replicates must be at least 1, got {n_replicates}")
    if not (0.0 < planted_fraction <= 1.0 and 0.0 <= flat_fraction <= 1.0 - planted_fraction):
        raise GloamError(
            "demo fractions must satisfy 0 < planted_fraction <= 1 and "
            f"0 <= flat_fraction <= 1 - planted_fraction, got {planted_fraction}, {flat_fraction}"
        )
    rng = np.random.default_rng(seed)
    time_array = np.asarray(times, dtype=float)
    n_times = time_array.size

    n_planted_each = int(round(n_genes * planted_fraction / len(PLANTED_RESPONSES)))
    n_planted = n_planted_each * len(PLANTED_RESPONSES)
    n_flat = int(round(n_genes * flat_fraction))
    n_unstructured = n_genes - n_planted - n_flat
    labels = np.concatenate(
        [
            np.repeat(np.array(PLANTED_RESPONSES, dtype=object), n_planted_each),
            np.full(n_flat, "flat", dtype=object),
            np.full(n_unstructured, "unstructured", dtype=object),
        ]
    )
    labels = labels[rng.permutation(n_genes)]

    # Log2 fold change of every gene at every time point, built without a loop over genes.
    shapes = response_profiles(time_array)
    response_index = {name: i for i, name in enumerate(PLANTED_RESPONSES)}
    planted = np.isin(labels, PLANTED_RESPONSES)
    amplitude = np.zeros(n_genes)
    amplitude[planted] = rng.uniform(1.5, 3.0, planted.sum())
    log2_fold = np.zeros((n_genes, n_times))
    rows = np.array([response_index[name] for name in labels[planted]], dtype=int)
    log2_fold[planted] = amplitude[planted, None] * shapes[rows]
    unstructured = labels == "unstructured"
    log2_fold[unstructured] = rng.normal(0.0, 0.8, (unstructured.sum(), n_times))
    amplitude[unstructured] = np.abs(log2_fold[unstructured]).max(axis=1)

    # Planted genes are reasonably expressed; flat and unstructured genes span the whole range.
    base_mean = np.exp(rng.normal(np.log(150.0), 1.3, n_genes))
    base_mean[planted] = np.exp(rng.normal(np.log(400.0), 0.8, planted.sum()))
    dispersion = (0.03 + 1.0 / base_mean) * np.exp(rng.normal(0.0, 0.3, n_genes))

    conditions = [("cold", log2_fold, labels)]
    if with_mutant:
        mutant_labels = labels.copy()
        for source, target, share in MUTANT_SWITCHES:
            members = np.flatnonzero(labels == source)
            moved = rng.choice(members, size=int(round(share * members.size)), replace=False)
            mutant_labels[moved] = target
        mutant_fold = log2_fold.copy()
        switched = mutant_labels != labels
        to_response = switched & np.isin(mutant_labels, PLANTED_RESPONSES)
        targets = np.array([response_index[name] for name in mutant_labels[to_response]])
        mutant_fold[to_response] = amplitude[to_response, None] * shapes[targets]
        mutant_fold[switched & ~to_response] = 0.0
        conditions.append((MUTANT_CONDITION, mutant_fold, mutant_labels))

    sample_time = np.repeat(time_array, n_replicates)
    sample_replicate = np.tile(np.arange(1, n_replicates + 1), n_times)
    time_of_sample = np.repeat(np.arange(n_times), n_replicates)
    shape = 1.0 / dispersion[:, None]
    width = len(str(n_genes))
    genes = [f"AH{i:0{width}d}" for i in range(1, n_genes + 1)]
    blocks, sheets = [], []
    for condition, fold, _ in conditions:  # one or two conditions, not genes
        library_size = np.exp(rng.normal(0.0, 0.35, sample_time.size))
        mean = base_mean[:, None] * np.exp2(fold[:, time_of_sample]) * library_size[None, :]
        blocks.append(rng.poisson(rng.gamma(shape, mean / shape)))
        names = [
            f"{condition}_{_format_hours(t)}h_r{r}"
            for t, r in zip(sample_time, sample_replicate, strict=True)
        ]
        sheets.append(
            pd.DataFrame(
                {
                    "sample": names,
                    "time": sample_time,
                    "replicate": sample_replicate,
                    "condition": condition,
                }
            )
        )
    samples = pd.concat(sheets, ignore_index=True)
    counts_table = pd.DataFrame(
        np.hstack(blocks).astype(np.int64),
        index=pd.Index(genes, name="gene"),
        columns=samples["sample"].to_list(),
    )
    truth = pd.DataFrame(
        {
            "gene": genes,
            "response": labels.astype(str),
            "amplitude_log2": amplitude,
            "base_mean": base_mean,
        }
    )
    if with_mutant:
        truth[f"response_{MUTANT_CONDITION}"] = conditions[1][2].astype(str)
        truth["switched"] = conditions[1][2] != labels
    return DemoData(counts=counts_table, samples=samples, truth=truth)


def _format_hours(hours: float) -> str:
    return f"{hours:g}".replace(".", "p")


def write_demo(
    out_dir: str | os.PathLike[str],
    *,
    counts_path: str | os.PathLike[str] | None = None,
    samples_path: str | os.PathLike[str] | None = None,
    truth_path: str | os.PathLike[str] | None = None,
    **settings: object,
) -> list[Path]:
    """Simulate the demo (see :func:`simulate_demo`) and write it as TSV files.

    Files (defaults inside ``out_dir``):

    ``counts.tsv``
        ``gene`` column, then one integer column per sample.
    ``samples.tsv``
        ``sample``, ``time`` (hours), ``replicate``, ``condition``.
    ``truth.tsv``
        ``gene``, ``response``, ``amplitude_log2``, ``base_mean`` (the planted answer; with
        the mutant also ``response_frl1`` and ``switched``).

    Returns
    -------
    list of Path
        The three files written, in the order above.
    """
    directory = Path(out_dir)
    data = simulate_demo(**settings)  # type: ignore[arg-type]
    paths = [
        Path(counts_path) if counts_path else directory / "counts.tsv",
        Path(samples_path) if samples_path else directory / "samples.tsv",
        Path(truth_path) if truth_path else directory / "truth.tsv",
    ]
    write_table(data.counts, paths[0], index=True)
    write_table(data.samples, paths[1])
    write_table(data.truth, paths[2])
    return paths
