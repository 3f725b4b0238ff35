"""Options shared by several commands, and the one place library errors become exit codes."""

from __future__ import annotations

import contextlib
import functools
import gc
import logging
import re
import sys
import warnings
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any, TypeVar

import click

from geosoil.errors import GeosoilError, SettingsError

__all__ = [
    "project_argument",
    "out_option",
    "overwrite_option",
    "verbosity_options",
    "handle_errors",
    "Progress",
    "echo_err",
    "echo",
    "clean",
    "set_verbosity",
    "show_click_error",
    "show_warnings_clean",
    "loading_stack",
    "arm_loading_stack",
]

F = TypeVar("F", bound=Callable[..., Any])

#: Whether :func:`loading_stack` freezes what the imports made: only in the console
#: script's own process (:func:`arm_loading_stack`, from ``geosoil.cli.main.main``), where
#: every object alive then is the program's own and lives to the end. Code that calls the
#: commands in a longer-lived process (tests, a notebook) keeps Python's collector as it is.
_FREEZE_AFTER_IMPORTS = False


def arm_loading_stack() -> None:
    """Let :func:`loading_stack` pause the collector and freeze (the console script)."""
    global _FREEZE_AFTER_IMPORTS
    _FREEZE_AFTER_IMPORTS = True


@contextlib.contextmanager
def loading_stack() -> Iterator[None]:
    """Around a command's imports of the geospatial stack.

    In the console script's process, Python's cyclic garbage collector is paused while
    the stack (numpy, pandas, geopandas, shapely, pyproj, rasterio...) is imported, and
    every object alive after it is moved out of the collector's later passes
    (:func:`gc.freeze`, as Python's documentation describes for long-lived objects): the
    modules' hundreds of thousands of objects are never garbage, yet every full pass of
    the collector walked them again. A re-run of the demo spent 0.14-0.20 s of its CPU in
    the collector, 0.01 s with this. The collector is on again after the block, also when
    an import fails. Elsewhere (tests, a notebook) nothing changes.
    """
    if not _FREEZE_AFTER_IMPORTS:
        yield
        return
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        gc.freeze()
        if was_enabled:
            gc.enable()

project_argument = click.argument(
    "project", type=click.Path(exists=True, path_type=Path), metavar="PROJECT"
)
out_option = click.option(
    "--out",
    "out",
    required=True,
    type=click.Path(file_okay=False, path_type=Path),
    help="Output folder (created; must not be an input folder).",
)
overwrite_option = click.option(
    "--overwrite", is_flag=True,
    help="Replace an existing output folder (one geosoil wrote) whole with this run's.",
)


def _verbosity(ctx: click.Context, param: click.Parameter, value: Any) -> None:
    """Merge a command's -v/-q with the group's (either place counts: ``geosoil -q run`` and
    ``geosoil run -q`` are the same) and route the log at the level they ask for."""
    obj = ctx.ensure_object(dict)
    obj.setdefault("quiet", False)
    obj.setdefault("verbose", 0)
    if param.name == "quiet":
        obj["quiet"] = bool(obj["quiet"] or value)
    else:
        obj["verbose"] = int(obj["verbose"]) + int(value or 0)
    set_verbosity(obj["verbose"], obj["quiet"])


def verbosity_options(func: F) -> F:
    """``-v``/``--verbose`` and ``-q``/``--quiet`` on a command, as on the group: a command
    reads the merged values from ``ctx.obj["verbose"]`` and ``ctx.obj["quiet"]``."""
    func = click.option("-q", "--quiet", "quiet", is_flag=True, expose_value=False,
                        callback=_verbosity,
                        help="Only errors on stderr; results still on stdout.")(func)
    func = click.option("-v", "--verbose", "verbose", count=True, expose_value=False,
                        callback=_verbosity,
                        help="More messages on stderr (-vv for debugging).")(func)
    return func


# control characters (C0 but newline and tab, DEL, C1) and the bidirectional overrides that
# could rewrite what a terminal shows (Unicode TR #36 / CVE-2021-42574 "Trojan Source")
_UNSAFE = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f\u202a-\u202e\u2066-\u2069]")


def clean(message: str) -> str:
    """``message`` with every control character shown as an escape (``\\x1b``), never sent
    to the terminal: a sample ID or paddock name cannot retitle or redraw the terminal."""
    return _UNSAFE.sub(lambda m: m.group().encode("unicode_escape").decode("ascii"),
                       str(message))


def echo(message: str = "", *, err: bool = False) -> None:
    """Print a line for the person at the terminal, control characters made visible."""
    click.echo(clean(message), err=err)


def show_click_error(exc: click.ClickException) -> None:
    """Print a usage error as click words it (usage line, help hint, ``Error: ...``), with
    control characters shown as escapes: the message may quote what was typed (a path, an
    option's value), and click would print it as it is on a terminal."""
    ctx = getattr(exc, "ctx", None)
    if isinstance(exc, click.UsageError) and ctx is not None:
        hint = ""
        if ctx.command.get_help_option(ctx) is not None:
            option = max(ctx.command.get_help_option_names(ctx), key=len)
            hint = f"Try '{ctx.command_path} {option}' for help.\n"
        echo(f"{ctx.get_usage()}\n{hint}", err=True)
    echo(f"Error: {exc.format_message()}", err=True)


def echo_err(message: str) -> None:
    """A message for the person at the terminal: to stderr, never to stdout."""
    echo(message, err=True)


def handle_errors(func: F) -> F:
    """Map library errors, and files that cannot be read or written, to exit 1 on stderr;
    a bad command-line option the library found (a :class:`SettingsError` whose key is the
    option, ``--budget``) to a usage error naming the option (exit 2)."""

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        try:
            return func(*args, **kwargs)
        except GeosoilError as exc:
            key = getattr(exc, "key", None)
            if type(exc) is SettingsError and isinstance(key, str) and key.startswith("--"):
                raise click.BadParameter(exc.bare_message,
                                         ctx=click.get_current_context(silent=True),
                                         param_hint=f"'{key}'") from None
            echo_err(f"error: {exc}")
            sys.exit(1)
        except OSError as exc:  # a folder that cannot be made, a disk that is full...
            where = f": {exc.filename}" if getattr(exc, "filename", None) else ""
            echo_err(f"error: {exc.strerror or exc}{where}")
            sys.exit(1)
        except (click.exceptions.Exit, click.ClickException, click.Abort):
            raise
        except MemoryError:
            echo_err("error: the job needs more memory than this machine has; run fewer "
                     "paddocks at once, a coarser [grid] cell_size_m, or on a larger machine")
            sys.exit(1)
        except Exception as exc:  # a fault of geosoil's: said in one line, never a traceback
            logging.getLogger("geosoil").debug("unexpected error", exc_info=True)
            echo_err(f"error: geosoil stopped on an unexpected {type(exc).__name__}: {exc}. "
                     "Nothing was written over your outputs. Please report this with the "
                     "command you ran; run again with -vv to see where it happened")
            sys.exit(1)

    return wrapper  # type: ignore[return-value]


class Progress:
    """Progress lines on stderr for the long steps; silent when quiet.

    On a terminal the line is rewritten in place; otherwise one plain line per step
    (no animation when the output is not a terminal).
    """

    def __init__(self, *, quiet: bool) -> None:
        self.quiet = quiet
        self.tty = sys.stderr.isatty()
        self._last_len = 0

    def __call__(self, message: str) -> None:
        if self.quiet:
            return
        if self.tty:
            pad = max(self._last_len - len(message), 0)
            sys.stderr.write("\r" + clean(message) + " " * pad)
            sys.stderr.flush()
            self._last_len = len(message)
        else:
            sys.stderr.write(clean(message) + "\n")

    def done(self) -> None:
        if self.tty and not self.quiet and self._last_len:
            sys.stderr.write("\n")
            self._last_len = 0


def set_verbosity(verbose: int, quiet: bool) -> None:
    """Route the package logger to stderr at the level the flags ask for."""
    level = logging.WARNING
    if quiet:
        level = logging.ERROR
    elif verbose >= 2:
        level = logging.DEBUG
    elif verbose == 1:
        level = logging.INFO
    logger = logging.getLogger("geosoil")
    logger.setLevel(level)
    if not any(isinstance(h, _StderrHandler) for h in logger.handlers):
        handler = _StderrHandler()
        handler.setFormatter(_CleanFormatter("%(levelname)s %(name)s: %(message)s"))
        logger.addHandler(handler)


def show_warnings_clean() -> None:
    """Print a warning raised outside every recorder (rare: the commands record theirs) the
    way Python does, control characters shown as escapes."""
    warnings.showwarning = _show_warning


def _show_warning(message: Warning | str, category: type[Warning], filename: str,
                  lineno: int, file: Any = None, line: str | None = None) -> None:
    try:
        text = warnings.formatwarning(message, category, filename, lineno, line)
        (file or sys.stderr).write(clean(text))
    except Exception:  # noqa: BLE001 - as Python's own: a warning must never stop a job
        pass


class _CleanFormatter(logging.Formatter):
    """Log lines (with their tracebacks, at -vv) with control characters shown as escapes,
    as every other line geosoil prints: a message may quote a sample ID or a file name."""

    def format(self, record: logging.LogRecord) -> str:
        return clean(super().format(record))


class _StderrHandler(logging.StreamHandler):  # type: ignore[type-arg]
    """Writes to whatever ``sys.stderr`` is at the time of each record (not the one at setup)."""

    def __init__(self) -> None:
        super().__init__()

    @property  # type: ignore[override]
    def stream(self) -> Any:
        return sys.stderr

    @stream.setter
    def stream(self, value: Any) -> None:  # the base class sets it; the property ignores it
        pass
