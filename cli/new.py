"""``geosoil new FOLDER --samples FILE --paddocks FILE``: write a ready-to-run project file."""

from __future__ import annotations

from pathlib import Path

import click

from .options import echo, echo_err, handle_errors, verbosity_options

__all__ = ["new"]


def _check_crs(value: str | None) -> str | None:
    """Reject a --crs that pyproj cannot read, as a usage error naming the option."""
    if value is None:
        return None
    import pyproj

    try:
        pyproj.CRS.from_user_input(value)
    except pyproj.exceptions.CRSError as exc:
        raise click.BadParameter(
            f"'{value}' is not a CRS pyproj knows ({exc}); give an EPSG code such as "
            "EPSG:28355, an authority string or WKT"
        ) from None
    return value


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
    callback=lambda ctx, param, value: _check_crs(value),
    help="CRS of the samples' coordinates when the file carries none "
    "(EPSG code such as EPSG:28355, authority string or WKT).",
)
@click.option(
    "--overwrite", is_flag=True,
    help="Replace FOLDER/geosoil.toml if it exists (the old file is not kept).",
)
@verbosity_options
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
    from geosoil.project import new_project
    from geosoil.recording import record_warnings

    # what reading the files warned about, once each, recorded as 'check' and 'run' do
    found: list[str] = []
    with record_warnings(found):
        path, notes = new_project(folder, samples=samples, paddocks=paddocks, crs=crs,
                                  overwrite=overwrite)
    if not ctx.obj["quiet"]:
        for n in notes:
            echo_err(f"note: {n}")
        for message in found:
            echo_err(f"warning: {message}")
    echo(str(path))
