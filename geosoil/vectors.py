"""One reader for every vector input layer (samples, paddocks, exclusions, creeks, zones). [I/O]

:func:`read_layer` opens a GeoJSON, GeoPackage or (zipped) shapefile through
GDAL (pyogrio), chooses its layer, and reads it. Its errors name the file, the
layers it holds and the setting that chooses one. The callers keep their own
checks of what they read (a boundary needs shapes and a CRS; a lab file may be
a plain table).

Examples
--------
>>> from pathlib import Path
>>> from geosoil import demo_farm
>>> frame = read_layer(Path(demo_farm.__file__).parent / "paddocks.geojson",
...                    layer=None, layer_setting="[boundaries] layer")
>>> len(frame), frame.crs.to_epsg()
(3, 4326)
"""

from __future__ import annotations

import logging
import warnings
from pathlib import Path

import geopandas as gpd
import pandas as pd
import pyogrio
import pyogrio.errors
import shapely.errors

from .errors import InputError

__all__ = ["FORMAT_FIX", "read_layer"]

logger = logging.getLogger(__name__)

#: The fix to suggest when GDAL cannot read a vector file.
FORMAT_FIX = (
    "check that it opens in a GIS, or save it as GeoJSON, GeoPackage or a (zipped) shapefile"
)

_READ_ERRORS = (
    pyogrio.errors.DataSourceError,
    pyogrio.errors.DataLayerError,
    pyogrio.errors.FeatureError,
    pyogrio.errors.FieldError,
    pyogrio.errors.GeometryError,
    pyogrio.errors.CRSError,
    shapely.errors.ShapelyError,  # a broken shape in the file (an unclosed ring)
    OSError,
    ValueError,
)


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    return text[0] if text else type(exc).__name__


def read_layer(
    path: Path | str,
    *,
    layer: str | None,
    layer_setting: str,
    file: Path | str | None = None,
) -> gpd.GeoDataFrame | pd.DataFrame:
    """Read one layer of a vector file, with errors that name the file and the setting.

    Parameters
    ----------
    path : Path or str
        The file (GeoJSON, GeoPackage, shapefile, zipped shapefile).
    layer : str or None
        The layer to read; ``None`` reads the only layer.
    layer_setting : str
        The setting that chooses the layer, as messages name it
        (``"[boundaries] layer"``).
    file : Path or str, optional
        The file as messages name it (default ``path``).

    Returns
    -------
    GeoDataFrame or DataFrame
        The layer's rows in file order (a DataFrame when it has no geometry).

    Raises
    ------
    InputError
        The file cannot be read, holds no layer, holds several and none was
        chosen, or has no layer of that name.
    """
    path = Path(path)
    name = path if file is None else file
    try:
        layers = [str(n) for n in pyogrio.list_layers(path)[:, 0]]
    except _READ_ERRORS as exc:
        raise InputError(f"the file cannot be read as a vector file ({_first_line(exc)})",
                         file=name, fix=FORMAT_FIX) from None
    if not layers:
        raise InputError("the file holds no layers", file=name, fix=FORMAT_FIX)
    if layer is None and len(layers) > 1:
        raise InputError(
            f"the file holds {len(layers)} layers ({', '.join(layers)}) and none was chosen",
            file=name, fix=f"set {layer_setting} to one of: {', '.join(layers)}",
        )
    if layer is not None and layer not in layers:
        raise InputError(f"the file has no layer '{layer}'; it has: {', '.join(layers)}",
                         file=name, fix=f"set {layer_setting} to one of those")
    try:
        with warnings.catch_warnings():
            # GDAL's notes on odd features or JSON-like columns: the callers check the
            # rows themselves and name them
            warnings.simplefilter("ignore", RuntimeWarning)
            warnings.simplefilter("ignore", UserWarning)
            frame = pyogrio.read_dataframe(path, layer=layer)
    except _READ_ERRORS as exc:
        raise InputError(f"the file cannot be read ({_first_line(exc)})", file=name,
                         fix=FORMAT_FIX) from None
    logger.debug("read %d rows from %s", len(frame), path)
    return frame
