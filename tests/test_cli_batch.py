"""``geosoil batch`` through the CLI runner: exit codes, stdout and stderr.

The farm is the small invented one of ``tests/small_farm``, with three paddocks (see
``tests/test_batch.py``). The batch is pointed with ``--scheduler`` at a Dask
cluster started in this process, listening on the loopback address only.
"""

from __future__ import annotations

import sys
from pathlib import Path

import pytest
from click.testing import CliRunner
from geosoil.cli.main import cli

sys.path.insert(0, str(Path(__file__).parent))
from test_batch import make_farm  # noqa: E402

distributed = pytest.importorskip("distributed")


def invoke(*args: object):  # noqa: ANN201 - click's Result
    return CliRunner().invoke(cli, [str(a) for a in args], catch_exceptions=False)


def test_workers_with_a_scheduler_is_a_usage_error(tmp_path) -> None:
    result = invoke("batch", tmp_path, "--out", tmp_path / "out", "--scheduler",
                    "tcp://127.0.0.1:1", "--workers", "2")
    assert result.exit_code == 2
    assert "--workers and --memory-limit" in result.output
    assert not (tmp_path / "out").exists()


def test_a_memory_limit_that_is_no_size_is_a_usage_error(tmp_path) -> None:
    result = invoke("batch", tmp_path, "--out", tmp_path / "out", "--memory-limit", "lots")
    assert result.exit_code == 2
    assert "'lots' is not a size" in result.output


def test_a_folder_without_projects_exits_1_naming_it(tmp_path) -> None:
    (tmp_path / "empty").mkdir()
    result = invoke("batch", tmp_path / "empty", "--out", tmp_path / "out")
    assert result.exit_code == 1
    assert "empty" in result.output and "holds no project" in result.output


@pytest.mark.parametrize("text", ["", "# the farms of 2027\n\n   \n"])
def test_a_list_of_no_projects_exits_1_naming_the_list(tmp_path, text) -> None:
    # user trial: a batch given an empty list of farms did nothing and exited 0
    listed = tmp_path / "farms.txt"
    listed.write_text(text)
    result = invoke("batch", listed, "--out", tmp_path / "out")
    assert result.exit_code == 1
    assert str(listed) in result.output and "names no project" in result.output
    assert not (tmp_path / "out").exists()


@pytest.mark.slow
def test_a_batch_on_a_scheduler_prints_the_table_and_exits_1_for_a_failed_farm(tmp_path) -> None:
    farms = tmp_path / "farms"
    make_farm(farms / "good-farm", paddocks=("Red Hill", "Creek Flat", "Windmill"),
              cache=tmp_path / "cache")
    (farms / "bad-farm").mkdir()
    (farms / "bad-farm" / "geosoil.toml").write_text("[samples]\nfile = 3\n")
    with distributed.LocalCluster(
        n_workers=1, threads_per_worker=1, processes=False, protocol="tcp", host="127.0.0.1",
        dashboard_address="127.0.0.1:0",
    ) as cluster:
        result = invoke("batch", farms, "--out", tmp_path / "out", "--scheduler",
                        cluster.scheduler_address)
    assert result.exit_code == 1
    out, err = result.stdout, result.stderr
    table = out.split("\n\n")[0].splitlines()
    assert table[0].split()[:3] == ["Farm", "Status", "Paddocks"]
    assert table[1].split()[:2] == ["bad-farm", "failed"]
    assert table[2].split()[:3] == ["good-farm", "done", "3"]  # its three paddocks
    assert "Cautions:" in out and "advisory" in out
    assert (tmp_path / "out" / "batch_summary.html").is_file()
    assert "good-farm: paddock 'Windmill' interpolated" in err
    assert "1 of 2 farm(s) failed:" in err and "bad-farm:" in err
    # again: the good farm is unchanged, so no worker is needed for it
    again = invoke("-q", "batch", farms, "--out", tmp_path / "out")
    assert again.exit_code == 1
    assert again.stdout.split("\n\n")[0].splitlines()[2].split()[:2] == ["good-farm", "unchanged"]
    assert "interpolated" not in again.stderr and "bad-farm:" in again.stderr
