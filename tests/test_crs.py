"""Tests for geosoil.crs: reading CRS settings and choosing the working CRS."""

from __future__ import annotations

import math

import geopandas as gpd
import pyproj
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from shapely.geometry import Point

from geosoil.crs import choose_working_crs, is_metric, lonlat_bounds, parse_crs
from geosoil.errors import CRSError, SettingsError

MGA55 = pyproj.CRS.from_epsg(28355)


@pytest.mark.parametrize(
    "value",
    [
        28355,
        "28355",
        "EPSG:28355",
        "epsg:28355",
        " EPSG:28355 ",
        "urn:ogc:def:crs:EPSG::28355",
        MGA55.to_wkt(),
        MGA55,
    ],
)
def test_parse_crs_accepts_code_authority_string_and_wkt(value):
    assert parse_crs(value, key="samples.crs").equals(MGA55)


@pytest.mark.parametrize("value", ["", "   ", None, True, "EPSG:99999999", "not a crs", 3.5])
def test_parse_crs_errors_name_the_key(value):
    with pytest.raises(SettingsError) as info:
        parse_crs(value, key="samples.crs")
    assert info.value.key == "samples.crs"
    assert "samples.crs" in str(info.value)
    assert "EPSG:28355" in str(info.value)  # the accepted forms are shown
    assert isinstance(info.value, CRSError)


def test_projected_metric_candidate_is_kept():
    crs, reason = choose_working_crs(
        candidates=[None, pyproj.CRS.from_epsg(4326), MGA55],
        lonlat_bounds=(146.9, -35.1, 147.0, -35.0),
    )
    assert crs.equals(MGA55)
    assert "kept" in reason and "EPSG:28355" in reason and "\n" not in reason


def test_first_projected_candidate_wins():
    crs, _ = choose_working_crs(
        candidates=[pyproj.CRS.from_epsg(32755), MGA55], lonlat_bounds=(146.9, -35.1, 147, -35)
    )
    assert crs.to_epsg() == 32755


# UTM zones: zone = floor((lon + 180) / 6) + 1, 6 degrees wide from 180 W; EPSG 326zz north,
# 327zz south on WGS 84 (the UTM definition; EPSG registry codes).
@pytest.mark.parametrize(
    "bounds, epsg",
    [
        ((147.30, -35.20, 147.40, -35.10), 32755),  # 147.35 E -> zone 55 S
        ((-93.70, 41.90, -93.50, 42.10), 32615),  # Iowa, 93.6 W -> zone 15 N
        ((150.00, -30.00, 150.00, -30.00), 32756),  # on the 150 E edge: the zone starting there
        ((5.00, 51.90, 5.10, 52.00), 32631),  # the Netherlands -> zone 31 N
    ],
)
def test_utm_zone_of_the_centre_for_lonlat_inputs(bounds, epsg):
    crs, reason = choose_working_crs(candidates=[pyproj.CRS.from_epsg(4326)], lonlat_bounds=bounds)
    assert crs.to_epsg() == epsg
    assert reason.startswith("inputs are in longitude/latitude")
    assert f"EPSG:{epsg}" in reason


@settings(max_examples=40, deadline=None)
@given(
    # away from zone edges, where float rounding of the formula itself decides the zone
    lon=st.floats(min_value=-179.99, max_value=179.99).filter(
        lambda v: abs((v + 180.0) / 6.0 - round((v + 180.0) / 6.0)) > 1e-9
    ),
    lat=st.floats(min_value=-79.9, max_value=83.9).filter(lambda v: abs(v) > 1e-6),
)
def test_utm_zone_follows_the_zone_formula(lon, lat):
    crs, _ = choose_working_crs(candidates=[], lonlat_bounds=(lon, lat, lon, lat))
    zone = math.floor((lon + 180.0) / 6.0) + 1
    assert crs.to_epsg() == (32600 if lat > 0 else 32700) + zone
    assert is_metric(crs)


def test_feet_crs_is_replaced_by_utm():
    texas_ft = pyproj.CRS.from_epsg(2277)  # NAD83 / Texas Central (ftUS)
    crs, reason = choose_working_crs(
        candidates=[texas_ft], lonlat_bounds=(-97.8, 30.2, -97.7, 30.3)
    )
    assert crs.to_epsg() == 32614
    assert "not metres" in reason and "EPSG:2277" in reason


def test_antimeridian_extent_uses_the_middle():
    crs, _ = choose_working_crs(candidates=[], lonlat_bounds=(178.0, -17.5, -178.0, -16.5))
    assert crs.to_epsg() in (32760, 32701)


def test_no_utm_zone_near_the_pole():
    with pytest.raises(CRSError, match="UTM"):
        choose_working_crs(candidates=[], lonlat_bounds=(10.0, 85.0, 11.0, 86.0))


def test_bounds_that_are_not_degrees():
    with pytest.raises(CRSError, match="not longitude/latitude"):
        choose_working_crs(candidates=[], lonlat_bounds=(500000.0, 6.1e6, 500100.0, 6.1e6))


def test_lonlat_bounds_reproject_each_frame():
    lonlat = gpd.GeoDataFrame(geometry=[Point(147.0, -35.0)], crs=4326)
    projected = lonlat.to_crs(28355)
    shifted = gpd.GeoDataFrame(geometry=[Point(146.5, -35.5)], crs=4326).to_crs(28355)
    west, south, east, north = lonlat_bounds(frames=[projected, shifted])
    assert (west, south, east, north) == pytest.approx((146.5, -35.5, 147.0, -35.0), abs=1e-7)


def test_lonlat_bounds_needs_a_crs():
    with pytest.raises(CRSError, match="no CRS"):
        lonlat_bounds(frames=[gpd.GeoDataFrame(geometry=[Point(0, 0)])])


def test_transform_uses_x_first():
    # EPSG:4326 declares latitude first; geosoil always passes longitude first (always_xy).
    # UTM definition: the central meridian (147 E for zone 55) has easting 500 000 m; the
    # southern hemisphere's false northing is 10 000 000 m, so 35 S lies between 6e6 and 7e6.
    crs, _ = choose_working_crs(candidates=[], lonlat_bounds=(147.0, -35.0, 147.0, -35.0))
    east, north = pyproj.Transformer.from_crs(4326, crs, always_xy=True).transform(147.0, -35.0)
    assert east == pytest.approx(500_000.0, abs=1e-6)
    assert 6e6 < north < 7e6


@pytest.mark.parametrize("lon, lat", [
    (147.45, -34.7), (0.0, 0.0), (-180.0, 0.0), (179.99, 10.0), (180.0, -5.0), (6.0, 45.0),
    (5.999, 0.0), (3.0, 60.0), (10.0, 78.0), (-122.3, 47.6), (-70.0, -33.4), (116.0, -80.0),
    (25.0, 84.0), (-0.001, -0.001),
])
def test_utm_zone_is_the_one_projs_database_gives(lon: float, lat: float) -> None:
    """The zone worked out from longitude and hemisphere against the EPSG dataset's areas of
    use, as PROJ's database query finds them (the zone starting at an edge; north on the
    equator)."""
    from pyproj.aoi import AreaOfInterest
    from pyproj.database import query_utm_crs_info

    from geosoil.crs import _utm_of

    infos = query_utm_crs_info(datum_name="WGS 84",
                               area_of_interest=AreaOfInterest(lon, lat, lon, lat))
    inside = [i for i in infos if i.area_of_use.west <= lon < i.area_of_use.east] or infos
    assert _utm_of(lon, lat).to_epsg() == int(inside[0].code)


@pytest.mark.parametrize("lat", [84.5, -80.5])
def test_no_utm_zone_beyond_its_latitudes(lat: float) -> None:
    from geosoil.crs import _utm_of

    with pytest.raises(CRSError, match="UTM stops at 84°N and 80°S"):
        _utm_of(10.0, lat)
