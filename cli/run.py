"""``geosoil run PROJECT --out DIR``: the whole job into an output folder."""

from __future__ import annotations

from pathlib import Path

import click

from .options import (
    Progress,
    handle_errors,
    loading_stack,
    out_option,
    overwrite_option,
    project_argument,
    verbosity_options,
)
from .summary import print_summary

__all__ = ["run"]


@click.command()
@project_argument
@out_option
@overwrite_option
@click.option("--no-cache", is_flag=True, help="Interpolate again even when inputs are unchanged.")
@verbosity_options
@click.pass_context
@handle_errors
def run(ctx: click.Context, project: Path, out: Path, overwrite: bool, no_cache: bool) -> None:
    """Run the whole job for PROJECT (a project folder or its geosoil.toml)."""
    with loading_stack():
        from geosoil.job import run as run_job  # the stack loads when a command runs, not at --help
        from geosoil.project import load_project

    progress = Progress(quiet=ctx.obj["quiet"])
    proj = load_project(project)
    result = run_job(proj, out_dir=out, overwrite=overwrite, progress=progress,
                     use_cache=not no_cache)
    progress.done()
    print_summary(result, quiet=ctx.obj["quiet"])
