"""Record the warnings a stage raises, once each, without ever re-raising into itself.

Every stage of a run (reading, interpolating, computing, writing) and ``check``
run inside :func:`record_warnings`. It swaps :func:`warnings.showwarning` for a
handler that files each warning as it is raised:

* a geosoil warning (:class:`~geosoil.errors.GeosoilWarning`) is kept as its
  message;
* any other warning a library raises at run time (a ``RuntimeWarning`` from
  numpy, a ``UserWarning`` from GDAL...) is kept as its message with its kind
  and where it came from, so it is reported too, never lost;
* warnings meant for developers (deprecations, resource and import warnings)
  are not kept: they are raised again once the block is left, so the filters
  outside (pytest's, the interpreter's) decide about them.

Each distinct message is kept once, however often it is raised; the handler
never raises a warning itself, so any number of warnings costs one entry each
and the block cannot loop. Recorders nest: an inner one hands what it kept to
the one around it when it closes (also when the block raised), so nothing is
lost when a stage stops early.
"""

from __future__ import annotations

import logging
import os
import warnings
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from .errors import GeosoilWarning

__all__ = ["record_warnings", "LIBRARY_WARNINGS_KEPT", "DEVELOPER_WARNINGS"]

logger = logging.getLogger(__name__)

#: Distinct library (non-geosoil) warnings one recorder keeps word for word; the rest
#: are counted in one closing line, so a library warning raised with a different
#: message for each of a million cells cannot fill the memory.
LIBRARY_WARNINGS_KEPT = 50

#: Kinds of warning that are for developers, not for the person running a job.
DEVELOPER_WARNINGS: tuple[type[Warning], ...] = (
    DeprecationWarning, PendingDeprecationWarning, FutureWarning, ImportWarning,
    ResourceWarning, SyntaxWarning, BytesWarning,
)

_active: list[_Recorder] = []


def _origin(filename: str) -> str:
    """The package a warning came from, from the file that raised it."""
    parts = os.path.normpath(filename or "").split(os.sep)
    for marker in ("site-packages", "dist-packages"):
        if marker in parts:
            i = parts.index(marker)
            if i + 1 < len(parts):
                return parts[i + 1].removesuffix(".py")
    return os.path.basename(filename or "").removesuffix(".py") or "unknown"


class _Recorder:
    """The handler of one :func:`record_warnings` block."""

    def __init__(self, sink: list[str]) -> None:
        self.sink = sink
        self.seen = set(sink)
        self.library = 0
        self.library_dropped = 0
        self.developer: dict[tuple[Any, ...], warnings.WarningMessage] = {}

    def add(self, text: str, *, library: bool = False) -> None:
        if text in self.seen:
            return
        if library:
            if self.library >= LIBRARY_WARNINGS_KEPT:
                self.library_dropped += 1
                return
            self.library += 1
        self.seen.add(text)
        self.sink.append(text)
        logger.info(text)

    def show(self, message: Warning | str, category: type[Warning], filename: str,
             lineno: int, file: Any = None, line: str | None = None) -> None:
        """Stands in for :func:`warnings.showwarning`: files the warning, raises nothing."""
        try:
            text = str(message)
            if issubclass(category, GeosoilWarning):
                self.add(text)
            elif issubclass(category, DEVELOPER_WARNINGS):
                self.developer.setdefault(
                    (category, text, filename, lineno),
                    warnings.WarningMessage(message, category, filename, lineno),
                )
            else:
                self.add(f"{text} ({category.__name__} from {_origin(filename)})",
                         library=True)
        except Exception:  # pragma: no cover - a handler must never raise
            logger.debug("could not record a warning", exc_info=True)

    def closing_lines(self) -> list[str]:
        if not self.library_dropped:
            return []
        return [f"{self.library_dropped} more distinct library warning(s) not listed "
                f"(the first {LIBRARY_WARNINGS_KEPT} are); run with -vv to see them in the log"]


@contextmanager
def record_warnings(sink: list[str]) -> Iterator[list[str]]:
    """Record every warning raised inside the block into ``sink``, once each.

    Parameters
    ----------
    sink : list of str
        Where the messages go (appended in the order first raised; a message
        already in it is not added again).

    Yields
    ------
    list of str
        ``sink``.

    Examples
    --------
    >>> import warnings
    >>> from geosoil.errors import DataWarning
    >>> found = []
    >>> with record_warnings(found):
    ...     for _ in range(1000):
    ...         warnings.warn("row 3 skipped", DataWarning)
    >>> found
    ['row 3 skipped']
    """
    rec = _Recorder(sink)
    _active.append(rec)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("always")
            warnings.showwarning = rec.show
            yield sink
    finally:
        _active.remove(rec)
        for text in rec.closing_lines():
            rec.add(text)
        # outside the block: the developers' warnings go to the filters (or the recorder)
        # around it, once each; the recorder around this one gets what this one kept
        for w in rec.developer.values():
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
        if _active:
            outer = _active[-1]
            for text in sink:
                outer.add(text)
