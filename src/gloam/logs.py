"""Where gloam's log records and warnings go: a rule's log file, or the terminal of
``gloam cluster``.

Every module logs through its own ``logging.getLogger(__name__)`` (``gloam.stages``, ...)
and nothing is configured at import. The context managers here attach handlers to the root
logger for as long as they are open, lower the ``gloam`` logger to INFO, and route the
``warnings`` module into the same records (the equivalent of :func:`logging.captureWarnings`,
one line per warning). On leaving, every handler, level and warning hook is as it was, so a
host process (a notebook, a test run, another workflow) keeps its own logging.

A :class:`~gloam.errors.GloamWarning` raised while :func:`about` is open is prefixed with its
subject (``c = 7: ...``) unless its message already starts with it, so a warning from deep in
the engine still names the c it is about.
"""

from __future__ import annotations

import contextlib
import logging
import os
import sys
import warnings
from collections.abc import Iterator
from contextvars import ContextVar
from typing import TextIO

from gloam.errors import GloamWarning

__all__ = [
    "LOG_FORMAT",
    "PROGRESS",
    "WARNINGS_LOGGER",
    "log_to_file",
    "console_logging",
    "progress",
    "position",
    "about",
    "log_warning",
]

#: Format of a rule's log file: time, level, logger, message.
LOG_FORMAT = "%(asctime)s %(levelname)s %(name)s: %(message)s"

#: ``extra=`` of a record that is a progress line (shown by :func:`console_logging` even when
#: not verbose).
PROGRESS = {"progress": True}

#: Logger of captured warnings (the name :func:`logging.captureWarnings` uses).
WARNINGS_LOGGER = "py.warnings"

_PACKAGE = "gloam"
_subject: ContextVar[str] = ContextVar("gloam_log_subject", default="")
_position: ContextVar[str] = ContextVar("gloam_log_position", default="")


@contextlib.contextmanager
def about(subject: str) -> Iterator[None]:
    """Name ``subject`` (e.g. ``"c = 7"``) in every gloam warning logged inside the block."""
    token = _subject.set(subject)
    try:
        yield
    finally:
        _subject.reset(token)


@contextlib.contextmanager
def progress(index: int, total: int) -> Iterator[None]:
    """Mark the block as step ``index`` of ``total``; stages add ``(index of total)`` to their
    progress line (see :func:`position`)."""
    token = _position.set(f"{int(index)} of {int(total)}")
    try:
        yield
    finally:
        _position.reset(token)


def position() -> str:
    """``" (4 of 9)"`` inside :func:`progress`, else the empty string."""
    text = _position.get()
    return f" ({text})" if text else ""


def log_warning(
    message: Warning | str,
    category: type[Warning],
    filename: str,
    lineno: int,
    file: TextIO | None = None,
    line: str | None = None,
) -> None:
    """A ``warnings.showwarning`` that logs each warning as one WARNING record.

    gloam's own warnings keep their message alone (prefixed with the subject of
    :func:`about`); other warnings also name their category and source location.
    """
    text = " ".join(str(message).split())
    if issubclass(category, GloamWarning):
        subject = _subject.get()
        if subject and not text.startswith(subject):
            text = f"{subject}: {text}"
    else:
        text = f"{category.__name__}: {text} ({filename}:{lineno})"
    logging.getLogger(WARNINGS_LOGGER).warning(text)


class _OneLine(logging.Formatter):
    """``gloam: <message>`` for INFO, ``gloam: warning: <message>`` above (the command
    line's style)."""

    def format(self, record: logging.LogRecord) -> str:
        text = record.getMessage()
        if record.levelno >= logging.WARNING:
            return f"gloam: {record.levelname.lower()}: {text}"
        return f"gloam: {text}"


@contextlib.contextmanager
def _routed(*handlers: logging.Handler) -> Iterator[None]:
    """Attach ``handlers`` to the root logger, gloam at INFO, warnings logged; undo on exit."""
    root = logging.getLogger()
    package = logging.getLogger(_PACKAGE)
    level = package.level
    package.setLevel(logging.INFO)
    for handler in handlers:
        root.addHandler(handler)
    try:
        with warnings.catch_warnings():
            warnings.showwarning = log_warning
            yield
    finally:
        for handler in handlers:
            root.removeHandler(handler)
            handler.close()
        package.setLevel(level)


def _only_warnings(record: logging.LogRecord) -> bool:
    return record.levelno == logging.WARNING


@contextlib.contextmanager
def log_to_file(path: str | os.PathLike[str], *, stream: TextIO | None = None) -> Iterator[None]:
    """Write gloam's INFO records, and every warning and error, to ``path`` (replaced).

    Lines follow :data:`LOG_FORMAT`. Warnings are also written to ``stream`` (default: stderr
    as it is on entry) as ``gloam: warning: ...``, so the terminal of a workflow run still
    shows them.
    """
    to_file = logging.FileHandler(path, mode="w", encoding="utf-8")
    to_file.setLevel(logging.INFO)
    to_file.setFormatter(logging.Formatter(LOG_FORMAT))
    to_terminal = logging.StreamHandler(stream if stream is not None else sys.stderr)
    to_terminal.addFilter(_only_warnings)
    to_terminal.setFormatter(_OneLine())
    with _routed(to_file, to_terminal):
        yield


@contextlib.contextmanager
def console_logging(verbose: bool = False, *, stream: TextIO | None = None) -> Iterator[None]:
    """Show gloam's progress on ``stream`` (default: stderr as it is on entry).

    Progress lines (one per stage, one per scanned c) and every warning are shown as
    ``gloam: ...``; with ``verbose`` every INFO record of gloam too (what was read and
    kept, the criteria of each c). Meant for in-process runs such as ``gloam cluster``.
    """

    def keep(record: logging.LogRecord) -> bool:
        if record.levelno >= logging.WARNING:
            return True
        if not (record.name == _PACKAGE or record.name.startswith(f"{_PACKAGE}.")):
            return False
        return verbose or bool(getattr(record, "progress", False))

    handler = logging.StreamHandler(stream if stream is not None else sys.stderr)
    handler.setLevel(logging.INFO)
    handler.addFilter(keep)
    handler.setFormatter(_OneLine())
    with _routed(handler):
        yield
