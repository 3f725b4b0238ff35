"""``geosoil``: the command group. Each command lives in its own module."""

from __future__ import annotations

import atexit
import os
import sys
import threading
from typing import Any

import click

from geosoil import __version__

from . import batch, check, compare, demo, explain, new, plan, run
from .options import arm_loading_stack, set_verbosity, show_click_error, show_warnings_clean

__all__ = ["main", "cli"]


class _Group(click.Group):
    """The command group, whose usage errors reach the terminal with control characters
    shown as escapes (click would print what was typed as it is)."""

    def main(self, *args: Any, **kwargs: Any) -> Any:
        if kwargs.get("standalone_mode", True) is False:
            return super().main(*args, **kwargs)
        kwargs["standalone_mode"] = False
        try:
            code = super().main(*args, **kwargs)
        except click.ClickException as exc:
            show_click_error(exc)
            sys.exit(exc.exit_code)
        except click.Abort:
            click.echo("Aborted!", err=True)
            sys.exit(1)
        # without standalone mode click returns --help's and --version's exit code
        sys.exit(code if isinstance(code, int) else 0)


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="geosoil")
@click.option("-v", "--verbose", count=True, help="More messages on stderr (-vv for debugging).")
@click.option("-q", "--quiet", is_flag=True, help="Only errors on stderr; results still on stdout.")
@click.pass_context
def cli(ctx: click.Context, verbose: int, quiet: bool) -> None:
    """Gypsum and lime prescriptions from soil samples.

    Reads lab results and paddock boundaries, checks them, kriges surfaces,
    computes per-cell rates by published methods, and writes spreader zones,
    tonnage, an offline map and a report. Rates are advisory: have them
    checked by a qualified agronomist and follow local regulations.
    """
    ctx.ensure_object(dict)
    ctx.obj["quiet"] = quiet
    ctx.obj["verbose"] = verbose
    set_verbosity(verbose, quiet)
    show_warnings_clean()


cli.add_command(new.new)
cli.add_command(check.check)
cli.add_command(run.run)
cli.add_command(demo.demo)
cli.add_command(explain.explain)
cli.add_command(batch.batch)
cli.add_command(plan.plan)
cli.add_command(compare.compare)


def main() -> None:
    """Console-script entry point."""
    arm_loading_stack()
    try:
        cli(prog_name="geosoil")
    except SystemExit as exc:
        _leave(exc.code)
    _leave(0)


def _leave(code: Any) -> None:
    """End the process with ``code`` as ``sys.exit`` would, without the interpreter's
    teardown.

    Python's own exit flushes the standard streams, runs the exit handlers and then
    frees every module and object one by one: with the geospatial stack loaded that
    last part takes a tenth to a fifth of a second of every command and does nothing
    a user can see (every output is written, closed and moved into place before a
    command returns). So the streams are flushed and the exit handlers run here, and
    the process ends. A process with other threads still running (a batch's workers)
    ends the usual way, which waits for them.
    """
    if threading.active_count() > 1:
        sys.exit(code)
    if code is None:
        status = 0
    elif isinstance(code, int):
        status = code
    else:  # sys.exit("text"): the text on stderr, status 1
        print(code, file=sys.stderr)
        status = 1
    atexit._run_exitfuncs()
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except (OSError, ValueError):  # a closed pipe: as Python reports it
            status = status or 120
    os._exit(status)
