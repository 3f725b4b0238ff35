"""Errors and warnings raised by geosoil.

Every error geosoil raises on purpose is a :class:`GeosoilError`. The narrow
subclasses also inherit the matching builtin, so ``except ValueError`` still
works for callers who do not know geosoil.

A message says what was wrong, where (file, row as numbered in the file,
column, setting) and how to fix it.
"""

from __future__ import annotations

import os

__all__ = [
    "GeosoilError",
    "InputError",
    "SettingsError",
    "CRSError",
    "OutputExistsError",
    "OutputBusyError",
    "OutputWriteError",
    "GeosoilWarning",
    "DataWarning",
    "InterpolationWarning",
    "RateWarning",
]


class GeosoilError(Exception):
    """Root of every error geosoil raises on purpose."""


class InputError(GeosoilError, ValueError):
    """A problem in a user's input file.

    Parameters
    ----------
    problem
        What is wrong, in one sentence.
    file, row, column
        Where. ``row`` is the row as a person numbers it in the file
        (for CSV and Excel: the header is row 1, the first data row is row 2;
        for vector files: the feature number starting at 1).
    fix
        How to fix it, naming the setting that changes the behaviour.

    Examples
    --------
    >>> print(InputError("value is not a number", file="lab.csv", row=7, column="Ca",
    ...                  fix="correct the cell"))
    lab.csv, row 7, column 'Ca': value is not a number. Fix: correct the cell
    """

    def __init__(
        self,
        problem: str,
        *,
        file: str | os.PathLike[str] | None = None,
        row: int | None = None,
        column: str | None = None,
        fix: str | None = None,
    ) -> None:
        self.problem = problem
        self.file = None if file is None else os.fspath(file)
        self.row = row
        self.column = column
        self.fix = fix
        super().__init__(self._format())

    def _format(self) -> str:
        where = []
        if self.file is not None:
            where.append(self.file)
        if self.row is not None:
            where.append(f"row {self.row}")
        if self.column is not None:
            where.append(f"column '{self.column}'")
        text = (", ".join(where) + ": " if where else "") + self.problem
        if self.fix:
            text += f". Fix: {self.fix}"
        return text


class SettingsError(GeosoilError, ValueError):
    """A setting in a project file (or passed to the library) is wrong.

    ``key`` is the dotted key as written in the project file,
    e.g. ``rates.gypsum.target_esp_percent``; ``source`` the file it was read from,
    when known (``setting 'grid.cell_size_m' in my-farm/geosoil.toml: ...``).
    """

    def __init__(self, message: str, *, key: str | None = None,
                 source: str | os.PathLike[str] | None = None) -> None:
        self.key = key
        self.bare_message = message
        self.source = None if source is None else os.fspath(source)
        where = f" in {self.source}" if self.source else ""
        if key:
            text = f"setting '{key}'{where}: {message}"
        else:
            text = f"{self.source}: {message}" if self.source else message
        super().__init__(text)


class CRSError(GeosoilError, ValueError):
    """A coordinate reference system is missing, invalid or unsuitable."""


class OutputExistsError(GeosoilError, FileExistsError):
    """An output would overwrite something that exists (or an input)."""


class OutputBusyError(GeosoilError, RuntimeError):
    """Another run is writing the same output folder."""


class OutputWriteError(GeosoilError, OSError):
    """An output could not be written (disk full, no permission, read-only disk...).

    The message names the file, the fix, and what became of the output folder.
    """


class GeosoilWarning(UserWarning):
    """Root of geosoil's warnings. The run records every one of them."""


class DataWarning(GeosoilWarning):
    """Input data were changed or passed over: merged, repaired, skipped."""


class InterpolationWarning(GeosoilWarning):
    """A surface fell back to a simpler method, or its fit is poor."""


class RateWarning(GeosoilWarning):
    """A rate was limited, split or withheld by a guard."""
