"""geosoil.outfolder: the output folder is checked, locked, written beside and replaced whole.

Folder contents here are invented; what is checked is which files a person keeps
and what the errors tell them.
"""

from __future__ import annotations

import errno
import json
import os
from pathlib import Path

import filelock
import pytest

from geosoil.errors import OutputBusyError, OutputExistsError, OutputWriteError
from geosoil.outfolder import check_target, output_folder, sibling_names


def tree(root: Path) -> dict[str, bytes]:
    return {p.relative_to(root).as_posix(): p.read_bytes()
            for p in sorted(root.rglob("*")) if p.is_file()}


def geosoil_folder(path: Path, files: dict[str, str]) -> Path:
    """A folder as a geosoil run leaves it: the files and a run.json listing them."""
    for name, text in files.items():
        (path / name).parent.mkdir(parents=True, exist_ok=True)
        (path / name).write_text(text)
    (path / "run.json").write_text(json.dumps({"files": [*files, "run.json"]}))
    return path


def beside(path: Path) -> list[str]:
    return sorted(p.name for p in path.parent.iterdir() if p.name.startswith(f".{path.name}."))


def test_check_target(tmp_path: Path) -> None:
    inputs_dir = tmp_path / "farm"
    inputs_dir.mkdir()
    lab = inputs_dir / "lab.csv"
    lab.write_text("x")
    out = check_target(tmp_path / "results" / "2024", overwrite=False, inputs=[lab])
    assert out == (tmp_path / "results" / "2024").resolve() and not out.exists()
    out.mkdir(parents=True)
    (out / "old.txt").write_text("x")
    with pytest.raises(OutputExistsError, match="not empty"):
        check_target(out, overwrite=False, inputs=[lab])
    # the inputs' folder, or a folder holding it, is refused even with overwrite
    for bad in (inputs_dir, tmp_path):
        with pytest.raises(OutputExistsError, match="input"):
            check_target(bad, overwrite=True, inputs=[lab])
    with pytest.raises(OutputExistsError, match="not a folder"):
        check_target(lab, overwrite=True, inputs=[])
    assert lab.read_text() == "x"


def test_a_complete_run_replaces_the_old_folder_whole(tmp_path: Path) -> None:
    out = geosoil_folder(tmp_path / "out", {"a.csv": "old", "stale/TASKDATA.XML": "old"})
    with output_folder(out, overwrite=True, inputs=[]) as staging:
        assert staging.temp != out and staging.temp.parent == out.parent
        assert tree(out)["a.csv"] == b"old"  # untouched while the run writes
        (staging.temp / "a.csv").write_text("new")
        (staging.temp / "run.json").write_text(json.dumps({"files": ["a.csv", "run.json"]}))
    assert tree(out) == {"a.csv": b"new", "run.json": b'{"files": ["a.csv", "run.json"]}'}
    assert beside(out) == []  # not even the lock file


def test_a_failed_run_leaves_the_old_folder_and_no_temporary_folder(tmp_path: Path) -> None:
    out = geosoil_folder(tmp_path / "out", {"a.csv": "old"})
    before = tree(out)
    with pytest.raises(RuntimeError, match="model failed"), \
            output_folder(out, overwrite=True, inputs=[]) as staging:
        (staging.temp / "a.csv").write_text("half")
        raise RuntimeError("model failed")
    assert tree(out) == before
    assert beside(out) == []


@pytest.mark.parametrize("err, words", [
    (errno.ENOSPC, ["is full", "MB free", "another disk"]),
    (errno.EACCES, ["may not write", "permissions"]),
    (errno.EROFS, ["read-only"]),
])
def test_a_write_error_names_the_file_and_the_fix(tmp_path: Path, err: int, words) -> None:  # noqa: ANN001
    out = geosoil_folder(tmp_path / "out", {"a.csv": "old"})
    before = tree(out)
    with pytest.raises(OutputWriteError) as info, \
            output_folder(out, overwrite=True, inputs=[]) as staging:
        raise OSError(err, "injected", str(staging.temp / "prescriptions" / "x.geojson"))
    text = str(info.value)
    assert str(out / "prescriptions" / "x.geojson") in text  # named where it was to be
    assert all(w in text for w in words), text
    assert f"{out} was left as it was" in text
    assert tree(out) == before and beside(out) == []


def test_a_second_run_into_a_locked_folder_is_refused(tmp_path: Path) -> None:
    out = tmp_path / "out"
    lock = filelock.FileLock(str(tmp_path / sibling_names(out)[0]), timeout=0)
    with lock:
        with pytest.raises(OutputBusyError, match="another geosoil run is writing"), \
                output_folder(out, overwrite=False, inputs=[]):
            pass
        assert beside(out) == [sibling_names(out)[0]]  # the other run's lock is left alone
    assert not out.exists()
    with output_folder(out, overwrite=False, inputs=[]) as staging:  # free again
        (staging.temp / "x").write_text("1")
    assert tree(out) == {"x": b"1"}


def test_a_refused_or_failed_run_leaves_nothing_it_made(tmp_path: Path) -> None:
    """Issue: a refused run left its hidden lock file beside the output folder. Refused
    before locking (not empty), refused under the lock, failed while computing: nothing of
    geosoil's is left, not even the parent folders it made for the output."""
    out = tmp_path / "full"
    out.mkdir()
    (out / "mine.txt").write_text("the user's")
    with pytest.raises(OutputExistsError, match="not empty"), \
            output_folder(out, overwrite=False, inputs=[]):
        pass
    assert beside(out) == [] and tree(out) == {"mine.txt": b"the user's"}
    with pytest.raises(OutputExistsError, match="not a geosoil output folder"), \
            output_folder(out, overwrite=True, inputs=[]):
        pass
    assert beside(out) == [] and tree(out) == {"mine.txt": b"the user's"}
    deep = tmp_path / "season" / "2027" / "out"
    with pytest.raises(ValueError, match="samples outside"), \
            output_folder(deep, overwrite=False, inputs=[]) as staging:
        assert staging.temp.parent == deep.parent
        assert (deep.parent / sibling_names(deep)[0]).exists()
        raise ValueError("samples outside every paddock")  # an input error found while computing
    assert sorted(p.name for p in tmp_path.iterdir()) == ["full"]
    # a folder it made that someone else wrote into meanwhile stays, with what they wrote
    with pytest.raises(ValueError), output_folder(deep, overwrite=False, inputs=[]):
        (tmp_path / "season" / "notes.txt").write_text("kept")
        raise ValueError("stop")
    assert tree(tmp_path / "season") == {"notes.txt": b"kept"}
    assert not (tmp_path / "season" / "2027").exists()


def test_what_a_killed_run_left_is_swept_and_an_old_folder_put_back(tmp_path: Path) -> None:
    out = tmp_path / "out"
    _, new_prefix, old_prefix = sibling_names(out)
    # killed while writing: a half-written temporary folder
    (tmp_path / f"{new_prefix}dead0001" / "prescriptions").mkdir(parents=True)
    # killed between moving the old folder aside and the new one in
    geosoil_folder(tmp_path / f"{old_prefix}dead0002", {"a.csv": "previous"})
    with output_folder(out, overwrite=True, inputs=[]) as staging:
        assert any("put back" in n for n in staging.notes)
        assert tree(out)["a.csv"] == b"previous"  # the previous folder is whole again
        (staging.temp / "run.json").write_text(json.dumps({"files": ["run.json"]}))
    assert set(tree(out)) == {"run.json"}
    assert beside(out) == []


def test_a_long_folder_name_gets_short_sibling_names(tmp_path: Path) -> None:
    out = tmp_path / ("paddock-" * 30)[:240]
    names = sibling_names(out)
    assert all(len(n.encode()) < 100 for n in names)
    assert len(set(names)) == 3


@pytest.mark.skipif(os.name != "posix", reason="the kernel's flock is POSIX's")
def test_the_folder_lock_and_the_filelock_library_see_each_other(tmp_path: Path) -> None:
    """geosoil's lock on POSIX (fcntl.flock without the library) and the filelock library's
    (the reference) exclude each other both ways; a lock file removed by its holder before
    letting go is taken afresh on the path, never on the removed file."""
    from geosoil.outfolder import take_lock

    path = tmp_path / ".out.geosoil-lock"
    ours = take_lock(path)
    assert ours is not None
    with pytest.raises(filelock.Timeout):
        filelock.FileLock(str(path), timeout=0).acquire()
    assert take_lock(path) is None  # a second taker in this process is refused too
    path.unlink()  # as a run ends: the file removed while held, then let go
    ours.release()
    again = take_lock(path)
    assert again is not None and path.exists()
    assert os.fstat(again.fd).st_ino == os.stat(path).st_ino
    again.release()
    theirs = filelock.FileLock(str(path), timeout=0)
    with theirs:
        assert take_lock(path) is None
    mine = take_lock(path)
    assert mine is not None
    mine.release()
