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
