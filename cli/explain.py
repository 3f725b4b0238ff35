"""``geosoil explain PROJECT --at LON,LAT``: the arithmetic for one location."""

from __future__ import annotations

from pathlib import Path

import click

from .options import (
    Progress,
    echo,
    handle_errors,
    loading_stack,
    project_argument,
    verbosity_options,
)

__all__ = ["explain"]


def _location(ctx: click.Context, param: click.Parameter, value: str) -> tuple[float, float]:
    """--at as two numbers; a malformed value is a usage error naming the option."""
    from geosoil.errors import InputError
    from geosoil.explain import parse_location

    try:
        return parse_location(value)
    except InputError as exc:
        raise click.BadParameter(exc.problem + (f"; {exc.fix}" if exc.fix else "")) from None


@click.command()
@project_argument
@click.option(
    "--at",
    "at",
    required=True,
    metavar="LON,LAT",
    callback=_location,
    help="The location: LON,LAT in degrees, or X,Y in the working CRS (see --coords).",
)
@click.option(
    "--coords",
    type=click.Choice(["auto", "lonlat", "xy"]),
    default="auto",
    show_default=True,
    help="How to read --at: auto takes numbers within degree ranges as lon/lat.",
)
@verbosity_options
@click.pass_context
@handle_errors
def explain(ctx: click.Context, project: Path, at: tuple[float, float], coords: str) -> None:
    """Show how the rate at one location is computed, rule by rule.

    From the lab values of the nearest samples, through the interpolated
    values and the cell's chemistry, to the product rate of each rule and the
    zone rate the spreader applies there.
    """
    with loading_stack():
        from geosoil.explain import explain_location, format_explanation, locate
        from geosoil.pipeline import compute, prepare
        from geosoil.project import load_project

    a, b = at
    proj = load_project(project)
    prep = prepare(proj)
    # a point off the farm fails before kriging; only its paddock's rates and zones are made
    where = locate(prep, a, b, coords=coords)
    progress = Progress(quiet=ctx.obj["quiet"])
    farm = compute(proj, progress=progress, prepared=prep, paddocks={where.paddock})
    progress.done()
    echo(format_explanation(explain_location(farm, a, b, coords=coords)))
