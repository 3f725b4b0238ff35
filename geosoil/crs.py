"""Coordinate reference systems: reading a CRS setting and choosing the working CRS.

Kriging, cell sizes, areas and rates all need metres, so every run works in
one projected, metric CRS. A user's projected CRS (in metres) is kept; when the
inputs are longitude/latitude, the UTM zone (WGS 84) of the data's centre is
chosen. The choice is returned with a one-line reason for the run record.

Coordinates are always transformed with ``always_xy=True`` (x = easting or
longitude first), whatever axis order the CRS declares.

Examples
--------
>>> crs, reason = choose_working_crs(
...     candidates=[parse_crs("EPSG:4326", key="samples.crs")],
...     lonlat_bounds=(146.90, -35.12, 146.95, -35.08))
>>> crs.to_epsg()
32755
>>> reason.startswith("inputs are in longitude/latitude")
True
"""

from __future__ import annotations

import logging
import math
from collections.abc import Sequence
from typing import Any

import geopandas as gpd
import numpy as np
import pyproj

from .errors import CRSError, SettingsError

__all__ = [
    "LONLAT",
    "parse_crs",
    "choose_working_crs",
    "lonlat_bounds",
    "describe_crs",
    "is_metric",
]

logger = logging.getLogger(__name__)

#: CRS of longitude/latitude on WGS 84, x = longitude (as RFC 7946 uses it).
#: WGS 84 longitude/latitude (EPSG:4326).
LONLAT = pyproj.CRS.from_epsg(4326)


class _CRSSettingError(SettingsError, CRSError):
    """A CRS setting that cannot be read: both a SettingsError and a CRSError."""


def parse_crs(value: Any, *, key: str) -> pyproj.CRS:
    """Read a CRS given as an EPSG code, an authority string or WKT.

    Parameters
    ----------
    value
        ``28355``, ``"28355"``, ``"EPSG:28355"``, ``"epsg:28355"``, another
        authority string (``"ESRI:102100"``, ``"urn:ogc:def:crs:EPSG::28355"``),
        WKT, a PROJ string, or a :class:`pyproj.CRS`.
    key
        The setting the value came from, named in the error (``"samples.crs"``).

    Returns
    -------
    pyproj.CRS

    Raises
    ------
    SettingsError
        (also a :class:`~geosoil.errors.CRSError`) when the value is empty or
        not a CRS pyproj knows; the message names ``key`` and the accepted forms.

    Examples
    --------
    >>> parse_crs(28355, key="samples.crs").name
    'GDA94 / MGA zone 55'
    >>> parse_crs("epsg:4326", key="samples.crs").is_geographic
    True
    >>> try:
    ...     parse_crs("EPSG:99999999", key="samples.crs")
    ... except SettingsError as exc:
    ...     print(exc.key, isinstance(exc, CRSError))
    samples.crs True
    """
    if isinstance(value, pyproj.CRS):
        return value
    forms = "give an EPSG code such as 'EPSG:28355', another authority string, or WKT"
    if isinstance(value, bool) or value is None or (isinstance(value, str) and not value.strip()):
        raise _CRSSettingError(f"a CRS is required; {forms}", key=key)
    if isinstance(value, (int, np.integer)):
        value = f"EPSG:{int(value)}"
    elif isinstance(value, str):
        value = value.strip()
        if value.isdigit():
            value = f"EPSG:{value}"
    else:
        raise _CRSSettingError(f"{value!r} is not a CRS; {forms}", key=key)
    try:
        return pyproj.CRS.from_user_input(value)
    except pyproj.exceptions.CRSError as exc:
        shown = value if len(value) <= 60 else value[:57] + "..."
        raise _CRSSettingError(
            f"'{shown}' is not a CRS pyproj knows ({exc}); {forms}", key=key
        ) from None


def describe_crs(crs: pyproj.CRS) -> str:
    """A short name for messages: ``"GDA94 / MGA zone 55 (EPSG:28355)"``.

    Parameters
    ----------
    crs : pyproj.CRS
        Any CRS.

    Returns
    -------
    str
        Its name, with the authority code when it has one.

    Examples
    --------
    >>> describe_crs(pyproj.CRS.from_epsg(32755))
    'WGS 84 / UTM zone 55S (EPSG:32755)'
    """
    auth = crs.to_authority(min_confidence=90)
    return f"{crs.name} ({auth[0]}:{auth[1]})" if auth else crs.name


def is_metric(crs: pyproj.CRS) -> bool:
    """True for a projected CRS whose horizontal axes are in metres.

    Parameters
    ----------
    crs : pyproj.CRS
        Any CRS.

    Returns
    -------
    bool
        Whether distances in it are metres.

    Examples
    --------
    >>> is_metric(pyproj.CRS.from_epsg(28355)), is_metric(pyproj.CRS.from_epsg(4326))
    (True, False)
    """
    if not crs.is_projected:
        return False
    units = {(a.unit_name or "").lower() for a in crs.axis_info[:2]}
    return units <= {"metre", "meter"} and bool(units)


def lonlat_bounds(*, frames: Sequence[gpd.GeoDataFrame]) -> tuple[float, float, float, float]:
    """(west, south, east, north) in degrees of everything in ``frames`` together.

    Each frame must have a CRS; empty frames are passed over.

    Parameters
    ----------
    frames : sequence of GeoDataFrame
        Layers with a CRS.

    Returns
    -------
    tuple of float
        (west, south, east, north), degrees.

    Raises
    ------
    CRSError
        A layer has no CRS, or there are no features.

    Examples
    --------
    >>> from shapely.geometry import Point
    >>> f = gpd.GeoDataFrame(geometry=[Point(146.9, -35.1), Point(147.0, -35.0)], crs=4326)
    >>> lonlat_bounds(frames=[f])
    (146.9, -35.1, 147.0, -35.0)
    """
    boxes = []
    for frame in frames:
        if frame is None or frame.empty:
            continue
        if frame.crs is None:
            raise CRSError("a layer has no CRS, so its longitude/latitude extent is unknown")
        boxes.append(frame.to_crs(LONLAT).total_bounds)
    if not boxes:
        raise CRSError("no features to take a longitude/latitude extent from")
    b = np.array(boxes, dtype=float)
    return (
        float(b[:, 0].min()),
        float(b[:, 1].min()),
        float(b[:, 2].max()),
        float(b[:, 3].max()),
    )


def _utm_of(lon: float, lat: float) -> pyproj.CRS:
    """The WGS 84 UTM CRS whose zone holds (lon, lat).

    Zone ``floor((lon + 180) / 6) + 1`` (a point on a zone edge goes to the zone that
    starts there), north (EPSG:326zz) from the equator up to 84°N and south
    (EPSG:327zz) below it down to 80°S: the zones' areas of use in the EPSG
    dataset, which a query of PROJ's database took 0.1-0.2 s to find; the test
    holds this against that query.
    """
    if not (-80.0 <= lat <= 84.0 and -180.0 <= lon <= 180.0):
        raise CRSError(
            f"no UTM zone covers longitude {lon:.4f}, latitude {lat:.4f} (UTM stops at 84°N and "
            "80°S). Fix: give the inputs in a projected CRS in metres, or set the working CRS"
        )
    zone = min(int(math.floor((lon + 180.0) / 6.0)) + 1, 60)
    return pyproj.CRS.from_epsg((32600 if lat >= 0.0 else 32700) + zone)


def choose_working_crs(
    *,
    candidates: Sequence[pyproj.CRS | None],
    lonlat_bounds: tuple[float, float, float, float],
) -> tuple[pyproj.CRS, str]:
    """Choose the metric CRS a run works in, with a one-line reason.

    The first candidate that is projected in metres is kept. Otherwise (all
    inputs in longitude/latitude, or projected in feet) the WGS 84 UTM zone
    that holds the centre of ``lonlat_bounds`` is used.

    Parameters
    ----------
    candidates
        The CRSs of the inputs in order of precedence (samples first, say);
        ``None`` entries are passed over.
    lonlat_bounds
        (west, south, east, north) of all inputs, degrees (see :func:`lonlat_bounds`).

    Returns
    -------
    (pyproj.CRS, str)
        The working CRS and the reason, for the run record.

    Raises
    ------
    CRSError
        When the bounds are not longitude/latitude, or no UTM zone covers them.

    Examples
    --------
    >>> crs, why = choose_working_crs(candidates=[pyproj.CRS.from_epsg(28355)],
    ...                               lonlat_bounds=(146.9, -35.1, 147.0, -35.0))
    >>> crs.to_epsg(), why
    (28355, 'kept the input CRS GDA94 / MGA zone 55 (EPSG:28355): it is projected in metres')
    """
    passed_over = []
    for crs in candidates:
        if crs is None:
            continue
        if is_metric(crs):
            return crs, f"kept the input CRS {describe_crs(crs)}: it is projected in metres"
        if crs.is_projected:
            passed_over.append(describe_crs(crs))
    west, south, east, north = (float(v) for v in lonlat_bounds)
    if not (
        np.all(np.isfinite([west, south, east, north]))
        and -180 <= west <= 180
        and -180 <= east <= 180
        and -90 <= south <= north <= 90
    ):
        raise CRSError(
            f"the extent {lonlat_bounds} is not longitude/latitude in degrees "
            "(west, south, east, north); check the CRS of the inputs"
        )
    lat = (south + north) / 2.0
    if west <= east:
        lon = (west + east) / 2.0
    else:  # the extent crosses the antimeridian
        lon = (west + east + 360.0) / 2.0
        lon = lon - 360.0 if lon > 180.0 else lon
    crs = _utm_of(lon, lat)
    if passed_over:
        why = f"inputs are in {', '.join(passed_over)}, not metres"
    else:
        why = "inputs are in longitude/latitude"
    reason = (
        f"{why}; using {describe_crs(crs)}, the UTM zone of the data's centre "
        f"({lon:.4f}, {lat:.4f})"
    )
    if east - west > 6.0:
        logger.warning(
            "the inputs span %.1f degrees of longitude, wider than a UTM zone", east - west
        )
    logger.info("working CRS: %s", reason)
    return crs, reason
