"""Choice of the fuzzifier m: the published estimate and a randomised-data check.

Too small an m forces even random data into crisp clusters; too large an m
blurs every membership towards ``1/c``.  Schwämmle & Jensen (2010) fitted, on
randomised data of many sizes, the m at which fuzzy c-means stops finding
clusters in data that has none, as a function of the number of genes N and of
time points D.  gloam uses that estimate by default and checks it on the data
itself: each gene's values are shuffled across time points (which keeps every
gene's distribution and destroys all shared temporal pattern), the shuffled
data are clustered over a grid of m, and the curve of remaining structure is
returned for plotting.

References
----------
Schwämmle, V. & Jensen, O. N. (2010). A simple and fast method to determine
the parameters for fuzzy c-means cluster analysis. *Bioinformatics*
26(22):2841-2848.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from gloam.errors import ConvergenceWarning, GloamError
from gloam.fcm import fuzzy_cmeans
from gloam.validity import min_centroid_distance

__all__ = [
    "FuzzifierChoice",
    "schwaemmle_jensen_m",
    "shuffle_within_genes",
    "randomised_structure_curve",
    "choose_fuzzifier",
    "CURVE_COLUMNS",
]

#: Columns of the randomised-data curve.
CURVE_COLUMNS = [
    "m",
    "mean_max_membership",
    "uniform_level",
    "structure_index",
    "min_centroid_distance",
]
#: Shuffled data count as structureless once the structure index is below this value.
STRUCTURELESS_INDEX = 0.05


@dataclass(frozen=True)
class FuzzifierChoice:
    """The fuzzifier used and the evidence behind it.

    Attributes
    ----------
    m : float
        The fuzzifier to cluster with.
    method : {"formula", "fixed", "randomised"}
        ``"formula"``: Schwämmle & Jensen's estimate; ``"fixed"``: set by the user;
        ``"randomised"``: the smallest m on the grid at which the shuffled data show
        no structure.
    formula_m : float
        Schwämmle & Jensen's estimate for this data size (always reported).
    curve : pandas.DataFrame
        One row per m on the grid, columns :data:`CURVE_COLUMNS`, measured on the
        shuffled data (see :func:`randomised_structure_curve`).
    n_clusters_check : int
        Number of clusters used for the randomised-data check.
    """

    m: float
    method: str
    formula_m: float
    curve: pd.DataFrame
    n_clusters_check: int


def schwaemmle_jensen_m(n_genes: int, n_timepoints: int) -> float:
    """Schwämmle & Jensen's estimate of the fuzzifier from the data's size.

    .. math::

        m(N, D) = 1 + \\left(\\frac{1418}{N} + 22.05\\right) D^{-2}
                    + \\left(\\frac{12.33}{N} + 0.243\\right) D^{-0.0406 \\ln N - 0.1134}

    Parameters
    ----------
    n_genes : int
        N, the number of genes clustered (>= 2).
    n_timepoints : int
        D, the dimension of each profile (columns clustered, >= 1).

    Returns
    -------
    float
        The estimate, always > 1; it falls towards 1 as D grows.

    References
    ----------
    Schwämmle & Jensen (2010), Bioinformatics 26:2841, equation fitted to randomised data.
    """
    if isinstance(n_genes, bool) or not isinstance(n_genes, int | np.integer) or n_genes < 2:
        raise GloamError(f"n_genes must be an integer >= 2; got {n_genes!r}")
    if (
        isinstance(n_timepoints, bool)
        or not isinstance(n_timepoints, int | np.integer)
        or n_timepoints < 1
    ):
        raise GloamError(f"n_timepoints must be an integer >= 1; got {n_timepoints!r}")
    N = float(n_genes)
    D = float(n_timepoints)
    return (
        1.0
        + (1418.0 / N + 22.05) * D**-2
        + (12.33 / N + 0.243) * D ** (-0.0406 * math.log(N) - 0.1134)
    )


def shuffle_within_genes(X: np.ndarray, *, rng: np.random.Generator) -> np.ndarray:
    """Shuffle each row's values independently across columns.

    Parameters
    ----------
    X : ndarray of shape (n_genes, n_timepoints)

    Returns
    -------
    ndarray of shape (n_genes, n_timepoints)
        Every row holds the same values as in ``X`` in a random order.
    """
    order = rng.random(X.shape).argsort(axis=1)
    return np.take_along_axis(np.asarray(X, dtype=np.float64), order, axis=1)


def randomised_structure_curve(
    X: np.ndarray,
    m_grid: np.ndarray,
    n_clusters: int,
    *,
    rng: np.random.Generator,
    n_starts: int = 3,
    tol: float = 1e-4,
    max_iter: int = 300,
    max_genes: int = 5000,
) -> pd.DataFrame:
    """How much cluster structure fuzzy c-means finds in shuffled data, over a grid of m.

    Parameters
    ----------
    X : ndarray of shape (n_genes, n_timepoints)
        The data to be clustered (z-scored profiles).
    m_grid : array of float
        Fuzzifiers to try, each > 1.
    n_clusters : int
        c for the check.
    rng : numpy.random.Generator
    n_starts, tol, max_iter : see :func:`gloam.fcm.fuzzy_cmeans`.
    max_genes : int
        Genes drawn at random for the check when there are more (the curve only
        needs the data's shape, not every gene).

    Returns
    -------
    pandas.DataFrame
        Columns :data:`CURVE_COLUMNS`: ``mean_max_membership`` is the mean over
        genes of the largest membership (best start); ``uniform_level`` = 1/c;
        ``structure_index`` = (mean_max_membership - 1/c) / (1 - 1/c), 0 when every
        membership is 1/c and 1 for a crisp partition; ``min_centroid_distance``
        is in squared z-score units.  Only the grid's m values are rows; the
        grid is sorted.
    """
    grid = np.sort(np.asarray(m_grid, dtype=np.float64))
    if grid.size == 0 or not np.all(np.isfinite(grid)) or np.any(grid <= 1):
        raise GloamError(f"every m in the fuzzifier grid must be a finite number > 1; got {grid}")
    data = np.asarray(X, dtype=np.float64)
    if data.shape[0] > max_genes:
        data = data[rng.choice(data.shape[0], size=max_genes, replace=False)]
    shuffled = shuffle_within_genes(data, rng=rng)
    rows = []
    for m in grid:
        with warnings.catch_warnings():
            # Near the collapse point convergence is slow; the curve is still informative.
            warnings.simplefilter("ignore", ConvergenceWarning)
            result = fuzzy_cmeans(
                shuffled,
                n_clusters,
                float(m),
                n_starts=n_starts,
                tol=tol,
                max_iter=max_iter,
                rng=rng,
            )
        best = result.best()
        mean_max = float(best.memberships.max(axis=1).mean())
        uniform = 1.0 / n_clusters
        rows.append(
            {
                "m": float(m),
                "mean_max_membership": mean_max,
                "uniform_level": uniform,
                "structure_index": (mean_max - uniform) / (1.0 - uniform),
                "min_centroid_distance": min_centroid_distance(best.centroids),
            }
        )
    return pd.DataFrame(rows, columns=CURVE_COLUMNS)


def default_m_grid(formula_m: float) -> np.ndarray:
    """The grid of m for the check: 1.05 up to twice the estimate's excess over 1."""
    upper = max(1.0 + 2.0 * (formula_m - 1.0), 1.6)
    return np.unique(np.round(np.append(np.linspace(1.05, upper, 12), formula_m), 4))


def choose_fuzzifier(
    X: np.ndarray,
    setting: str | float,
    *,
    n_clusters_check: int = 6,
    rng: int | np.random.Generator | None = None,
    m_grid: np.ndarray | None = None,
    n_starts: int = 3,
    max_genes: int = 5000,
) -> FuzzifierChoice:
    """Choose m for ``X`` and measure the randomised-data curve behind the choice.

    Parameters
    ----------
    X : ndarray of shape (n_genes, n_timepoints)
        The prepared (z-scored) data to be clustered.
    setting : "auto", "randomised" or a number > 1
        ``"auto"``: Schwämmle & Jensen's estimate; ``"randomised"``: the smallest m
        of the grid whose shuffled-data structure index is below
        :data:`STRUCTURELESS_INDEX` (the estimate if none is); a number: that m.
    n_clusters_check : int, default 6
        c for the check (capped below the number of genes).
    rng : seed or numpy.random.Generator
    m_grid : array of float, optional
        Default :func:`default_m_grid`.
    n_starts, max_genes : see :func:`randomised_structure_curve`.

    Returns
    -------
    FuzzifierChoice
    """
    data = np.asarray(X, dtype=np.float64)
    if data.ndim != 2 or data.shape[0] < 3:
        raise GloamError(
            f"the data for the fuzzifier must be a (n_genes, n_timepoints) array with at least "
            f"3 genes; got shape {data.shape}"
        )
    generator = np.random.default_rng(rng)
    formula_m = schwaemmle_jensen_m(data.shape[0], data.shape[1])
    if isinstance(setting, str):
        if setting not in ("auto", "randomised"):
            raise GloamError(
                f"fuzzifier must be 'auto', 'randomised' or a number > 1; got {setting!r}"
            )
    elif (
        isinstance(setting, bool)
        or not isinstance(setting, int | float)
        or not (math.isfinite(setting) and setting > 1)
    ):
        raise GloamError(f"fuzzifier must be 'auto', 'randomised' or a number > 1; got {setting!r}")
    c_check = int(min(n_clusters_check, data.shape[0] - 1))
    grid = default_m_grid(formula_m) if m_grid is None else np.asarray(m_grid, dtype=float)
    if not isinstance(setting, str):
        grid = np.unique(np.append(grid, float(setting)))
    curve = randomised_structure_curve(
        data, grid, c_check, rng=generator, n_starts=n_starts, max_genes=max_genes
    )
    if setting == "auto":
        m, method = formula_m, "formula"
    elif setting == "randomised":
        structureless = curve.loc[curve["structure_index"] < STRUCTURELESS_INDEX, "m"]
        m = float(structureless.min()) if len(structureless) else formula_m
        method = "randomised"
    else:
        m, method = float(setting), "fixed"
    return FuzzifierChoice(
        m=float(m), method=method, formula_m=formula_m, curve=curve, n_clusters_check=c_check
    )
