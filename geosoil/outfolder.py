"""The output folder as a whole: locked, written beside, moved into place when complete.  [I/O]

A run never writes into the output folder itself. :func:`output_folder`

1. checks the target (never an input folder, never a file, a non-empty folder only
   with ``overwrite`` and only when it holds nothing but what geosoil wrote there);
2. takes a lock beside it (``.<name>.geosoil-lock``), so a second run into the same
   folder stops at once with a message, instead of mixing its files in (the run removes
   the lock file when it ends, however it ends; a refused run never touches another
   run's lock);
3. sweeps what a killed run left beside it (temporary folders; an old folder moved
   aside but not yet deleted is put back);
4. makes a new temporary folder beside the target (``.<name>.geosoil-new-<random>``),
   which also proves the place is writable before any computing starts;
5. hands that folder to the run; when the run has written everything, the old
   folder is moved aside, the new one is renamed into place and the old one is
   deleted. So the output folder is always a whole run's: the old one until the
   new one is complete, then the new one, with nothing stale left in it.

A run that fails (or is interrupted) deletes its temporary folder, its lock file and the
parent folders it made for the output, and leaves the old output folder as it was; a run
that is killed leaves its temporary folder for the next run into the same place to sweep.
Disk-full, permission and read-only errors become
:class:`~geosoil.errors.OutputWriteError` naming the file and the fix.
"""

from __future__ import annotations

import contextlib
import errno
import hashlib
import json
import logging
import os
import secrets
import shutil
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .errors import OutputBusyError, OutputExistsError, OutputWriteError

__all__ = ["Staging", "output_folder", "check_target", "sibling_names", "missing_folders",
           "remove_empty_folders", "take_lock"]

logger = logging.getLogger(__name__)


@dataclass
class Staging:
    """Where a run writes (``temp``) and where its folder ends up (``final``)."""

    final: Path
    temp: Path
    notes: list[str] = field(default_factory=list)

    def final_path(self, written: Path) -> Path:
        """Where a file written under ``temp`` is once the folder is in place."""
        return self.final / Path(written).relative_to(self.temp)


def sibling_names(final: Path) -> tuple[str, str, str]:
    """The lock file's name and the prefixes of the temporary and old folders of ``final``.

    A long folder name is cut and a short hash of the whole name added, so the
    names stay within the file systems' 255-byte limit.
    """
    name = final.name
    stem = name if len(name.encode()) <= 60 else (
        name.encode()[:40].decode(errors="ignore") + "-"
        + hashlib.sha256(name.encode()).hexdigest()[:12])
    return f".{stem}.geosoil-lock", f".{stem}.geosoil-new-", f".{stem}.geosoil-old-"


def _is_within(child: Path, parent: Path) -> bool:
    return child == parent or parent in child.parents


def check_target(path: str | os.PathLike[str], *, overwrite: bool,
                 inputs: Sequence[str | os.PathLike[str]]) -> Path:
    """Check an output folder before a run; return it resolved (nothing is created).

    Parameters
    ----------
    path : path-like
        The output folder.
    overwrite : bool
        Allow an existing, non-empty folder (which the run replaces whole).
    inputs : sequence of path-like
        Every input file of the run.

    Returns
    -------
    Path
        The folder, resolved.

    Raises
    ------
    OutputExistsError
        ``path`` is a file; or it is, or holds, the folder of an input; or it
        is not empty and ``overwrite`` is false; or it holds files that the
        geosoil run recorded in its ``run.json`` did not write (they would be
        lost when the folder is replaced).
    """
    out = Path(path).expanduser().resolve()
    for item in inputs:
        inp = Path(item).expanduser().resolve()
        folder = inp if inp.is_dir() else inp.parent
        if _is_within(folder, out):
            raise OutputExistsError(
                f"the output folder {out} is or holds the input file {inp}; "
                "choose an output folder outside the input folders"
            )
    if out.exists() and not out.is_dir():
        raise OutputExistsError(f"the output path {out} is a file, not a folder; "
                                "choose a folder name")
    if out.is_dir() and any(out.iterdir()):
        if not overwrite:
            raise OutputExistsError(
                f"the output folder {out} exists and is not empty; choose a new folder or "
                "pass --overwrite to replace it with this run's outputs"
            )
        _refuse_foreign_files(out)
    return out


def _refuse_foreign_files(out: Path) -> None:
    """--overwrite replaces the folder whole: refuse when that would delete files that the
    run recorded in the folder's run.json did not write."""
    listed: set[str] | None = None
    with contextlib.suppress(OSError, ValueError, TypeError, AttributeError):
        record = json.loads((out / "run.json").read_text(encoding="utf-8"))
        files = record.get("files")
        if isinstance(files, list):
            listed = {str(f) for f in files}
    present = sorted(p.relative_to(out).as_posix() for p in out.rglob("*")
                     if not p.is_dir())
    if listed is None:
        raise OutputExistsError(
            f"the output folder {out} is not a geosoil output folder (it has no readable "
            "run.json listing its files); --overwrite replaces the whole folder, so it only "
            "replaces one that geosoil wrote. Choose a new folder, or move its files away"
        )
    foreign = [p for p in present if p not in listed]
    if foreign:
        shown = ", ".join(foreign[:5]) + (f" and {len(foreign) - 5} more" if len(foreign) > 5
                                          else "")
        raise OutputExistsError(
            f"the output folder {out} holds {len(foreign)} file(s) that its last run did not "
            f"write ({shown}); --overwrite replaces the whole folder and would delete them. "
            "Move them out of the folder first, or choose a new folder"
        )


def _sweep(final: Path, notes: list[str]) -> None:
    """Remove what killed runs left beside ``final`` (called while holding its lock)."""
    _, new_prefix, old_prefix = sibling_names(final)
    parent = final.parent
    olds = sorted(parent.glob(old_prefix + "*"), key=lambda p: p.stat().st_mtime)
    if olds and not final.exists():
        # killed between moving the old folder aside and moving the new one in
        os.rename(olds[-1], final)
        notes.append(f"a run into {final} was stopped while replacing it; the previous "
                     "output folder was put back in place")
        olds = olds[:-1]
    swept = 0
    for p in [*olds, *parent.glob(new_prefix + "*")]:
        shutil.rmtree(p, ignore_errors=True)
        swept += 1
    if swept:
        logger.info("removed %d unfinished folder(s) left beside %s by a stopped run",
                    swept, final)


_WORDS = {errno.ENOSPC: "no space left", errno.EACCES: "permission denied",
          errno.EROFS: "read-only file system", errno.ENAMETOOLONG: "name too long"}


def _write_error(exc: OSError, *, final: Path, temp: Path) -> OutputWriteError:
    """A write failure as a message naming the file and the fix."""
    name = exc.filename if isinstance(exc.filename, str) else None
    shown = name
    if name is not None:
        with contextlib.suppress(ValueError):
            shown = str(final / Path(name).relative_to(temp))
    what = f"could not write {shown}" if shown else f"could not write into {final}"
    reason = exc.strerror or str(exc)
    kept = (f"the output folder {final} was left as it was" if final.exists()
            else f"no output folder {final} was made")
    code = exc.errno
    if code is None:  # GDAL's errors carry the system's words, not its number
        text = str(exc).lower()
        code = next((c for c, words in _WORDS.items() if words in text), None)
    if code in (errno.ENOSPC, errno.EDQUOT):
        free = shutil.disk_usage(final.parent).free if final.parent.exists() else 0
        fix = (f"the disk holding {final.parent} is full ({free / 2**20:.0f} MB free); free "
               "some space or choose an output folder on another disk with --out")
    elif code in (errno.EACCES, errno.EPERM):
        fix = (f"you may not write in {final.parent}; choose an output folder you can write "
               "with --out, or change the folder's permissions")
    elif code == errno.EROFS:
        fix = (f"{final.parent} is on a read-only disk; choose an output folder on a "
               "writable disk with --out")
    elif code == errno.ENAMETOOLONG:
        fix = "a name is too long for the file system; shorten the paddock, product or folder name"
    else:
        fix = "check the disk and the folder, then run again"
    return OutputWriteError(f"{what} ({reason}): {fix}; {kept}")


@contextlib.contextmanager
def output_folder(path: str | os.PathLike[str], *, overwrite: bool,
                  inputs: Sequence[str | os.PathLike[str]]) -> Iterator[Staging]:
    """Lock ``path``, give a temporary folder beside it, and move that into place on success.

    Parameters
    ----------
    path : path-like
        The output folder.
    overwrite : bool
        Replace an existing, non-empty output folder (whole).
    inputs : sequence of path-like
        Every input file of the run (never written over or into).

    Yields
    ------
    Staging
        ``temp`` to write into; ``final`` where it will be.

    Raises
    ------
    OutputExistsError
        See :func:`check_target`.
    OutputBusyError
        Another run is writing the same output folder.
    OutputWriteError
        The folder beside the target cannot be made or written, or a write
        failed (disk full, permission, read-only), naming the file and the fix.
    """
    final = check_target(path, overwrite=overwrite, inputs=inputs)
    lock_name, new_prefix, old_prefix = sibling_names(final)
    made = missing_folders(final.parent)
    lock_path = final.parent / lock_name
    try:
        final.parent.mkdir(parents=True, exist_ok=True)
        lock = take_lock(lock_path)
    except OSError as exc:
        remove_empty_folders(made)
        raise _write_error(exc, final=final, temp=final) from None
    if lock is None:
        raise OutputBusyError(
            f"another geosoil run is writing {final} now (it holds "
            f"{lock_path}); wait for it to finish, or choose another --out"
        )  # the lock is the other run's: left as it is
    completed = False
    try:
        staging = Staging(final=final, temp=final)
        _sweep(final, staging.notes)
        check_target(final, overwrite=overwrite, inputs=inputs)  # again, under the lock
        try:
            temp = final.parent / f"{new_prefix}{secrets.token_hex(4)}"
            temp.mkdir()
            probe = temp / ".geosoil-probe"
            probe.write_bytes(b"geosoil checks that it can write here")
            probe.unlink()
        except OSError as exc:
            raise _write_error(exc, final=final, temp=final) from None
        staging.temp = temp
        try:
            yield staging
            _swap(temp, final, old_prefix)
            completed = True
        except OSError as exc:
            shutil.rmtree(temp, ignore_errors=True)
            raise _write_error(exc, final=final, temp=temp) from exc
        except BaseException:
            shutil.rmtree(temp, ignore_errors=True)
            raise
    finally:
        _release(lock, lock_path)
        if not completed:
            remove_empty_folders(made)


class _FileLock:
    """A lock taken by :func:`take_lock` on POSIX: the open lock file, flocked."""

    def __init__(self, fd: int) -> None:
        self.fd = fd

    def release(self) -> None:
        import fcntl

        try:
            fcntl.flock(self.fd, fcntl.LOCK_UN)
        finally:
            os.close(self.fd)


def take_lock(path: Path) -> Any:
    """An exclusive lock on the file ``path`` (made when missing), taken without waiting;
    None when another process holds it. ``release()`` lets it go.

    On POSIX it is the kernel's advisory lock on the open file (``fcntl.flock``): the lock
    the filelock library takes there, so the two see each other (tests), without loading
    that library (a tenth of the start-up of a re-run, with what it imports). Elsewhere it
    is filelock's. A lock taken on a file that its holder removed meanwhile (a run removes
    its lock file while holding it, then lets go) is let go and taken afresh on the path.
    """
    if os.name != "posix":  # pragma: no cover - Windows
        import filelock

        other = filelock.FileLock(str(path), timeout=0)
        try:
            other.acquire()
        except filelock.Timeout:
            return None
        return other
    import fcntl

    while True:
        fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            os.close(fd)
            return None
        except BaseException:
            os.close(fd)
            raise
        held = os.fstat(fd)
        try:
            now = os.stat(path)
        except FileNotFoundError:
            now = None
        if now is not None and (now.st_ino, now.st_dev) == (held.st_ino, held.st_dev):
            return _FileLock(fd)
        fcntl.flock(fd, fcntl.LOCK_UN)  # removed (or replaced) meanwhile: afresh
        os.close(fd)


def _release(lock: object, lock_path: Path) -> None:
    """Remove the lock file while holding it, then release it: nothing of the run is left
    beside the output folder. A run that opened the file just before and locks it just after
    finds it unlinked (:func:`take_lock` compares the file it holds with the path's) and
    tries afresh on the path."""
    with contextlib.suppress(OSError):  # Windows cannot remove an open file; it stays
        lock_path.unlink()
    lock.release()  # type: ignore[attr-defined]


def missing_folders(path: Path) -> list[Path]:
    """``path`` and those of its parents that do not exist yet, deepest first: what making
    ``path`` creates (for :func:`remove_empty_folders` when the job fails)."""
    return [p for p in (path, *path.parents) if not p.exists()]


def remove_empty_folders(folders: Sequence[Path]) -> None:
    """Remove the folders a refused or failed run made for its output (deepest first), each
    only while it is empty: another program may have written into one meanwhile."""
    for folder in folders:
        with contextlib.suppress(OSError):
            folder.rmdir()


def _swap(temp: Path, final: Path, old_prefix: str) -> None:
    """Move the complete new folder into place; the old one (if any) aside, then away."""
    if not final.exists():
        os.rename(temp, final)
        return
    old = final.parent / f"{old_prefix}{secrets.token_hex(4)}"
    os.rename(final, old)
    try:
        os.rename(temp, final)
    except OSError:
        os.rename(old, final)  # put the old folder back; the caller reports the failure
        raise
    shutil.rmtree(old, ignore_errors=True)

