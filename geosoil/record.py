"""Facts for the run record: input checksums, versions, the time.

Small helpers that both the pipeline and the output folder use; they know
nothing of surfaces or rates.
"""

from __future__ import annotations

import functools
import hashlib
import platform
import sys
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING

from . import __version__

if TYPE_CHECKING:
    from .project import Project

__all__ = ["sha256_file", "source_digest", "versions", "now_utc", "input_checksums"]


def sha256_file(path: Path) -> str:
    """SHA-256 checksum of a file, read in 1 MiB chunks.

    Parameters
    ----------
    path : Path
        The file to hash.

    Returns
    -------
    str
        The hexadecimal digest.
    """
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def source_digest(*files: str | Path | None) -> str:
    """SHA-256 of geosoil's version and the source of ``files`` (module ``__file__`` paths;
    none: every module of the package), so that results made by other code are never reused.

    Parameters
    ----------
    *files : str or Path
        Source files, in a fixed order.

    Returns
    -------
    str
        The hexadecimal digest.
    """
    paths = ([Path(f or "") for f in files] if files
             else sorted(Path(__file__).parent.glob("*.py")))
    h = hashlib.sha256(f"geosoil {__version__}\n".encode())
    for p in paths:
        h.update(p.name.encode())
        h.update(p.read_bytes())
    return h.hexdigest()


def versions() -> dict[str, str]:
    """Versions of geosoil, Python and the libraries whose numbers matter.

    Returns
    -------
    dict of str to str
        Package name to version (GDAL and PROJ included when available).
    """
    return dict(_versions())


@functools.cache
def _versions() -> dict[str, str]:
    """:func:`versions`, looked up once a process (package metadata is slow to read)."""
    import importlib.metadata as md

    out = {"geosoil": __version__, "python": platform.python_version()}
    for pkg in ("numpy", "scipy", "pandas", "geopandas", "shapely", "pyproj", "rasterio",
                "pyogrio", "jinja2", "django-js-lib-leaflet", "jenkspy"):
        # a package already imported says its version itself (its metadata, looked up by
        # scanning the installed packages, costs milliseconds a package; a test holds the
        # two equal)
        loaded = getattr(sys.modules.get(pkg), "__version__", None)
        if isinstance(loaded, str):
            out[pkg] = loaded
            continue
        try:
            out[pkg] = md.version(pkg)
        except md.PackageNotFoundError:
            pass
    try:
        import rasterio

        out["gdal"] = rasterio.__gdal_version__
        import pyproj

        out["proj"] = pyproj.proj_version_str
    except Exception:  # pragma: no cover - informative only
        pass
    return out


def now_utc() -> str:
    """The current time in UTC, ISO 8601 to the second.

    Returns
    -------
    str
        Such as ``"2026-12-02T04:50:00+00:00"``.
    """
    return datetime.now(UTC).isoformat(timespec="seconds")


def input_checksums(project: Project) -> list[tuple[str, str]]:
    """SHA-256 checksums of a project's input files and of its project file.

    Parameters
    ----------
    project : Project
        The loaded project.

    Returns
    -------
    list of (path, sha256)
        One pair per input file that exists, the project file last.
    """
    out = []
    for p in project.input_files():
        if p is not None and Path(p).exists():
            out.append((str(p), sha256_file(Path(p))))
    if project.path is not None:
        out.append((str(project.path), sha256_file(project.path)))
    return out
