"""``geosoil explain PROJECT --at LON,LAT``: the arithmetic for one location."""

from __future__ import annotations

from pathlib import Path

import click

from geosoil.explain import explain_location, format_explanation, parse_location
from geosoil.pipeline import compute
from geosoil.project import load_project

from .options import Progress, handle_errors, project_argument

__all__ = ["explain"]


@click.command()
@project_argument
@click.option(
    "--at",
    "at",
    required=True,
    metavar="LON,LAT",
    help="The location: LON,LAT in degrees, or X,Y in the working CRS.",
)
@click.option(
    "--coords",
    type=click.Choice(["auto", "lonlat", "xy"]),
    default="auto",
    show_default=True,
    help="How to read --at: auto takes numbers within degree ranges as lon/lat.",
)
@click.pass_context
@handle_errors
def explain(ctx: click.Context, project: Path, at: str, coords: str) -> None:
    """Show how the rate at one location is computed, rule by rule."""
    a, b = parse_location(at)
    progress = Progress(quiet=ctx.obj["quiet"])
    farm = compute(load_project(project), progress=progress)
    progress.done()
    click.echo(format_explanation(explain_location(farm, a, b, coords=coords)))
