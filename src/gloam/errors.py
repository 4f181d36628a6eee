"""One exception type for user mistakes, and the project's warning classes.

A :class:`GloamError` is raised for anything the user can fix (a bad file, a bad
setting, a bad value).  Command-line entry points and rule scripts render it as a
single line on stderr and exit with status 2; they never show a traceback for it.
"""

from __future__ import annotations

import sys
import warnings
from collections.abc import Callable
from typing import NoReturn, TextIO

__all__ = [
    "GloamError",
    "GloamWarning",
    "ConvergenceWarning",
    "QualityWarning",
    "QUALITY_FLAGS",
    "raise_flag",
    "exit_on_user_error",
    "report_and_exit",
    "show_warning",
]

USER_ERROR_EXIT_CODE = 2


class GloamError(Exception):
    """A mistake the user can fix; the message says what is wrong and how to fix it."""

    def __str__(self) -> str:
        # One line, whatever the caller passed: multi-line text would be split by logs.
        return " ".join(str(self.args[0] if self.args else "").split())


class GloamWarning(UserWarning):
    """Something worth knowing that does not stop the run."""


class ConvergenceWarning(GloamWarning):
    """Fuzzy c-means stopped at ``max_iter`` before the membership change fell below ``tol``."""


class QualityWarning(GloamWarning):
    """A quality check failed: the result exists but needs care (see :data:`QUALITY_FLAGS`)."""


#: Every quality flag a run can carry, with what it means for the user. A flag travels to
#: ``selection.json``, ``summary.tsv`` (column ``flags``), the job's log and the report.
QUALITY_FLAGS: dict[str, str] = {
    "no_replicates": (
        "no time point has replicates, so genes were selected by the variance rule, not by a "
        "test against replicate noise"
    ),
    "fuzzifier_check_failed": (
        "shuffled data still show cluster structure at the m used; consider a larger m "
        "(fuzzifier.m: randomised)"
    ),
    "no_structure": (
        "the selected genes show no more cluster structure than one Gaussian with the same "
        "covariance; clusters would be arbitrary cuts of a continuum"
    ),
    "no_robust_c": (
        "no scanned number of clusters gave clusters that are robust, sizeable, distinct, "
        "coherent and separated"
    ),
    "few_starts_at_optimum": (
        "few random starts reached the best objective at the c used, even after adding starts"
    ),
    "unstable_clusters": (
        "a cluster at the c used dissolves under resampling (mean Jaccard below the stable level)"
    ),
    "near_empty_clusters": "a cluster at the c used has fewer core genes than the minimum",
    "similar_centroids": "two centroids at the c used are nearly the same response",
    "unseparated_clusters": (
        "a cluster at the c used and its most similar neighbour look like one response cut in "
        "two (no more two-cluster structure than one Gaussian)"
    ),
    "incoherent_clusters": (
        "a cluster at the c used gathers genes that barely agree (a centroid near the flat profile)"
    ),
    "c_at_scan_edge": (
        "the recommended c is the largest scanned; scan larger c (scan.max_clusters) to see "
        "whether more clusters pass"
    ),
    "mostly_noise": "more than half of the clustered genes fit no cluster (noise class largest)",
}


def raise_flag(name: str, detail: str) -> str:
    """Warn about quality flag ``name`` in one line (with ``detail``) and return the name.

    Raises
    ------
    KeyError
        If ``name`` is not in :data:`QUALITY_FLAGS` (a programming error, not a user's).
    """
    meaning = QUALITY_FLAGS[name]
    warnings.warn(f"quality flag {name}: {detail} ({meaning})", QualityWarning, stacklevel=2)
    return name


def report_and_exit(error: GloamError) -> NoReturn:
    """Print ``error`` as one line on stderr and exit with status 2."""
    print(f"gloam: error: {error}", file=sys.stderr)
    raise SystemExit(USER_ERROR_EXIT_CODE)


def exit_on_user_error(function: Callable[[], object]) -> object:
    """Call ``function()``; turn a :class:`GloamError` into a one-line message and exit 2."""
    try:
        return function()
    except GloamError as error:
        report_and_exit(error)


def show_warning(
    message: Warning | str,
    category: type[Warning],
    filename: str,
    lineno: int,
    file: TextIO | None = None,
    line: str | None = None,
) -> None:
    """A ``warnings.showwarning`` that writes gloam's own warnings as one line.

    :class:`GloamWarning` is for the user: ``gloam: warning: <message>`` on stderr, without
    the source location. Other warnings keep Python's usual format.
    """
    stream = file if file is not None else sys.stderr
    if issubclass(category, GloamWarning):
        stream.write(f"gloam: warning: {message}\n")
    else:
        stream.write(warnings.formatwarning(message, category, filename, lineno, line))
