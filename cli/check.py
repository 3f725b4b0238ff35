"""``geosoil check PROJECT``: validate inputs and settings, print every problem, write nothing."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from .options import (
    echo,
    echo_err,
    handle_errors,
    loading_stack,
    project_argument,
    verbosity_options,
)

__all__ = ["check"]


@click.command()
@project_argument
@verbosity_options
@click.pass_context
@handle_errors
def check(ctx: click.Context, project: Path) -> None:
    """Check PROJECT's inputs and settings; exit 1 if anything is wrong.

    PROJECT is a project folder or its TOML file. Every problem found is
    listed on stderr; nothing is written.
    """
    with loading_stack():
        from geosoil.errors import SettingsError
        from geosoil.pipeline import check as check_project
        from geosoil.project import PROJECT_FILE_NAME, load_project_problems

    proj, problems = load_project_problems(project)
    if proj is None:
        for p in problems:
            echo_err(f"problem: {p}")
        if all(isinstance(p, SettingsError) for p in problems):
            toml = project / PROJECT_FILE_NAME if project.is_dir() else project
            echo_err(
                f"{len(problems)} problem(s) found in the settings of {toml.resolve()}; "
                "the input files are checked once the settings are valid"
            )
        sys.exit(1)
    notes: list[str] = []
    found, warnings = check_project(proj, notes=notes)
    if not ctx.obj["quiet"]:
        for n in notes:
            echo_err(f"note: {n}")
        for w in warnings:
            echo_err(f"warning: {w}")
    for problem in found:
        echo_err(f"problem: {problem}")
    if found:
        echo_err(f"{len(found)} problem(s) found in {proj.path}")
        sys.exit(1)
    echo(f"ok: {proj.path} is ready to run ({len(warnings)} warning(s))")
