"""``geosoil demo --out DIR``: the whole job on the bundled, invented demo farm."""

from __future__ import annotations

from importlib import resources
from pathlib import Path

import click

from .options import (
    Progress,
    echo_err,
    handle_errors,
    loading_stack,
    out_option,
    overwrite_option,
    verbosity_options,
)
from .summary import print_summary

__all__ = ["demo", "demo_project_file"]


def demo_project_file() -> Path:
    """Path of the demo farm's project file as installed."""
    return Path(str(resources.files("geosoil.demo_farm").joinpath("geosoil.toml")))


@click.command()
@out_option
@overwrite_option
@click.option("--no-cache", is_flag=True, help="Interpolate again even when inputs are unchanged.")
@verbosity_options
@click.pass_context
@handle_errors
def demo(ctx: click.Context, out: Path, overwrite: bool, no_cache: bool) -> None:
    """Run the whole job on the bundled demo farm (an invented farm)."""
    with loading_stack():
        from geosoil.job import run as run_job  # the stack loads when a command runs, not at --help
        from geosoil.project import load_project

    progress = Progress(quiet=ctx.obj["quiet"])
    path = demo_project_file()
    if not ctx.obj["quiet"]:
        echo_err(f"demo farm project: {path}")
    proj = load_project(path)
    result = run_job(proj, out_dir=out, overwrite=overwrite, progress=progress,
                     use_cache=not no_cache)
    progress.done()
    print_summary(result, quiet=ctx.obj["quiet"])
