"""Many farms in one batch, on this computer's cores or on a Dask cluster. [I/O]

A batch runs the whole job (:func:`geosoil.job.run`) for every project it
is given, each into its usual output folder, and writes a summary of them all::

    BATCH/
      <farm>/                 each farm's output folder (the layout of geosoil.outputs)
      batch_summary.csv       one row per farm: status, paddocks, tonnes per product, cost,
                              warnings, time, error
      batch_summary.html      the same table as a page
      batch.json              the cluster, its memory limit per worker, start and end, counts
      keys/<farm>.json        per farm: the key of its inputs, settings and code, and its row
                              of the summary (a re-run skips a farm whose key is unchanged)

A farm of an earlier batch into the same folder that this batch was not given keeps
its folder and key, untouched; the summary lists it as "not in this batch" (never
deleted in silence).

The work runs on Dask's distributed scheduler: a local cluster (one worker
process per core, one thread each, listening on the loopback address only) or
an existing scheduler given by its address. Each farm is split into tasks:

1. *prepare*: read and check the project's inputs (:func:`geosoil.pipeline.prepare`).
   When the surface cache already holds the farm's surfaces the whole farm
   finishes in this task.
2. *paddock*: one task per paddock interpolates that paddock's surfaces
   (:func:`geosoil.pipeline.surfaces_for` on a one-paddock view of the farm, so
   a farm variogram still pools every sample of the farm). A large farm is
   spread over every worker instead of holding one.
3. *finish*: the rates, zones, tonnage and every output file, through
   :func:`geosoil.job.run` with the paddocks' surfaces (which go into the
   surface cache as in a single run).

The results are those of running each farm alone: the same functions on the
same inputs, and the interpolation warnings replayed in the paddocks' order.

A farm that fails (bad input, a worker that died) is reported with its error
and the others go on. A farm whose key (the SHA-256 checksums of its input
files and project file, :func:`geosoil.record.input_checksums`, the
geosoil version and the source of the geosoil package) is the one recorded by
the last successful run, and whose output folder still holds its ``run.json``
and ``tonnage.csv``, is skipped and its row taken from the record.

Dask is an optional dependency (``pip install "geosoil[batch]"``); it is
imported only when a batch starts.
"""

from __future__ import annotations

import csv
import dataclasses
import functools
import hashlib
import io
import json
import logging
import os
import sys
import threading
import time
import uuid
import warnings
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from . import __version__, pipeline
from . import job as job_mod
from . import record as record_mod
from . import report as report_mod
from .errors import GeosoilError, GeosoilWarning, InputError, OutputExistsError
from .names import fold, slug
from .project import PROJECT_FILE_NAME, load_project

__all__ = [
    "BATCH_RECORD",
    "SUMMARY_CSV",
    "SUMMARY_HTML",
    "KEYS_FOLDER",
    "FarmJob",
    "FarmOutcome",
    "BatchResult",
    "find_projects",
    "farm_key",
    "code_digest",
    "plan_farms",
    "run_batch",
    "local_cluster",
    "products_of",
    "summary_rows",
    "not_in_batch",
    "NOT_IN_BATCH",
    "summary_csv",
    "summary_html",
    "require_distributed",
]

logger = logging.getLogger(__name__)

Progress = Callable[[str], None]

SUMMARY_CSV = "batch_summary.csv"
SUMMARY_HTML = "batch_summary.html"
BATCH_RECORD = "batch.json"
KEYS_FOLDER = "keys"

_INSTALL_HINT = (
    "a batch needs Dask's distributed scheduler, which is not installed; install it with "
    "pip install \"geosoil[batch]\" (or pip install \"dask[distributed]\")"
)


def _quiet(_: str) -> None:
    return None


def require_distributed() -> Any:
    """Import :mod:`distributed`, or explain how to install it.

    Returns
    -------
    module
        The :mod:`distributed` package.

    Raises
    ------
    GeosoilError
        Dask's distributed scheduler is not installed; the message gives the
        command that installs it.
    """
    try:
        import distributed
    except ImportError:
        raise GeosoilError(_INSTALL_HINT) from None
    return distributed


# --------------------------------------------------------------------------- which farms


def _projects_in_list(path: Path) -> list[Path]:
    """Project paths from a text file, one a line (``#`` starts a comment); relative
    paths are read from the list file's folder."""
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read the list of projects ({exc})", file=path) from None
    out = []
    for i, line in enumerate(text.splitlines(), start=1):
        entry = line.split("#", 1)[0].strip()
        if not entry:
            continue
        p = Path(entry).expanduser()
        if not p.is_absolute():
            p = path.parent / p
        if not (p.is_file() or (p / PROJECT_FILE_NAME).is_file()):
            raise InputError(
                f"'{entry}' is neither a project file nor a folder holding {PROJECT_FILE_NAME}",
                file=path, row=i,
                fix="correct the path, or remove the line",
            )
        out.append(p if p.is_file() else p / PROJECT_FILE_NAME)
    if not out:
        raise InputError(
            "the list of projects names no project (it is empty, or every line is blank or "
            "a comment)", file=path,
            fix="write one project folder or project file a line, or give the folders "
            "themselves",
        )
    return out


def find_projects(paths: Iterable[str | os.PathLike[str]]) -> list[Path]:
    """The project files a batch runs, from folders, project files and lists.

    Parameters
    ----------
    paths : iterable of path-like
        Each one is a project file (``.toml``); a project folder (it holds
        ``geosoil.toml``); a folder of project folders (every subfolder holding
        ``geosoil.toml``, in name order); or a text file listing projects, one
        a line.

    Returns
    -------
    list of Path
        Resolved project files, each once, in the order given.

    Raises
    ------
    InputError
        A path does not exist, or holds no project (a folder without one, a list
        naming none).

    Examples
    --------
    >>> import tempfile
    >>> root = Path(tempfile.mkdtemp())
    >>> for name in ("b-farm", "a-farm"):
    ...     (root / name).mkdir()
    ...     _ = (root / name / "geosoil.toml").write_text("")
    >>> [p.parent.name for p in find_projects([root])]
    ['a-farm', 'b-farm']
    """
    found: list[Path] = []
    for item in paths:
        p = Path(item).expanduser()
        if not p.exists():
            raise InputError("no such file or folder", file=p,
                             fix="give project folders, project files or a list of them")
        if p.is_dir():
            if (p / PROJECT_FILE_NAME).is_file():
                found.append(p / PROJECT_FILE_NAME)
                continue
            subs = sorted(s / PROJECT_FILE_NAME for s in p.iterdir()
                          if (s / PROJECT_FILE_NAME).is_file())
            if not subs:
                raise InputError(
                    f"the folder holds no project (no {PROJECT_FILE_NAME} in it or in its "
                    "subfolders)", file=p,
                    fix="give a folder of project folders, or create projects with "
                    "'geosoil new'",
                )
            found.extend(subs)
        elif p.suffix.lower() == ".toml":
            found.append(p)
        else:
            found.extend(_projects_in_list(p))
    out: list[Path] = []
    seen: set[Path] = set()
    for p in found:
        r = p.resolve()
        if r not in seen:
            seen.add(r)
            out.append(r)
    return out


def _farm_names(projects: Sequence[Path]) -> list[str]:
    """A distinct folder name per project: its folder's name (or the file's stem when the
    project file is not called geosoil.toml), with -2, -3... when two share one."""
    names: list[str] = []
    used: set[str] = set()
    for p in projects:
        base = slug(p.parent.name if p.name == PROJECT_FILE_NAME else p.stem) or "farm"
        name, k = base, 2
        while fold(name) in used or fold(name) == fold(KEYS_FOLDER):
            name, k = f"{base}-{k}", k + 1
        used.add(fold(name))
        names.append(name)
    return names


# --------------------------------------------------------------------------- keys


@functools.lru_cache(maxsize=1)
def code_digest() -> str:
    """SHA-256 of the geosoil package's source: a changed program never reuses old results.

    Returns
    -------
    str
        The hexadecimal digest.
    """
    return record_mod.source_digest()


def farm_key(project: Any) -> str:
    """The key of a farm's run: its input files, its settings and the code.

    Parameters
    ----------
    project : Project
        The loaded project.

    Returns
    -------
    str
        SHA-256 over the geosoil code (:func:`code_digest`) and the paths and
        checksums of every input file and of the project file
        (:func:`geosoil.record.input_checksums`); the settings are the
        project file's text, so they are in it too.
    """
    payload = {"code": code_digest(), "inputs": record_mod.input_checksums(project)}
    return hashlib.sha256(json.dumps(payload, sort_keys=True).encode()).hexdigest()


# --------------------------------------------------------------------------- outcomes


@dataclass(frozen=True)
class FarmJob:
    """One farm of a batch: where its project is and where its outputs go."""

    name: str
    project_path: Path
    out_dir: Path
    key: str | None
    use_cache: bool = True


@dataclass
class FarmOutcome:
    """What became of one farm: its figures, or its error."""

    name: str
    project: str
    status: str  # "done" | "unchanged" | "failed" | "not in this batch"
    farm: str = ""
    paddocks: int | None = None
    tonnes: dict[str, float] = field(default_factory=dict)
    cost: float | None = None
    warnings: list[str] = field(default_factory=list)
    error: str = ""
    seconds: float | None = None
    peak_rss_mib: float | None = None
    surfaces_from_cache: bool | None = None
    output: str = ""
    note: str = ""

    def row(self) -> dict[str, Any]:
        """The outcome as a JSON-ready mapping (the record kept in ``keys/``)."""
        return dataclasses.asdict(self)


@dataclass
class BatchResult:
    """A finished batch: the outcome of every farm and the files written."""

    out_dir: Path
    outcomes: list[FarmOutcome]
    written: list[Path]
    record: dict[str, Any]

    @property
    def failed(self) -> list[FarmOutcome]:
        """The farms that failed."""
        return [o for o in self.outcomes if o.status == "failed"]


def _peak_rss_mib() -> float | None:
    """Peak resident memory of this process so far, MiB (None where it cannot be read)."""
    try:
        import resource

        peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
        return round(peak / (1 << 20 if sys.platform == "darwin" else 1 << 10), 1)
    except (ImportError, OSError):  # pragma: no cover - Windows
        try:
            import psutil

            info = psutil.Process().memory_info()
            return round(getattr(info, "peak_wset", info.rss) / (1 << 20), 1)
        except Exception:
            return None


def _outcome(job: FarmJob, result: job_mod.RunResult, *, started: float) -> FarmOutcome:
    table = result.tonnage
    farm_rows = table[table["level"] == "farm"]
    tonnes = {str(p): float(t) for p, t in zip(farm_rows["product"], farm_rows["tonnes"],
                                                 strict=True)}
    cost_values = [float(c) for c in farm_rows.get("cost", []) if c == c and c is not None]
    return FarmOutcome(
        name=job.name,
        project=str(job.project_path),
        status="done",
        farm=result.farm.prep.project.settings.farm,
        paddocks=len(result.farm.prep.grids),
        tonnes=tonnes,
        cost=sum(cost_values) if cost_values else None,
        warnings=list(result.warnings),
        seconds=round(time.time() - started, 2),
        peak_rss_mib=_peak_rss_mib(),
        surfaces_from_cache=result.farm.cache_hit,
        output=str(result.out_dir),
    )


# --------------------------------------------------------------------------- tasks (on workers)

#: Warnings are caught per task with :func:`warnings.catch_warnings`, which changes state shared
#: by the whole process; a worker with several threads therefore runs one geosoil task at a time.
_TASK_LOCK = threading.Lock()


class _CacheMiss(Exception):
    """Raised by the probe interpolator: the surfaces are not in the cache."""


def _probe(*_args: Any, **_kwargs: Any) -> dict[tuple[str, str], Any]:
    raise _CacheMiss


@dataclass
class _Pending:
    """A prepared farm waiting for its paddocks' surfaces."""

    prep: pipeline.Prepared
    started: float


@dataclass
class _PaddockPart:
    surfaces: dict[tuple[str, str], Any]
    warnings: list[str]


def _task_prepare(job: FarmJob) -> _Pending | FarmOutcome:
    with _TASK_LOCK:
        started = time.time()
        project = load_project(job.project_path)
        prep = pipeline.prepare(project)
        if job.use_cache:
            try:
                pipeline.surfaces_for(prep, use_cache=True, interpolate=_probe)
            except _CacheMiss:
                pass
            else:  # every surface is cached: the rest of the farm is quick, finish it here
                result = job_mod.run(project, out_dir=job.out_dir, overwrite=True,
                                      prepared=prep, use_cache=True)
                return _outcome(job, result, started=started)
        return _Pending(prep=prep, started=started)


def _task_state(stage: _Pending | FarmOutcome) -> FarmOutcome | list[str]:
    """What the client needs to go on: the outcome, or the paddock names to fan out."""
    return stage if isinstance(stage, FarmOutcome) else list(stage.prep.grids)


def _task_paddock(stage: _Pending, name: str) -> _PaddockPart:
    with _TASK_LOCK:
        one = dataclasses.replace(stage.prep, grids={name: stage.prep.grids[name]}, warnings=[])
        surfaces, _ = pipeline.surfaces_for(one, use_cache=False)
        return _PaddockPart(surfaces=surfaces, warnings=list(one.warnings))


def _task_finish(job: FarmJob, stage: _Pending, *parts: _PaddockPart) -> FarmOutcome:
    with _TASK_LOCK:
        surfaces: dict[tuple[str, str], Any] = {}
        messages: list[str] = []
        for part in parts:  # in the order of the farm's grids, as a single run makes them
            surfaces.update(part.surfaces)
            messages.extend(m for m in part.warnings if m not in messages)

        def replay(*_args: Any, **_kwargs: Any) -> dict[tuple[str, str], Any]:
            for m in messages:
                warnings.warn(m, GeosoilWarning, stacklevel=2)
            return surfaces

        prep = stage.prep
        result = job_mod.run(prep.project, out_dir=job.out_dir, overwrite=True, prepared=prep,
                              use_cache=job.use_cache, interpolate=replay)
        return _outcome(job, result, started=stage.started)


def _worker_identity() -> tuple[str, str]:
    return __version__, code_digest()


# --------------------------------------------------------------------------- planning


def plan_farms(
    projects: Sequence[Path], *, out_dir: Path, use_cache: bool = True
) -> tuple[list[FarmJob], list[FarmOutcome], list[FarmOutcome]]:
    """Which farms to run, which are unchanged since the last batch, which cannot be loaded.

    Parameters
    ----------
    projects : sequence of Path
        Project files (see :func:`find_projects`).
    out_dir : Path
        The batch folder.
    use_cache : bool, optional
        False runs every farm again (and interpolates again).

    Returns
    -------
    jobs, unchanged, failed
        Farms to run; farms skipped because their key is the recorded one and
        their output is in place (with the recorded figures); farms whose project
        file cannot be loaded (with the error).
    """
    jobs: list[FarmJob] = []
    unchanged: list[FarmOutcome] = []
    failed: list[FarmOutcome] = []
    for path, name in zip(projects, _farm_names(projects), strict=True):
        farm_dir = out_dir / name
        try:
            project = load_project(path)
            key = farm_key(project)
        except GeosoilError as exc:
            failed.append(FarmOutcome(name=name, project=str(path), status="failed",
                                      error=str(exc), output=str(farm_dir)))
            continue
        if use_cache:
            previous = _read_key(out_dir, name)
            if (previous is not None and previous.get("key") == key
                    and (farm_dir / "run.json").is_file()
                    and (farm_dir / "tonnage.csv").is_file()):
                row = dict(previous["row"])
                row.update(status="unchanged", seconds=None, peak_rss_mib=None)
                unchanged.append(FarmOutcome(**row))
                continue
        jobs.append(FarmJob(name=name, project_path=path, out_dir=farm_dir, key=key,
                            use_cache=use_cache))
    return jobs, unchanged, failed


def _read_key(out_dir: Path, name: str) -> dict[str, Any] | None:
    path = out_dir / KEYS_FOLDER / f"{name}.json"
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(data, dict) or not isinstance(data.get("row"), dict):
        return None
    names = {f.name for f in dataclasses.fields(FarmOutcome)}
    if set(data["row"]) != names:
        return None  # a record from another version: run the farm again
    return data


def _write_key(out_dir: Path, job: FarmJob, outcome: FarmOutcome) -> Path:
    from .writers import write_json

    folder = out_dir / KEYS_FOLDER
    folder.mkdir(exist_ok=True)
    return write_json(folder / f"{job.name}.json", {"key": job.key, "row": outcome.row()})


def _check_batch_folder(out_dir: Path, projects: Sequence[Path], *, overwrite: bool) -> Path:
    """The batch folder, created: new, empty, an earlier batch's, or any with ``overwrite``
    (its other files are left alone); never one that is, or holds, an input folder."""
    from .outfolder import check_target

    inputs: list[Path] = list(projects)
    for p in projects:
        try:
            inputs.extend(f for f in load_project(p).input_files() if f is not None)
        except GeosoilError:
            pass  # reported with the farm
    out = Path(out_dir).expanduser().resolve()
    if out.is_dir() and any(out.iterdir()):
        if not ((out / BATCH_RECORD).is_file() or overwrite):
            raise OutputExistsError(
                f"the batch folder {out} exists, is not empty and holds no earlier batch "
                f"({BATCH_RECORD}); choose a new folder or pass --overwrite to write the "
                "batch into it (its other files are left as they are)"
            )
        for item in inputs:
            inp = Path(item).expanduser().resolve()
            if out == inp.parent or out in inp.parents:
                raise OutputExistsError(
                    f"the batch folder {out} is or holds the input file {inp}; "
                    "choose a folder outside the input folders"
                )
    else:
        check_target(out, overwrite=False, inputs=inputs)  # a file in the way, an input folder
    out.mkdir(parents=True, exist_ok=True)
    return out


# --------------------------------------------------------------------------- the cluster


def local_cluster(
    *, workers: int | None = None, memory_limit: str | int | None = "auto",
    processes: bool = True,
) -> Any:
    """A Dask cluster on this computer, listening on the loopback address only.

    Parameters
    ----------
    workers : int, optional
        Worker processes; default one per core.
    memory_limit : str or int, optional
        Memory limit of each worker (``"4GiB"``, bytes, or ``"auto"``: the
        computer's memory shared equally between the workers). A worker that
        passes 95 % of it is restarted, and the farm it ran is reported as failed.
    processes : bool, optional
        Workers in processes (the default) or threads of this process.

    Returns
    -------
    distributed.LocalCluster
        The running cluster; close it when done.
    """
    distributed = require_distributed()
    n = workers or os.cpu_count() or 1
    return distributed.LocalCluster(
        n_workers=n, threads_per_worker=1, processes=processes, memory_limit=memory_limit,
        host="127.0.0.1", dashboard_address="127.0.0.1:0", silence_logs=logging.CRITICAL,
    )


def _describe_error(exc: BaseException) -> str:
    if isinstance(exc, GeosoilError):
        return str(exc)
    kind = type(exc).__name__
    if kind == "KilledWorker":
        return ("the worker running this farm died (for example past its memory limit); "
                "give the workers more memory (--memory-limit) or fewer farms at once")
    return f"{kind}: {exc}"


# --------------------------------------------------------------------------- the batch


def run_batch(
    projects: Sequence[Path],
    *,
    out_dir: Path,
    client: Any = None,
    scheduler: str | None = None,
    workers: int | None = None,
    memory_limit: str | int | None = "auto",
    use_cache: bool = True,
    overwrite: bool = False,
    progress: Progress = _quiet,
) -> BatchResult:
    """Run every project into ``out_dir/<farm>/`` on a Dask cluster, and summarise.

    Parameters
    ----------
    projects : sequence of Path
        Project files (see :func:`find_projects`).
    out_dir : Path
        The batch folder (see the module's notes for its layout).
    client : distributed.Client, optional
        A client of a running cluster; when given, ``scheduler``, ``workers``
        and ``memory_limit`` are not used.
    scheduler : str, optional
        Address of a running scheduler (``tcp://host:8786``); default a local
        cluster (:func:`local_cluster`).
    workers : int, optional
        Workers of the local cluster; default one per core.
    memory_limit : str or int, optional
        Memory limit of each worker of the local cluster.
    use_cache : bool, optional
        False runs every farm again and interpolates again.
    overwrite : bool, optional
        Write into a non-empty folder that is not an earlier batch's.
    progress : callable, optional
        Called with a line of progress at each step of each farm.

    Returns
    -------
    BatchResult
        Every farm's outcome (done, unchanged or failed) and the files written.

    Raises
    ------
    GeosoilError
        No project was given; Dask is not installed; the batch folder cannot be
        used; the workers run another geosoil than this one.
    """
    from .outfolder import missing_folders, remove_empty_folders

    projects = list(projects)
    if not projects:
        raise GeosoilError("the batch was given no project; give project folders, project "
                           "files, folders of project folders or lists of projects")
    distributed = require_distributed()
    made = missing_folders(Path(out_dir).expanduser().resolve())
    out = _check_batch_folder(Path(out_dir), projects, overwrite=overwrite)
    try:
        return _run_batch_in(out, projects, distributed, scheduler=scheduler, client=client,
                             workers=workers, memory_limit=memory_limit, use_cache=use_cache,
                             progress=progress)
    except BaseException:
        remove_empty_folders(made)  # a batch that stopped leaves no empty folder of its own
        raise


def _run_batch_in(out: Path, projects: list[Path], distributed: Any, *, scheduler: str | None,
                  client: Any, workers: int | None, memory_limit: str | int | None,
                  use_cache: bool, progress: Progress) -> BatchResult:
    """:func:`run_batch` once its folder is made."""
    jobs, unchanged, failed = plan_farms(projects, out_dir=out, use_cache=use_cache)
    started = record_mod.now_utc()
    t0 = time.perf_counter()
    for o in unchanged:
        progress(f"{o.name}: inputs, settings and code unchanged since the last batch: skipped")
    for o in failed:
        progress(f"{o.name}: FAILED: {o.error}")
    outcomes: dict[str, FarmOutcome] = {o.name: o for o in [*unchanged, *failed]}
    cluster_info: dict[str, Any] = {}
    if jobs:
        own_cluster = None
        own_client = None
        try:
            if client is None:
                if scheduler:
                    own_client = client = distributed.Client(scheduler, timeout="30s")
                else:
                    own_cluster = local_cluster(workers=workers, memory_limit=memory_limit)
                    own_client = client = distributed.Client(own_cluster)
            cluster_info = _cluster_info(client, scheduler)
            progress(
                f"batch: {len(jobs)} farm(s) to run on {cluster_info['where']}, "
                f"{cluster_info['workers']} worker(s), {cluster_info['threads']} thread(s), "
                f"memory limit per worker {cluster_info['memory_limit_text']}"
            )
            _check_workers(client)
            for o in _run_jobs(client, distributed, jobs, cluster_info["threads"], progress):
                outcomes[o.name] = o
                if o.status == "done":
                    job = next(j for j in jobs if j.name == o.name)
                    _write_key(out, job, o)
        finally:
            if own_client is not None:
                own_client.close()
            if own_cluster is not None:
                own_cluster.close()
    order = _farm_names(projects)
    ordered = [outcomes[n] for n in order if n in outcomes]
    earlier = not_in_batch(out, order)
    for o in earlier:
        progress(f"{o.name}: {o.note}")
    record = {
        "geosoil": __version__,
        "started": started,
        "finished": record_mod.now_utc(),
        "wall_s": round(time.perf_counter() - t0, 2),
        "cluster": cluster_info,
        "farms": len(ordered),
        "done": sum(o.status == "done" for o in ordered),
        "unchanged": sum(o.status == "unchanged" for o in ordered),
        "failed": sum(o.status == "failed" for o in ordered),
        "not_in_this_batch": [o.name for o in earlier],
        "cautions": list(report_mod.CAUTIONS),
    }
    ordered += earlier
    written = _write_summary(out, ordered, record)
    return BatchResult(out_dir=out, outcomes=ordered, written=written, record=record)


NOT_IN_BATCH = "not in this batch"


def not_in_batch(out: Path, names: Sequence[str]) -> list[FarmOutcome]:
    """The farms an earlier batch into ``out`` left (an output folder of a run, or a key
    in ``keys/``) that are not among ``names``: their files are left as they were, and
    the summary says so.

    Parameters
    ----------
    out : Path
        The batch folder.
    names : sequence of str
        The farms (folder names) of this batch.

    Returns
    -------
    list of FarmOutcome
        One per farm left, in name order, with status ``"not in this batch"`` and a note
        naming what was left.
    """
    given = {fold(n) for n in names}
    keys = {p.stem: p for p in (out / KEYS_FOLDER).glob("*.json")} \
        if (out / KEYS_FOLDER).is_dir() else {}
    folders = {p.name for p in out.iterdir()
               if p.is_dir() and (p / "run.json").is_file() and p.name != KEYS_FOLDER}
    left = []
    for name in sorted(set(keys) | folders):
        if fold(name) in given:
            continue
        what = [f"{name}/"] if name in folders else []
        if name in keys:
            what.append(f"{KEYS_FOLDER}/{name}.json")
        farm = ""
        if name in keys:
            row = (_read_json(keys[name]) or {}).get("row")
            if isinstance(row, dict) and isinstance(row.get("farm"), str):
                farm = row["farm"]
        left.append(FarmOutcome(
            name=name, project="", status=NOT_IN_BATCH, farm=farm,
            output=str(out / name) if name in folders else "",
            note=f"{NOT_IN_BATCH}: outputs from an earlier batch left as they were "
                 f"({' and '.join(what)}); delete them yourself if the farm is gone"))
    return left


def _read_json(path: Path) -> dict[str, Any] | None:
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return data if isinstance(data, dict) else None


def _cluster_info(client: Any, scheduler: str | None) -> dict[str, Any]:
    info = client.scheduler_info()
    ws = info.get("workers", {})
    limits = [int(w.get("memory_limit") or 0) for w in ws.values()]
    threads = sum(int(w.get("nthreads") or 1) for w in ws.values()) or 1
    limit = min(limits) if limits and all(limits) else None
    text = "none" if limit is None else f"{limit / (1 << 30):.2f} GiB"
    return {
        "where": f"the scheduler {scheduler}" if scheduler else "a local cluster",
        "scheduler": info.get("address", ""),
        "workers": len(ws),
        "threads": threads,
        "memory_limit_bytes": limit,
        "memory_limit_text": text,
    }


def _check_workers(client: Any) -> None:
    """Every worker must run this geosoil: another version would give other results."""
    mine = _worker_identity()
    try:
        theirs = client.run(_worker_identity)
    except Exception as exc:  # a worker without geosoil cannot unpickle the function
        raise GeosoilError(
            f"the workers cannot run geosoil ({type(exc).__name__}: {exc}); install this "
            f"geosoil ({__version__}) on every worker"
        ) from None
    for addr, ident in theirs.items():
        if tuple(ident) != mine:
            raise GeosoilError(
                f"the worker {addr} runs geosoil {ident[0]} (code {ident[1][:12]}), this "
                f"computer {mine[0]} (code {mine[1][:12]}); install the same geosoil on every "
                "worker"
            )


def _run_jobs(
    client: Any, distributed: Any, jobs: list[FarmJob], threads: int, progress: Progress
) -> Iterable[FarmOutcome]:
    """Submit the farms' tasks as the earlier ones finish, and yield each farm's outcome.

    At most two farms per worker thread are in flight, so the prepared farms that
    wait for their paddocks stay few; paddock and finish tasks go before the next
    farm's reading (Dask's priority), so a started farm is finished first.
    """
    pending = list(jobs)
    limit = max(2 * threads, 2)
    ac = distributed.as_completed()
    what: dict[str, tuple[str, FarmJob, Any]] = {}
    stages: dict[str, Any] = {}
    paddock_left: dict[str, int] = {}
    total = len(jobs)
    done = 0
    in_flight = 0

    def key(kind: str, job: FarmJob) -> str:
        return f"geosoil-{kind}-{job.name}-{uuid.uuid4().hex[:8]}"

    def submit_next() -> None:
        nonlocal in_flight
        while pending and in_flight < limit:
            job = pending.pop(0)
            stage = client.submit(_task_prepare, job, key=key("prepare", job), priority=0)
            state = client.submit(_task_state, stage, key=key("state", job), priority=0)
            stages[job.name] = stage
            what[state.key] = ("state", job, None)
            ac.add(state)
            in_flight += 1

    def failed(job: FarmJob, exc: BaseException) -> FarmOutcome:
        return FarmOutcome(name=job.name, project=str(job.project_path), status="failed",
                           error=_describe_error(exc), output=str(job.out_dir))

    submit_next()
    for fut in ac:
        kind, job, extra = what.pop(fut.key)
        outcome: FarmOutcome | None = None
        if fut.status != "finished":
            try:
                exc = fut.exception()
            except Exception as err:  # cancelled
                exc = err
            if kind == "paddock":
                progress(f"{job.name}: paddock '{extra}' failed")
                continue  # the finish task fails with the same error
            outcome = failed(job, exc)
        elif kind == "state":
            state = fut.result()
            if isinstance(state, FarmOutcome):
                outcome = state
            else:
                progress(f"{job.name}: read and checked; {len(state)} paddock(s) to interpolate")
                stage = stages[job.name]
                parts = []
                for name in state:
                    part = client.submit(_task_paddock, stage, name, key=key("paddock", job),
                                         priority=1)
                    what[part.key] = ("paddock", job, name)
                    ac.add(part)
                    parts.append(part)
                paddock_left[job.name] = len(parts)
                fin = client.submit(_task_finish, job, stage, *parts, key=key("finish", job),
                                    priority=2)
                what[fin.key] = ("finish", job, None)
                ac.add(fin)
        elif kind == "paddock":
            paddock_left[job.name] -= 1
            progress(f"{job.name}: paddock '{extra}' interpolated "
                     f"({paddock_left[job.name]} left)")
        else:  # finish
            outcome = fut.result()
        fut.release()
        if outcome is not None:
            stages.pop(job.name, None)
            done += 1
            in_flight -= 1
            if outcome.status == "failed":
                progress(f"[{done}/{total}] {job.name}: FAILED: {outcome.error}")
            else:
                extra_text = f", {len(outcome.warnings)} warning(s)" if outcome.warnings else ""
                progress(f"[{done}/{total}] {job.name}: done in {outcome.seconds:.1f} s"
                         f"{extra_text}")
            yield outcome
            submit_next()


# --------------------------------------------------------------------------- the summary


def products_of(outcomes: Sequence[FarmOutcome]) -> list[str]:
    """Every product any farm of the batch needs, in name order."""
    return sorted({p for o in outcomes for p in o.tonnes})


def summary_rows(outcomes: Sequence[FarmOutcome]) -> tuple[list[str], list[list[Any]]]:
    """The summary table: one row per farm.

    Parameters
    ----------
    outcomes : sequence of FarmOutcome
        The farms, in the order to show them.

    Returns
    -------
    header, rows
        Column names (``tonnes_<product>`` for every product any farm needs)
        and the values (None where there is none).
    """
    products = products_of(outcomes)
    header = ["farm", "farm_name", "status", "paddocks",
              *[f"tonnes_{p}" for p in products], "cost", "warnings", "seconds",
              "peak_rss_mib", "output", "error", "warning_messages", "note"]
    rows = []
    for o in outcomes:
        ran = o.status not in ("failed", NOT_IN_BATCH)
        rows.append([
            o.name, o.farm, o.status, o.paddocks,
            *[o.tonnes.get(p) if ran else None for p in products],
            o.cost, len(o.warnings) if ran else None, o.seconds,
            o.peak_rss_mib, o.output, o.error, " | ".join(o.warnings), o.note,
        ])
    return header, rows


def summary_csv(outcomes: Sequence[FarmOutcome]) -> str:
    """The summary as CSV text (UTF-8, comma-separated, empty cells where there is no value).

    Parameters
    ----------
    outcomes : sequence of FarmOutcome
        The farms.

    Returns
    -------
    str
        The CSV text.
    """
    header, rows = summary_rows(outcomes)
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(header)
    for r in rows:
        w.writerow(["" if v is None else (repr(v) if isinstance(v, float) else v) for v in r])
    return buf.getvalue()


_HTML = """<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<title>geosoil batch: {{ record.farms }} farms</title>
<style>
body { font-family: sans-serif; margin: 1.5em; }
table { border-collapse: collapse; }
th, td { border: 1px solid #999; padding: 0.25em 0.5em; vertical-align: top; }
td.num { text-align: right; }
tr.failed td { background: #fde8e8; }
.cautions { margin-top: 2em; font-size: 0.9em; }
</style></head>
<body>
<h1>Batch of {{ record.farms }} farms</h1>
<p>{{ record.done }} run, {{ record.unchanged }} unchanged since the last batch (skipped),
{{ record.failed }} failed{% if record.get('not_in_this_batch') %};
{{ record.not_in_this_batch|length }} farm(s) of an earlier batch not in this batch, their
outputs left as they were{% endif %}. Started {{ record.started }},
finished {{ record.finished }}
({{ "%.1f"|format(record.wall_s) }} s){% if record.cluster %} on {{ record.cluster.where }}
with {{ record.cluster.workers }} worker(s), memory limit per worker
{{ record.cluster.memory_limit_text }}{% endif %}.</p>
<table>
<thead><tr><th>farm</th><th>status</th><th>paddocks</th>
{% for p in products %}<th>{{ p }} (t)</th>{% endfor %}
<th>cost</th><th>warnings</th><th>time (s)</th><th>output or error</th></tr></thead>
<tbody>
{% for o in outcomes %}<tr class="{{ o.status }}">
<td>{{ o.name }}{% if o.farm %}<br><small>{{ o.farm }}</small>{% endif %}</td>
<td>{{ o.status }}</td>
<td class="num">{{ o.paddocks if o.paddocks is not none else "" }}</td>
{% for p in products %}<td class="num">
{%- if o.status != "failed" and p in o.tonnes %}{{ "%.2f"|format(o.tonnes[p]) }}{% endif -%}
</td>{% endfor %}
<td class="num">{% if o.cost is not none %}{{ "{:,.2f}".format(o.cost) }}{% endif %}</td>
<td>{% if o.warnings %}<details><summary>{{ o.warnings|length }}</summary><ul>
{% for w in o.warnings %}<li>{{ w }}</li>{% endfor %}</ul></details>
{%- elif o.status not in ("failed", "not in this batch") %}0{% endif %}</td>
<td class="num">{% if o.seconds is not none %}{{ "%.1f"|format(o.seconds) }}{% endif %}</td>
<td>{% if o.status == "failed" %}{{ o.error }}
{%- elif o.status == "not in this batch" %}{{ o.note }}{% if o.output %}
<a href="{{ o.link }}">{{ o.link }}</a>{% endif %}
{%- else %}<a href="{{ o.link }}">{{ o.link }}</a>{% endif %}</td>
</tr>
{% endfor %}</tbody></table>
<div class="cautions"><h2>Cautions</h2><ul>
{% for c in record.cautions %}<li>{{ c }}</li>{% endfor %}
</ul></div>
</body></html>
"""


def summary_html(outcomes: Sequence[FarmOutcome], record: dict[str, Any]) -> str:
    """The summary as an HTML page (from a template with autoescaping).

    Parameters
    ----------
    outcomes : sequence of FarmOutcome
        The farms.
    record : dict
        The batch record (counts, times, cluster, cautions).

    Returns
    -------
    str
        The page.
    """
    import jinja2

    env = jinja2.Environment(autoescape=True, undefined=jinja2.StrictUndefined)
    shown = []
    for o in outcomes:
        d = dataclasses.asdict(o)
        d["link"] = f"{o.name}/report.html"
        shown.append(d)
    return env.from_string(_HTML).render(outcomes=shown, products=products_of(outcomes),
                                         record=record)


def _write_summary(out: Path, outcomes: Sequence[FarmOutcome], record: dict[str, Any]
                   ) -> list[Path]:
    from .writers import atomic_write, write_json

    written = []
    with atomic_write(out / SUMMARY_CSV, mode="w") as fh:
        fh.write(summary_csv(outcomes))
    written.append(out / SUMMARY_CSV)
    with atomic_write(out / SUMMARY_HTML, mode="w") as fh:
        fh.write(summary_html(outcomes, record))
    written.append(out / SUMMARY_HTML)
    written.append(write_json(out / BATCH_RECORD, {
        **record, "farms_detail": [
            {"name": o.name, "status": o.status, "error": o.error} for o in outcomes
        ]}))
    return written
