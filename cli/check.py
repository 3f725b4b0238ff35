"""``geosoil check PROJECT``: validate inputs and settings, print every problem, write nothing."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from geosoil.pipeline import check as check_project
from geosoil.project import load_project

from .options import echo_err, handle_errors, project_argument

__all__ = ["check"]


@click.command()
@project_argument
@click.pass_context
@handle_errors
def check(ctx: click.Context, project: Path) -> None:
    """Check PROJECT's inputs and settings; exit 1 if anything is wrong."""
    proj = load_project(project)
    problems, warnings = check_project(proj)
    for w in warnings:
        echo_err(f"warning: {w}")
    for p in problems:
        echo_err(f"problem: {p}")
    if problems:
        echo_err(f"{len(problems)} problem(s) found in {proj.path}")
        sys.exit(1)
    click.echo(f"ok: {proj.path} is ready to run ({len(warnings)} warning(s))")
