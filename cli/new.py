"""``geosoil new FOLDER --samples FILE --paddocks FILE``: write a ready-to-run project file."""

from __future__ import annotations

from pathlib import Path

import click

from geosoil.project import new_project

from .options import echo_err, handle_errors, overwrite_option

__all__ = ["new"]


@click.command()
@click.argument("folder", type=click.Path(file_okay=False, path_type=Path))
@click.option(
    "--samples",
    required=True,
    type=click.Path(exists=True, dir_okay=False, path_type=Path),
    help="The lab results file (CSV, Excel, GeoJSON, GeoPackage or shapefile).",
)
@click.option(
    "--paddocks",
    required=True,
    type=click.Path(exists=True, dir_okay=False, path_type=Path),
    help="The paddock boundaries (GeoJSON, GeoPackage or shapefile).",
)
@click.option(
    "--crs",
    default=None,
    help="CRS of the samples' coordinates when the file carries none "
    "(EPSG code such as EPSG:28355, authority string or WKT).",
)
@overwrite_option
@click.pass_context
@handle_errors
def new(
    ctx: click.Context, folder: Path, samples: Path, paddocks: Path, crs: str | None,
    overwrite: bool,
) -> None:
    """Write FOLDER/geosoil.toml for a samples file and a boundaries file.

    Columns, units and the CRS are detected and written out with every other
    setting at its default, each with a one-line comment. Edit it, then
    'geosoil check FOLDER' and 'geosoil run FOLDER --out DIR'.
    """
    path, notes = new_project(folder, samples=samples, paddocks=paddocks, crs=crs,
                              overwrite=overwrite)
    if not ctx.obj["quiet"]:
        for n in notes:
            echo_err(f"note: {n}")
    click.echo(str(path))
