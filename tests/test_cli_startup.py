"""Start-up: the command line loads no heavy library until a command runs.

``geosoil --help``, ``--version`` and every ``COMMAND --help`` should answer at once, so the
command modules import geopandas, scipy, pandas, folium and the like inside the command
bodies. Checked in a fresh interpreter through ``sys.modules`` (what got imported), never
by timing.
"""

from __future__ import annotations

import json
import subprocess
import sys
from importlib.metadata import entry_points
from importlib.metadata import version as _dist_version

import pytest


def version() -> str:
    return _dist_version("geosoil")

HEAVY = ("geopandas", "scipy", "folium", "pandas", "shapely", "pyproj", "rasterio", "numpy",
         "jenkspy", "branca", "jinja2", "openpyxl")


def _entry() -> tuple[str, str]:
    """Module and attribute of the installed ``geosoil`` console script."""
    (ep,) = [e for e in entry_points(group="console_scripts") if e.name == "geosoil"]
    module, _, attr = ep.value.partition(":")
    return module, attr


def _loaded_after(args: list[str] | None) -> list[str]:
    """Heavy modules imported by loading the CLI (and running it with ``args``)."""
    module, attr = _entry()
    # printed by an exit handler: the command line ends its process without the
    # interpreter's teardown, after running the exit handlers
    code = (
        "import atexit, importlib, json, sys\n"
        "atexit.register(lambda: print(json.dumps("
        f"[m for m in {HEAVY!r} if m in sys.modules])))\n"
        f"main = getattr(importlib.import_module({module!r}), {attr!r})\n"
        f"args = {args!r}\n"
        "if args is not None:\n"
        "    sys.argv = ['geosoil', *args]\n"
        "    main()\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          check=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


def test_importing_the_cli_imports_no_heavy_library() -> None:
    assert _loaded_after(None) == []


@pytest.mark.parametrize("args", [["--help"], ["--version"], ["new", "--help"],
                                  ["check", "--help"], ["run", "--help"], ["demo", "--help"],
                                  ["explain", "--help"], ["plan", "--help"],
                                  ["compare", "--help"]])
def test_help_and_version_import_no_heavy_library(args) -> None:
    assert _loaded_after(args) == []


def test_importing_the_package_imports_no_heavy_library() -> None:
    code = ("import json, sys, geosoil\n"
            f"print(json.dumps([m for m in {HEAVY!r} if m in sys.modules]))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          check=True)
    assert json.loads(done.stdout) == []


@pytest.mark.parametrize("cached", [True, False])
def test_check_loads_no_interpolation_library(tmp_path, demo_run, cached: bool) -> None:  # noqa: ANN001
    """``geosoil check`` interpolates nothing, so scipy's packages for kriging, variogram
    fitting and zones (about 0.3-0.5 s of start-up) stay unloaded: after a run (its
    surfaces and zones in the cache, from which it computes the rates and zones) and
    before one (no surfaces: it does not krige)."""
    from tests.demofarm import copy_demo

    # the session's run's cache, or an empty one of the test's own
    farm, _cache = copy_demo(tmp_path, cache=demo_run.cache if cached else None)
    code = (
        "import json, sys\n"
        "from geosoil.cli.main import cli\n"
        "try:\n"
        f"    cli.main(args=['-q', 'check', {str(farm)!r}])\n"
        "except SystemExit as exc:\n"
        "    assert exc.code in (0, None), exc.code\n"
        "print(json.dumps(sorted(m for m in sys.modules if m.startswith('scipy.') and\n"
        "    m.split('.')[1] in ('linalg', 'optimize', 'spatial', 'sparse', 'ndimage'))))\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          check=True)
    assert json.loads(done.stdout.strip().splitlines()[-1]) == []


def test_a_run_from_cached_surfaces_loads_no_interpolation_library(tmp_path, demo_run) -> None:  # noqa: ANN001
    """A re-run after a rate change, its surfaces in the cache, kriges nothing: scipy and
    threadpoolctl (the kriging engine's) stay unloaded, not even scipy's base package
    (a fifth of a tenth of a second of every re-run); the output folder's lock is the
    kernel's, without the filelock library (POSIX)."""
    import shutil

    from tests.demofarm import copy_demo

    cache = tmp_path / "cache"
    shutil.copytree(demo_run.cache, cache)  # the session's surfaces; its cache left as it was
    farm, _ = copy_demo(tmp_path, cache=cache,
                        changes={"rates.gypsum": {"target_esp_percent": 5.5}})
    code = (
        "import json, sys\n"
        "from geosoil.cli.main import cli\n"
        "try:\n"
        f"    cli.main(args=['-q', 'run', {str(farm)!r}, '--out', {str(tmp_path / 'out')!r}])\n"
        "except SystemExit as exc:\n"
        "    assert exc.code in (0, None), exc.code\n"
        "print(json.dumps(sorted(m for m in sys.modules\n"
        "                        if m.split('.')[0] in ('scipy', 'threadpoolctl', 'filelock'))))\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          check=True)
    assert json.loads(done.stdout.strip().splitlines()[-1]) == []
    assert (tmp_path / "out" / "report.html").is_file()


def _console(*args: str, **kw: object) -> subprocess.CompletedProcess[str]:
    """The installed console script's entry point run in a fresh interpreter with ``args``."""
    module, attr = _entry()
    code = (f"import importlib, sys\nsys.argv = ['geosoil', *{list(args)!r}]\n"
            f"getattr(importlib.import_module({module!r}), {attr!r})()\n"
            "raise SystemExit('the entry point returned')\n")
    return subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          **kw)  # type: ignore[call-overload]


def test_the_console_script_keeps_every_exit_status_and_all_its_output(tmp_path) -> None:
    ok = _console("--version")
    assert (ok.returncode, ok.stdout.strip()) == (0, f"geosoil, version {version()}")
    usage = _console("check", str(tmp_path / "nowhere"))
    assert usage.returncode == 2 and "does not exist" in usage.stderr
    assert _console("no-such-command").returncode == 2
    # the answer through a pipe arrives whole before the process ends (its last line is
    # click's own last line of every help)
    helps = _console("run", "--help")
    assert helps.returncode == 0
    assert helps.stdout.startswith("Usage: geosoil run")
    assert helps.stdout.rstrip().endswith("Show this message and exit.")


def test_a_closed_pipe_ends_the_command_with_an_error_status_and_no_traceback() -> None:
    import os

    module, attr = _entry()
    code = (f"import importlib, sys\nsys.argv = ['geosoil', 'run', '--help']\n"
            "sys.stdout = open(sys.stdout.fileno(), 'w', buffering=1 << 20, closefd=False)\n"
            f"getattr(importlib.import_module({module!r}), {attr!r})()\n")
    r, w = os.pipe()
    os.close(r)  # nobody reads: writing fails
    try:
        done = subprocess.run([sys.executable, "-c", code], stdout=w, stderr=subprocess.PIPE,
                              text=True)
    finally:
        os.close(w)
    assert done.returncode != 0
    assert "Traceback" not in done.stderr


def _gc_state_after(code: str) -> dict:
    """``code`` run in a fresh interpreter; the collector's state it prints as JSON."""
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          check=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


_GC_PROBE = (
    "import gc, json\n"
    "from geosoil.cli import options\n"
    "{arm}"
    "failed = False\n"
    "try:\n"
    "    with options.loading_stack():\n"
    "        inside = gc.isenabled()\n"
    "        import numpy\n"
    "        {fail}\n"
    "except ImportError:\n"
    "    failed = True\n"
    "print(json.dumps({{'inside': inside, 'enabled': gc.isenabled(), 'failed': failed,\n"
    "                  'frozen': gc.get_freeze_count()}}))\n"
)


@pytest.mark.parametrize("fail", [False, True])
def test_the_console_script_imports_the_stack_with_the_collector_paused_then_frozen(
        fail: bool) -> None:
    """In the console script's process (armed), the stack is imported with the cyclic
    collector off, what it made is frozen out of later passes (gc.freeze, Python's
    documented use for long-lived objects), and the collector is on again afterwards, also
    when an import in the block fails."""
    state = _gc_state_after(_GC_PROBE.format(
        arm="options.arm_loading_stack()\n",
        fail="import geosoil_no_such_module" if fail else "pass"))
    assert state["inside"] is False
    assert state["enabled"] is True
    assert state["failed"] is fail
    assert state["frozen"] > 10_000  # numpy's objects and everything before them


def test_elsewhere_loading_the_stack_leaves_the_collector_alone() -> None:
    """Code calling the commands in a longer-lived process (tests, a notebook) keeps the
    collector as it is: nothing paused, nothing frozen."""
    state = _gc_state_after(_GC_PROBE.format(arm="", fail="pass"))
    assert state == {"inside": True, "enabled": True, "failed": False, "frozen": 0}


def test_the_console_script_arms_the_collector_pause() -> None:
    """``geosoil`` as a user starts it arms :func:`loading_stack` before any command runs."""
    module, attr = _entry()
    code = (
        "import json, sys\n"
        f"import {module} as m\n"
        "from geosoil.cli import options\n"
        "sys.argv = ['geosoil', '--version']\n"
        "import atexit\n"
        "atexit.register(lambda: print(json.dumps(options._FREEZE_AFTER_IMPORTS)))\n"
        f"m.{attr}()\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip().splitlines()[-1] == "true"
