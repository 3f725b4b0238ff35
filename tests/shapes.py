"""Checks of written shapes shared by the writer and farm-file tests: GEOS validity (through
shapely) and no polygon part or hole under the 1 m² that README and DEVELOPERS state."""

from __future__ import annotations

from typing import Any

import numpy as np
import pyproj
import shapely

MIN_PART_M2 = 1.0  # the threshold README and DEVELOPERS state


def areas_m2(polygons: Any, crs: Any) -> np.ndarray:
    """m² of each polygon: on the WGS 84 ellipsoid (pyproj.Geod) in lon/lat, else planar."""
    if pyproj.CRS.from_user_input(crs).is_geographic:
        geod = pyproj.Geod(ellps="WGS84")
        return np.array([abs(geod.geometry_area_perimeter(p)[0]) for p in polygons])
    return np.array([p.area for p in polygons])


def assert_clean(geoms: Any, crs: Any) -> None:
    """Every shape valid (GEOS, through shapely) and no part or hole under MIN_PART_M2."""
    for g in geoms:
        assert g.is_valid, shapely.is_valid_reason(g)
        parts = list(shapely.get_parts(g))
        holes = [shapely.Polygon(h) for p in parts for h in p.interiors]
        assert (areas_m2(parts, crs) >= MIN_PART_M2).all(), areas_m2(parts, crs)
        assert (areas_m2(holes, crs) >= MIN_PART_M2).all()
