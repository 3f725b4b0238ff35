"""The whole job in one call: compute a project's farm, then write its output folder.

:func:`run` checks the output folder first (never over an input, never over
results without ``overwrite``), locks it and makes a temporary folder beside it
(:func:`geosoil.outfolder.output_folder`), then calls
:func:`geosoil.pipeline.compute` and :func:`geosoil.outputs.write_outputs` into
that folder, recording every warning of the writing stage with the run's
others. Only a complete output folder is moved into place.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd

from .outfolder import output_folder
from .outputs import write_outputs
from .pipeline import FarmResult, Interpolator, Prepared, Progress, compute
from .project import Project
from .recording import record_warnings

__all__ = ["RunResult", "run"]


def _quiet(_: str) -> None:
    return None


@dataclass
class RunResult:
    """What a run wrote and the figures the CLI prints."""

    out_dir: Path
    written: list[Path]
    farm: FarmResult
    record: dict[str, Any]

    @property
    def tonnage(self) -> pd.DataFrame:
        """The tonnage table (``tonnage.csv``)."""
        return self.farm.tonnage

    @property
    def warnings(self) -> list[str]:
        """Every warning recorded during the run."""
        return self.farm.warnings


def run(
    project: Project,
    *,
    out_dir: Path,
    overwrite: bool = False,
    progress: Progress = _quiet,
    use_cache: bool = True,
    prepared: Prepared | None = None,
    interpolate: Interpolator | None = None,
) -> RunResult:
    """The whole job into ``out_dir``.

    Parameters
    ----------
    project : Project
        The loaded project.
    out_dir : Path
        The output folder (created; see :mod:`geosoil.outputs` for its layout).
    overwrite : bool, optional
        Replace a non-empty output folder that geosoil wrote, whole (nothing
        of the old run is left in it).
    progress : callable, optional
        Called with a short message at each stage.
    use_cache : bool, optional
        False interpolates again even when the inputs are unchanged.
    prepared : Prepared, optional
        The result of :func:`geosoil.pipeline.prepare` for ``project`` when the
        caller has it already.
    interpolate : callable, optional
        What makes the surfaces on a cache miss (see
        :func:`geosoil.pipeline.surfaces_for`); default ordinary interpolation.

    Returns
    -------
    RunResult
        The computed farm, the files written and the run record.

    Raises
    ------
    OutputExistsError
        ``out_dir`` exists and is not empty, and ``overwrite`` is false; or it
        is (or holds) an input folder; or it holds files its last run did not write.
    OutputBusyError
        Another run is writing ``out_dir``.
    OutputWriteError
        An output could not be written (the message names the file and the fix);
        the old output folder is left as it was.
    GeosoilError
        Any input or settings problem.
    """
    inputs = [p for p in project.input_files() if p is not None]
    if project.path is not None:
        inputs.append(project.path)
    with output_folder(Path(out_dir), overwrite=overwrite, inputs=inputs) as staging:
        for note in staging.notes:
            progress(note)
        farm = compute(project, progress=progress, use_cache=use_cache, prepared=prepared,
                       interpolate=interpolate)
        farm.prep.warnings.extend(staging.notes)
        t0 = time.perf_counter()
        with record_warnings(farm.prep.warnings):
            # the folder being replaced (when there is one) lends its unchanged GeoTIFFs
            previous = staging.final if (staging.final / "run.json").is_file() else None
            written, record = write_outputs(farm, out_dir=staging.temp, progress=progress,
                                            previous=previous)
        progress(f"moving the complete output folder into place: {staging.final}")
    farm.timings["writing"] = time.perf_counter() - t0
    return RunResult(out_dir=staging.final,
                     written=[staging.final_path(p) for p in written],
                     farm=farm, record=record)
