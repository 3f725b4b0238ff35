"""Tests of geosoil.grids: aligned paddock grids, masks, mosaics.

Every expected number is [derived] from the geometry drawn (rectangles whose
edges fall between cell centres, so the cell count is exact), or checked
against shapely's point-in-polygon for every cell centre.
"""

from __future__ import annotations

import math
import warnings

import geopandas as gpd
import numpy as np
import pyproj
import pytest
import shapely
from affine import Affine
from hypothesis import given, settings
from hypothesis import strategies as st

from geosoil.errors import CRSError, DataWarning, InputError, SettingsError
from geosoil.grids import PaddockGrid, aligned_grids, mosaic

UTM55S = "EPSG:32755"
E0, N0 = 541_000.0, 6_160_000.0  # south-eastern Australia, UTM zone 55S metres


def frame(names, geoms, crs=UTM55S) -> gpd.GeoDataFrame:
    return gpd.GeoDataFrame({"paddock": names}, geometry=list(geoms), crs=crs)


def box(x0, y0, x1, y1):
    return shapely.box(E0 + x0, N0 + y0, E0 + x1, N0 + y1)


def centres_inside(grid: PaddockGrid, geom) -> np.ndarray:
    rows, cols = np.indices((grid.height, grid.width))
    t = grid.transform
    x = t.c + (cols + 0.5) * t.a
    y = t.f + (rows + 0.5) * t.e
    return shapely.contains_xy(geom, x, y)


def assert_centre_rule(grid: PaddockGrid, geom) -> None:
    """Cell centres clearly inside are in the mask, clearly outside are not (centres within
    1 mm of the boundary may go either way)."""
    rows, cols = np.indices(grid.mask.shape)
    t = grid.transform
    pts = shapely.points(t.c + (cols + 0.5) * t.a, t.f + (rows + 0.5) * t.e)
    clear = shapely.distance(pts, geom.boundary) > 1e-3
    np.testing.assert_array_equal(grid.mask[clear], centres_inside(grid, geom)[clear])


# --------------------------------------------------------------------------- one paddock


def test_rectangle_cells_area_and_bounds() -> None:
    # [derived] 203 m x 98 m starting 1 m past a 10 m line: centres inside 20 x 10 = 200 cells
    grids = aligned_grids(frame(["A"], [box(1, 1, 204, 99)]), cell_size_m=10.0)
    g = grids["A"]
    assert g.n_cells == 200
    assert g.cell_area_ha == pytest.approx(0.01)
    assert g.n_cells * g.cell_area_ha == pytest.approx(2.0)
    assert g.crs == pyproj.CRS(UTM55S)
    left, bottom, right, top = g.bounds
    assert (left, bottom) == (E0, N0)
    assert (right, top) == (E0 + 210.0, N0 + 100.0)
    assert (g.width, g.height) == (21, 10)
    assert g.transform.a == 10.0 and g.transform.e == -10.0


def test_origin_is_snapped_to_multiples_of_the_cell_size() -> None:
    grids = aligned_grids(
        frame(["A", "B"], [box(3.3, 7.1, 58.2, 44.4), box(61.7, -23.9, 140.2, 9.9)]),
        cell_size_m=2.5,
    )
    for g in grids.values():
        assert (g.transform.c / 2.5) == pytest.approx(round(g.transform.c / 2.5), abs=1e-9)
        assert (g.transform.f / 2.5) == pytest.approx(round(g.transform.f / 2.5), abs=1e-9)


def test_cell_centres_and_to_array_round_trip() -> None:
    g = aligned_grids(frame(["A"], [box(0.5, 0.5, 39.5, 29.5)]), cell_size_m=10.0)["A"]
    x, y = g.cell_centres()
    assert len(x) == g.n_cells == 12
    # row-major: north row first, west to east within a row
    order = np.lexsort((x, -y))
    np.testing.assert_array_equal(order, np.arange(len(x)))
    arr = g.to_array(x)
    assert arr.shape == (g.height, g.width)
    np.testing.assert_array_equal(np.isnan(arr), ~g.mask)
    np.testing.assert_array_equal(arr[g.mask], x)
    with pytest.raises(ValueError, match="12 cells"):
        g.to_array(np.zeros(5))


def test_mask_is_read_only() -> None:
    g = aligned_grids(frame(["A"], [box(0, 0, 50, 50)]), cell_size_m=10.0)["A"]
    with pytest.raises(ValueError):
        g.mask[0, 0] = False


def test_hole_and_parts() -> None:
    # [derived] 100 x 100 m square with a 40 x 40 m hole, plus a separate 20 x 20 m part,
    # edges between cell centres at 10 m: 100 - 16 + 4 = 88 cells
    outer = box(0, 0, 100, 100)
    hole = box(30, 30, 70, 70)
    donut = shapely.Polygon(outer.exterior.coords, [hole.exterior.coords])
    paddock = shapely.MultiPolygon([donut, box(200, 0, 220, 20)])
    g = aligned_grids(frame(["A"], [paddock]), cell_size_m=10.0)["A"]
    assert g.n_cells == 88
    assert_centre_rule(g, paddock)


def test_exclusions_are_taken_out() -> None:
    # [derived] a 20 x 30 m dam inside a 100 x 100 m paddock: 100 - 6 = 94 cells
    g = aligned_grids(frame(["A"], [box(0, 0, 100, 100)]), cell_size_m=10.0,
                      exclusions=box(40, 40, 60, 70))["A"]
    assert g.n_cells == 94
    g2 = aligned_grids(frame(["A"], [box(0, 0, 100, 100)]), cell_size_m=10.0,
                       exclusions=box(500, 500, 600, 600))["A"]
    assert g2.n_cells == 100


def test_invalid_geometry_is_repaired_with_a_warning() -> None:
    # a bow-tie (self-intersecting ring); make_valid gives its two triangles
    bowtie = shapely.Polygon([(E0, N0), (E0 + 100, N0 + 100), (E0 + 100, N0), (E0, N0 + 100)])
    assert not bowtie.is_valid
    with pytest.warns(DataWarning, match="make_valid"):
        g = aligned_grids(frame(["Bow"], [bowtie]), cell_size_m=10.0)["Bow"]
    assert g.n_cells > 0
    assert_centre_rule(g, shapely.make_valid(bowtie))


def test_rows_with_one_name_are_merged() -> None:
    with pytest.warns(DataWarning, match="merged"):
        grids = aligned_grids(frame(["A", "A"], [box(0, 0, 50, 50), box(100, 0, 150, 50)]),
                              cell_size_m=10.0)
    assert list(grids) == ["A"]
    assert grids["A"].n_cells == 50  # [derived] 25 + 25


def test_tiny_paddock_warns_and_has_no_cells() -> None:
    with pytest.warns(DataWarning, match="no cell centre"):
        g = aligned_grids(frame(["Tiny"], [box(1, 1, 4, 4)]), cell_size_m=10.0)["Tiny"]
    assert g.n_cells == 0
    assert g.cell_centres()[0].shape == (0,)


@given(
    x0=st.floats(-500, 500), y0=st.floats(-500, 500),
    w=st.floats(5, 300), h=st.floats(5, 300),
    angle=st.floats(0, 90), cell=st.sampled_from([2.0, 5.0, 7.5, 10.0, 20.0]),
)
@settings(max_examples=60, deadline=None)
def test_mask_is_the_cell_centre_rule(x0, y0, w, h, angle, cell) -> None:
    geom = shapely.affinity.rotate(box(x0, y0, x0 + w, y0 + h), angle, origin="centroid")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataWarning)
        g = aligned_grids(frame(["P"], [geom]), cell_size_m=cell)["P"]
    assert_centre_rule(g, geom)
    # the grid covers the paddock: its bounds hold the geometry's bounds
    left, bottom, right, top = g.bounds
    gx0, gy0, gx1, gy1 = geom.bounds
    assert left <= gx0 and bottom <= gy0 and right >= gx1 and top >= gy1
    assert right - gx1 < cell and gx0 - left < cell


# --------------------------------------------------------------------------- errors


def test_bad_inputs_are_refused() -> None:
    with pytest.raises(InputError, match="'paddock' column"):
        aligned_grids(gpd.GeoDataFrame({"name": ["A"]}, geometry=[box(0, 0, 10, 10)],
                                       crs=UTM55S), cell_size_m=5.0)
    with pytest.raises(CRSError, match="projected"):
        aligned_grids(frame(["A"], [shapely.box(147.0, -35.0, 147.01, -34.99)], crs="EPSG:4326"),
                      cell_size_m=5.0)
    with pytest.raises(CRSError, match="no coordinate reference system"):
        aligned_grids(frame(["A"], [box(0, 0, 10, 10)], crs=None), cell_size_m=5.0)
    with pytest.raises(SettingsError) as info:
        aligned_grids(frame(["A"], [box(0, 0, 10, 10)]), cell_size_m=0.0)
    assert info.value.key == "cell_size_m"
    with pytest.raises(InputError) as err:
        aligned_grids(frame(["A", "B"], [box(0, 0, 10, 10), None]), cell_size_m=5.0)
    assert err.value.row == 2 and "no geometry" in str(err.value)
    with pytest.raises(InputError, match="not a polygon"):
        aligned_grids(frame(["A"], [shapely.LineString([(E0, N0), (E0 + 5, N0 + 5)])]),
                      cell_size_m=5.0)


def test_grid_refuses_a_rotated_transform_and_a_wrong_mask() -> None:
    crs = pyproj.CRS(UTM55S)
    with pytest.raises(ValueError, match="north-up"):
        PaddockGrid("p", Affine(10, 1, 0, 0, -10, 0), 2, 2, crs, np.ones((2, 2), bool))
    with pytest.raises(ValueError, match="mask shape"):
        PaddockGrid("p", Affine(10, 0, 0, 0, -10, 0), 3, 2, crs, np.ones((2, 2), bool))


# --------------------------------------------------------------------------- mosaic


def test_neighbouring_paddocks_line_up_in_the_mosaic() -> None:
    # two paddocks sharing an edge at a position that is not a multiple of the cell size
    a = box(0.0, 0.0, 73.0, 50.0)
    b = box(73.0, -20.0, 150.0, 50.0)
    grids = aligned_grids(frame(["A", "B"], [a, b]), cell_size_m=5.0)
    parts = [(g, g.to_array(np.full(g.n_cells, float(i + 1))))
             for i, g in enumerate(grids.values())]
    farm, transform = mosaic(parts)
    # [derived] no cell is in both (the shared edge is not on a cell centre) and none is lost
    assert np.isfinite(farm).sum() == sum(g.n_cells for g in grids.values())
    np.testing.assert_array_equal(np.isfinite(farm), centres_on(transform, farm.shape, a | b))
    assert (farm == 1).sum() == grids["A"].n_cells and (farm == 2).sum() == grids["B"].n_cells
    assert transform.c == E0 and transform.f == N0 + 50.0


def centres_on(transform: Affine, shape, geom) -> np.ndarray:
    rows, cols = np.indices(shape)
    return shapely.contains_xy(geom, transform.c + (cols + 0.5) * transform.a,
                               transform.f + (rows + 0.5) * transform.e)


def test_mosaic_refuses_misaligned_or_mismatched_grids() -> None:
    crs = pyproj.CRS(UTM55S)
    g1 = PaddockGrid("a", Affine(10, 0, 0, 0, -10, 100), 2, 2, crs, np.ones((2, 2), bool))
    g2 = PaddockGrid("b", Affine(10, 0, 3, 0, -10, 100), 2, 2, crs, np.ones((2, 2), bool))
    g3 = PaddockGrid("c", Affine(5, 0, 0, 0, -5, 100), 2, 2, crs, np.ones((2, 2), bool))
    g4 = PaddockGrid("d", Affine(10, 0, 0, 0, -10, 100), 2, 2, pyproj.CRS(32756),
                     np.ones((2, 2), bool))
    ones = np.ones((2, 2))
    with pytest.raises(ValueError, match="not aligned"):
        mosaic([(g1, ones), (g2, ones)])
    with pytest.raises(ValueError, match="cells of"):
        mosaic([(g1, ones), (g3, ones)])
    with pytest.raises(CRSError):
        mosaic([(g1, ones), (g4, ones)])
    with pytest.raises(ValueError, match="shape"):
        mosaic([(g1, np.ones((3, 2)))])
    with pytest.raises(ValueError, match="at least one"):
        mosaic([])


def test_mosaic_copies_only_masked_cells() -> None:
    crs = pyproj.CRS(UTM55S)
    mask = np.array([[True, False], [True, True]])
    g = PaddockGrid("a", Affine(10, 0, 20, 0, -10, 100), 2, 2, crs, mask)
    farm, t = mosaic([(g, np.array([[1.0, 99.0], [2.0, 3.0]]))])
    assert t == Affine(10, 0, 20, 0, -10, 100)
    np.testing.assert_array_equal(np.isnan(farm), ~mask)
    assert math.isclose(np.nansum(farm), 6.0)


def test_a_paddock_too_large_for_any_grid_is_an_input_error_naming_it() -> None:
    """A boundary in the wrong units (here 10 000 km across) is refused before any array is
    made, naming the paddock and the settings that fix it."""
    huge = gpd.GeoDataFrame({"paddock": ["Far"]}, geometry=[shapely.box(0, 0, 1e7, 1e7)],
                            crs="EPSG:32755")
    with pytest.raises(InputError, match=r"paddock 'Far'.*cell_size_m"):
        aligned_grids(huge, cell_size_m=10.0)
