"""Spreader zones: tiling, rates from cells, merging, exclusions, user zones, grid, limits.

Expected figures here are [derived] by hand from the fixtures (areas of rectangles,
weighted means of a few cells), never produced by running the code under test.
"""

from __future__ import annotations

import math
import warnings

import geopandas as gpd
import numpy as np
import pytest
import shapely
from affine import Affine
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from geosoil.errors import CRSError, DataWarning, InputError, RateWarning, SettingsError
from geosoil.settings import from_mapping
from geosoil.spreader import SpreaderSettings, spreader_passes
from geosoil.zones import (
    NO_PRODUCT,
    ZONE_COLUMNS,
    ZoneSettings,
    classify_rates,
    limit_zone_rate,
    make_zones,
    parse_statistic,
)

CRS = "EPSG:32755"  # WGS 84 / UTM 55S: projected, metres
X0, Y0, CELL = 500_000.0, 6_000_000.0, 10.0


def transform_for(height: int) -> Affine:
    """North-up 10 m grid whose south-west corner is (X0, Y0)."""
    return Affine(CELL, 0, X0, 0, -CELL, Y0 + height * CELL)


def cell_centres(shape: tuple[int, int], transform: Affine) -> tuple[np.ndarray, np.ndarray]:
    rows, cols = np.mgrid[0 : shape[0], 0 : shape[1]]
    return transform.c + (cols + 0.5) * transform.a, transform.f + (rows + 0.5) * transform.e


def masked(rate: np.ndarray, transform: Affine, area: shapely.Geometry) -> np.ndarray:
    """NaN outside ``area`` (cell-centre rule), as the grids contract says."""
    x, y = cell_centres(rate.shape, transform)
    out = rate.astype(float).copy()
    out[~shapely.contains_xy(area, x, y)] = np.nan
    return out


def cell_boxes(shape: tuple[int, int], transform: Affine) -> gpd.GeoDataFrame:
    rows, cols = np.mgrid[0 : shape[0], 0 : shape[1]]
    x0 = transform.c + cols.ravel() * transform.a
    y1 = transform.f + rows.ravel() * transform.e
    boxes = shapely.box(x0, y1 + transform.e, x0 + transform.a, y1)
    return gpd.GeoDataFrame({"row": rows.ravel(), "col": cols.ravel()}, geometry=boxes, crs=CRS)


def quiet_zones(rate: np.ndarray, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataWarning)
        warnings.simplefilter("ignore", RateWarning)
        return make_zones(rate, crs=CRS, paddock=kw.pop("paddock", "Home"),
                          product=kw.pop("product", "gypsum"), **kw)


def assert_tiles(zones: gpd.GeoDataFrame, boundary: shapely.Geometry,
                 excluded: shapely.Geometry | None = None) -> None:
    """No gaps, no overlaps, valid geometry, areas within 0.1 % (the invariant asked for)."""
    geoms = list(zones.geometry)
    assert all(g.is_valid and not g.is_empty for g in geoms)
    union = shapely.union_all(geoms)
    total = sum(g.area for g in geoms)
    # overlaps: the parts add up to their union
    assert total == pytest.approx(union.area, rel=1e-9, abs=1e-6)
    # gaps and spill: union equals the paddock
    assert shapely.symmetric_difference(union, boundary).area <= 1e-6 * boundary.area
    work = zones[zones["kind"] != "exclusion"]
    expected_work = boundary.area - (excluded.intersection(boundary).area if excluded else 0.0)
    assert work.geometry.area.sum() == pytest.approx(expected_work, rel=1e-3)
    assert np.allclose(zones["area_ha"], zones.geometry.area / 1e4)


@pytest.fixture
def field():
    """An irregular paddock over a 24 x 30 grid with a smooth rate trend and a bump."""
    h, w = 24, 30
    t = transform_for(h)
    x, y = cell_centres((h, w), t)
    bump = np.exp(-((x - X0 - 200) ** 2 + (y - Y0 - 120) ** 2) / 60.0**2)
    rate = 200 + 4.0 * (x - X0) + 300 * bump
    boundary = shapely.Polygon([
        (X0 + 12, Y0 + 8), (X0 + 287, Y0 + 15), (X0 + 293, Y0 + 200),
        (X0 + 150, Y0 + 236), (X0 + 5, Y0 + 180),
    ])
    return {"rate": rate, "transform": t, "boundary": boundary}


# --------------------------------------------------------------------------- settings


def test_settings_defaults_and_statistic_validation() -> None:
    s = ZoneSettings()
    assert (s.method, s.classes, s.statistic) == ("quantiles", 4, "mean")
    assert parse_statistic("p90") == 90.0 and parse_statistic("mean") is None
    for bad in ("median", "p101", "p-5", "P50", "90"):
        with pytest.raises(SettingsError) as e:
            from_mapping(ZoneSettings, {"statistic": bad}, section="zones")
        assert e.value.key == "zones.statistic"
    with pytest.raises(SettingsError) as e:
        from_mapping(ZoneSettings, {"method": "jenks"}, section="zones")
    assert e.value.key == "zones.method" and "natural_breaks" in str(e.value)


# --------------------------------------------------------------------------- tiling and totals


@pytest.mark.parametrize("method", ["quantiles", "equal_interval", "natural_breaks", "kmeans"])
@pytest.mark.parametrize("smooth", [False, True])
def test_rate_classes_tile_the_paddock(field, method: str, smooth: bool) -> None:
    rate = masked(field["rate"], field["transform"], field["boundary"])
    res = quiet_zones(rate, transform=field["transform"], boundary=field["boundary"],
                      settings=ZoneSettings(method=method, smooth=smooth, min_zone_area_ha=0.3))
    z = res.zones
    assert list(z.columns) == list(ZONE_COLUMNS)
    assert z.crs.to_epsg() == 32755
    assert z["zone"].tolist() == list(range(1, len(z) + 1))
    assert set(z["kind"]) == {"rate"} and 1 <= len(z) <= 4
    assert (z["paddock"] == "Home").all() and (z["product"] == "gypsum").all()
    assert_tiles(z, field["boundary"])
    # every piece of every zone is at least the minimum area (0.3 ha), or had no neighbour
    parts = z.geometry.explode(index_parts=False)
    assert (parts.area >= 0.3e4 - 1e-6).all()
    # n_cells: every cell with a rate is counted in exactly one zone
    assert z["n_cells"].sum() == np.isfinite(rate).sum()


def test_total_equals_exact_integral_of_cell_rates(field) -> None:
    """With a rate in every cell, sum(area x mean rate) over the zones equals
    sum(cell rate x area of the cell inside the paddock) computed by an independent
    overlay [derived: the area-weighted mean times the area is the weighted sum]."""
    rate, t, boundary = field["rate"], field["transform"], field["boundary"]
    boxes = cell_boxes(rate.shape, t)
    boxes["rate"] = rate.ravel()
    inside = gpd.overlay(boxes, gpd.GeoDataFrame(geometry=[boundary], crs=CRS), how="intersection")
    integral = float((inside["rate"] * inside.geometry.area / 1e4).sum())
    for method in ("quantiles", "natural_breaks", "spreader_grid"):
        z = quiet_zones(rate, transform=t, boundary=boundary,
                        settings=ZoneSettings(method=method, min_zone_area_ha=0.2,
                                              travel_direction_deg=35.0)).zones
        assert (z["area_ha"] * z["rate_raw_kg_ha"]).sum() == pytest.approx(integral, rel=1e-9)


def test_total_within_stated_tolerance_of_cell_sum(field) -> None:
    """Masked raster (NaN outside the paddock by the cell-centre rule): the total before
    rounding differs from sum(cell rate x cell area) by at most max rate x the area of the
    symmetric difference between the paddock and the rated cells [derived bound]."""
    rate = masked(field["rate"], field["transform"], field["boundary"])
    z = quiet_zones(rate, transform=field["transform"], boundary=field["boundary"],
                    settings=ZoneSettings(min_zone_area_ha=0.2)).zones
    total = float((z["area_ha"] * z["rate_raw_kg_ha"]).sum())
    cell_sum = float(np.nansum(rate) * CELL * CELL / 1e4)
    rated = shapely.union_all(cell_boxes(rate.shape, field["transform"]).geometry[
        np.isfinite(rate).ravel()])
    sym_ha = shapely.symmetric_difference(rated, field["boundary"]).area / 1e4
    assert abs(total - cell_sum) <= np.nanmax(rate) * sym_ha
    assert sym_ha > 0  # the bound is not trivially zero for this paddock


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    data=st.data(),
    h=st.integers(3, 9),
    w=st.integers(3, 9),
    method=st.sampled_from(["quantiles", "equal_interval", "natural_breaks", "kmeans"]),
    classes=st.integers(1, 6),
    smooth=st.booleans(),
    min_area=st.sampled_from([0.0, 0.015, 0.05]),
)
def test_property_zones_tile_and_conserve_product(data, h, w, method, classes, smooth,
                                                  min_area) -> None:
    values = data.draw(st.lists(st.sampled_from([0.0, 50.0, 120.0, 500.0, 2000.0]),
                                min_size=h * w, max_size=h * w))
    rate = np.array(values, dtype=float).reshape(h, w)
    t = transform_for(h)
    # a paddock inside the raster, cutting cells: an inset, slanted quadrilateral
    width, height = w * CELL, h * CELL
    boundary = shapely.Polygon([(X0 + 3, Y0 + 4), (X0 + width - 6, Y0 + 1),
                                (X0 + width - 2, Y0 + height - 3), (X0 + 5, Y0 + height - 7)])
    z = quiet_zones(rate, transform=t, boundary=boundary,
                    settings=ZoneSettings(method=method, classes=classes, smooth=smooth,
                                          min_zone_area_ha=min_area)).zones
    assert_tiles(z, boundary)
    boxes = cell_boxes(rate.shape, t)
    share = shapely.area(shapely.intersection(boxes.geometry.values, boundary))
    zero_cells = (share > 0) & (rate.ravel() == 0)
    # the classes asked for, plus one 'no product' zone when some cells need nothing
    assert len(z) <= classes + int(zero_cells.any())
    assert (z["label"] == NO_PRODUCT).sum() <= 1
    # product is conserved exactly by the area-weighted means [derived]
    assert (z["area_ha"] * z["rate_raw_kg_ha"]).sum() == pytest.approx(
        float((share * rate.ravel()).sum() / 1e4), rel=1e-9, abs=1e-9)
    if min_area == 0 and not smooth and zero_cells.any() and not zero_cells.all():
        # nothing merges: the no-product zone is exactly the cells that need nothing
        none = z[z["label"] == NO_PRODUCT]
        assert len(none) == 1 and none["rate_raw_kg_ha"].iloc[0] == 0.0
        assert none["area_ha"].iloc[0] == pytest.approx(share[zero_cells].sum() / 1e4)
        assert (z.loc[z["label"] != NO_PRODUCT, "rate_raw_kg_ha"] > 0).all()


# --------------------------------------------------------------------------- class details


def test_two_rates_give_two_zones_with_exact_rates_and_a_note() -> None:
    """Left half 100 kg/ha, right half 400 kg/ha; asking for 4 classes gives 2 (with a note)."""
    rate = np.where(np.arange(8)[None, :] < 4, 100.0, 400.0).repeat(6, axis=0)
    t = transform_for(6)
    boundary = shapely.box(X0, Y0, X0 + 80, Y0 + 60)
    res = quiet_zones(rate, transform=t, boundary=boundary,
                      settings=ZoneSettings(classes=4, min_zone_area_ha=0))
    z = res.zones
    assert z["rate_raw_kg_ha"].tolist() == [100.0, 400.0]
    assert z["area_ha"].tolist() == pytest.approx([0.24, 0.24])  # 40 m x 60 m each [derived]
    assert z.geometry.iloc[0].equals(shapely.box(X0, Y0, X0 + 40, Y0 + 60))
    assert any("2 distinct rates" in n and "instead of 4" in n for n in res.notes)


def test_classes_are_numbered_from_low_to_high_rate(field) -> None:
    rate = masked(field["rate"], field["transform"], field["boundary"])
    for method in ("quantiles", "equal_interval", "natural_breaks", "kmeans"):
        z = quiet_zones(rate, transform=field["transform"], boundary=field["boundary"],
                        settings=ZoneSettings(method=method, min_zone_area_ha=0)).zones
        assert z["rate_raw_kg_ha"].is_monotonic_increasing


def zero_inflated() -> tuple[np.ndarray, Affine, shapely.Geometry]:
    """8 x 10 cells of 10 m at 0 kg/ha but for a patch in rows 2-5, columns 2-5 (16 cells)
    whose rate rises along the rows: 300, 400, ..., 1800 kg/ha, row by row."""
    rate = np.zeros((8, 10))
    rate[2:6, 2:6] = (300.0 + 100.0 * np.arange(16)).reshape(4, 4)
    return rate, transform_for(8), shapely.box(X0, Y0, X0 + 100, Y0 + 80)


def test_cells_needing_nothing_form_their_own_zone_and_classes_come_from_the_rest() -> None:
    """Quartiles of the 16 rated cells are its four rows: means 450, 850, 1250, 1650 kg/ha
    [derived: (300 + 400 + 500 + 600) / 4, ...]; the 64 cells at 0 form one 'no product'
    zone of 0.64 ha [derived]. Classes over all 80 cells would have put three of four
    classes on the zeros."""
    rate, t, boundary = zero_inflated()
    for method in ("quantiles", "equal_interval", "natural_breaks", "kmeans"):
        res = quiet_zones(rate, transform=t, boundary=boundary,
                          settings=ZoneSettings(method=method, classes=4, min_zone_area_ha=0))
        z = res.zones
        assert z["label"].tolist() == [NO_PRODUCT, "class 1", "class 2", "class 3", "class 4"]
        assert z["rate_raw_kg_ha"].tolist() == pytest.approx([0.0, 450.0, 850.0, 1250.0, 1650.0])
        assert z["area_ha"].tolist() == pytest.approx([0.64, 0.04, 0.04, 0.04, 0.04])
        assert z["rate_kg_ha"].iloc[0] == 0.0 and z["passes"].iloc[0] == 0
        assert_tiles(z, boundary)
        assert any("'no product' zone" in n and "16 cells that need product" in n
                   for n in res.notes)


def test_cells_below_the_spreader_minimum_join_the_no_product_zone() -> None:
    """With a minimum of 500 kg/ha the first two cells of the patch (300, 400) need less than
    the spreader can put out: they join the zeros; 14 cells are left for the classes."""
    rate, t, boundary = zero_inflated()
    with warnings.catch_warnings(record=True) as record:
        warnings.simplefilter("always")
        res = make_zones(rate, transform=t, crs=CRS, paddock="Home", product="lime",
                         boundary=boundary, spreader=SpreaderSettings(min_rate=500.0),
                         settings=ZoneSettings(classes=2, min_zone_area_ha=0))
    z = res.zones
    assert z["label"].tolist() == [NO_PRODUCT, "class 1", "class 2"]
    # no product: 64 zeros + 300 + 400 over 66 cells; classes: 500..1100 and 1200..1800,
    # 7 cells each [derived]
    assert z["rate_raw_kg_ha"].tolist() == pytest.approx([700 / 66, 800.0, 1500.0])
    assert z["area_ha"].tolist() == pytest.approx([0.66, 0.07, 0.07])
    assert z["rate_kg_ha"].tolist() == [0.0, 800.0, 1500.0]
    assert any("minimum rate of 500 kg/ha" in n and "14 cells" in n for n in res.notes)
    # the zone made to hold no product is not reported as a zone pushed below the minimum
    assert not any(issubclass(w.category, RateWarning) for w in record)


def test_a_paddock_needing_nothing_is_one_zone() -> None:
    rate, t, boundary = zero_inflated()
    rate[:] = 0.0
    rate[0, 0] = 100.0  # below the minimum
    res = quiet_zones(rate, transform=t, boundary=boundary,
                      spreader=SpreaderSettings(min_rate=250.0),
                      settings=ZoneSettings(classes=4, min_zone_area_ha=0))
    assert res.zones["label"].tolist() == [NO_PRODUCT]
    assert res.zones["rate_kg_ha"].tolist() == [0.0]
    assert_tiles(res.zones, boundary)
    # the note names its product: a paddock's notes for lime and dolomite must not read alike
    said = [n for n in res.notes if "every cell needs less than" in n]
    assert len(said) == 1 and said[0].startswith(f"{res.zones['product'].iloc[0]}: ")


def test_no_zero_cells_no_extra_zone(field) -> None:
    rate = masked(field["rate"], field["transform"], field["boundary"])
    z = quiet_zones(rate, transform=field["transform"], boundary=field["boundary"],
                    settings=ZoneSettings(min_zone_area_ha=0)).zones
    assert NO_PRODUCT not in set(z["label"]) and len(z) == 4


def test_small_piece_merges_into_neighbour_with_longest_shared_edge() -> None:
    """6 x 6 cells: columns 0-2 at 100, 3-5 at 500, and a 2-cell piece at 300 in column 2,
    rows 0-1. The piece shares 3 cell edges with the 100 block and 2 with the 500 block,
    so it joins the 100 block: that zone's rate is (16 x 100 + 2 x 300) / 18 [derived]."""
    rate = np.where(np.arange(6)[None, :] < 3, 100.0, 500.0).repeat(6, axis=0)
    rate[0:2, 2] = 300.0
    t = transform_for(6)
    boundary = shapely.box(X0, Y0, X0 + 60, Y0 + 60)
    res = quiet_zones(rate, transform=t, boundary=boundary,
                      settings=ZoneSettings(classes=3, min_zone_area_ha=0.05))  # 5 cells
    z = res.zones
    assert len(z) == 2
    assert z["rate_raw_kg_ha"].iloc[0] == pytest.approx((16 * 100 + 2 * 300) / 18)
    assert z["rate_raw_kg_ha"].iloc[1] == pytest.approx(500.0)
    assert z.geometry.iloc[0].equals(shapely.box(X0, Y0, X0 + 30, Y0 + 60))
    assert any("merged" in n for n in res.notes)


def test_smoothing_removes_single_cell_speckle() -> None:
    """One 500 kg/ha cell inside a 100 kg/ha field: smoothing (3 x 3 majority) gives
    one zone whose mean still counts the odd cell: (24 x 100 + 500) / 25 [derived]."""
    rate = np.full((5, 5), 100.0)
    rate[2, 2] = 500.0
    t = transform_for(5)
    boundary = shapely.box(X0, Y0, X0 + 50, Y0 + 50)
    rough = quiet_zones(rate, transform=t, boundary=boundary,
                        settings=ZoneSettings(classes=2, min_zone_area_ha=0)).zones
    smooth = quiet_zones(rate, transform=t, boundary=boundary,
                         settings=ZoneSettings(classes=2, min_zone_area_ha=0, smooth=True)).zones
    assert len(rough) == 2
    assert len(smooth) == 1
    assert smooth["rate_raw_kg_ha"].iloc[0] == pytest.approx((24 * 100 + 500) / 25)


def test_classify_rates_methods() -> None:
    # quantiles of 1..100 in 4 classes: 25 values each [derived]
    cls, notes = classify_rates(np.arange(1.0, 101.0), method="quantiles", classes=4)
    assert np.bincount(cls)[1:].tolist() == [25, 25, 25, 25] and notes == []
    # equal intervals over 0..100 in 4 classes: breaks at 25, 50, 75 [derived]
    cls, _ = classify_rates(np.array([0.0, 24.9, 25.1, 49.9, 50.1, 74.9, 75.1, 100.0]),
                            method="equal_interval", classes=4)
    assert cls.tolist() == [1, 1, 2, 2, 3, 3, 4, 4]
    # three well separated clusters are found by natural breaks and k-means
    rng = np.random.default_rng(3)
    centres = np.repeat([100.0, 1000.0, 3000.0], [40, 70, 30])
    values = centres + rng.normal(0, 20, centres.size)
    truth = np.repeat([1, 2, 3], [40, 70, 30])
    for method in ("natural_breaks", "kmeans"):
        cls, _ = classify_rates(values, method=method, classes=3)
        assert cls.tolist() == truth.tolist(), method
    # above the sampling threshold natural breaks still find the clusters
    big = np.repeat([100.0, 1000.0, 3000.0], [3000, 4000, 2000]) + rng.normal(0, 20, 9000)
    cls, _ = classify_rates(big, method="natural_breaks", classes=3)
    assert np.bincount(cls)[1:].tolist() == [3000, 4000, 2000]


@settings(max_examples=200, deadline=None)
@given(values=st.lists(st.one_of(st.sampled_from([0.0, 50.0, 120.0, 500.0, 2000.0]),
                                 st.floats(0.0, 5000.0, allow_nan=False)),
                       min_size=2, max_size=300),
       classes=st.integers(2, 12))
def test_quantile_and_equal_interval_classes_match_mapclassify(values, classes) -> None:
    """Our numpy class bounds against mapclassify (a general-purpose classification
    library, test-only oracle): the same bounds and the same class for every value."""
    import mapclassify  # the test extra installs it
    v = np.array(values)
    if np.unique(v).size <= classes:  # handled before either method is asked
        return
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # mapclassify: ties, fewer classes
        oracle_q = mapclassify.Quantiles(v, k=classes)
        oracle_e = mapclassify.EqualInterval(v, k=classes)
    for method, oracle in (("quantiles", oracle_q), ("equal_interval", oracle_e)):
        cls, _ = classify_rates(v, method=method, classes=classes)
        # ours numbers the classes that hold values 1..n; theirs 0..k-1 with gaps
        used = np.unique(oracle.yb)
        assert cls.tolist() == (np.searchsorted(used, oracle.yb) + 1).tolist(), method


def test_natural_breaks_match_fisher_jenks_of_mapclassify() -> None:
    """jenkspy's breaks against mapclassify's FisherJenks (the exact Jenks optimum;
    test-only oracle) on skewed values below the sampling threshold."""
    import mapclassify  # the test extra installs it
    rng = np.random.default_rng(7)
    for k in (3, 4, 5):
        v = np.round(rng.exponential(300.0, 150), 1)
        cls, _ = classify_rates(v, method="natural_breaks", classes=k)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UserWarning)  # its pure-python path without numba
            oracle = mapclassify.FisherJenks(v, k=k)
        assert cls.tolist() == (oracle.yb + 1).tolist()


def test_kmeans_classes_are_a_fixed_point_of_lloyds_iteration() -> None:
    """k-means (scipy) [derived: every value is in the class of its nearest class mean,
    and each class mean is the mean of its values], and the same classes as
    mapclassify's k-means-based NaturalBreaks on separated clusters (test-only oracle)."""
    import mapclassify  # the test extra installs it
    rng = np.random.default_rng(11)
    v = np.concatenate([rng.normal(m, 30.0, n) for m, n in ((200, 60), (900, 80), (2500, 40))])
    cls, _ = classify_rates(v, method="kmeans", classes=3)
    means = np.array([v[cls == c].mean() for c in (1, 2, 3)])
    assert (np.abs(v[:, None] - means[None, :]).argmin(axis=1) + 1).tolist() == cls.tolist()
    oracle = mapclassify.NaturalBreaks(v, k=3)
    assert (np.searchsorted(np.unique(oracle.yb), oracle.yb) + 1).tolist() == cls.tolist()


@pytest.mark.parametrize("method, statistic", [("quantiles", "mean"), ("quantiles", "p75"),
                                               ("spreader_grid", "mean"),
                                               ("spreader_grid", "p50")])
def test_zone_rates_match_an_independent_overlay(field, method, statistic) -> None:
    """Each zone's rate from the cells under it (class raster + bincount, or the cells
    overlaid all at once) against geopandas' overlay of the cell squares with each zone
    [derived: area-weighted mean, lower weighted percentile]."""
    rate = masked(field["rate"], field["transform"], field["boundary"])
    z = quiet_zones(rate, transform=field["transform"], boundary=field["boundary"],
                    settings=ZoneSettings(method=method, statistic=statistic,
                                          min_zone_area_ha=0.2, working_width_m=24,
                                          grid_length_m=40, travel_direction_deg=35.0)).zones
    boxes = cell_boxes(rate.shape, field["transform"])
    boxes["rate"] = rate.ravel()
    boxes = boxes[np.isfinite(boxes["rate"])]
    pieces = gpd.overlay(boxes, z[["zone", "geometry"]], how="intersection",
                         keep_geom_type=True)
    pieces["w"] = pieces.geometry.area
    pieces = pieces[pieces["w"] > 0]
    for zone, grp in pieces.groupby("zone"):
        got = float(z.loc[z["zone"] == zone, "rate_raw_kg_ha"].iloc[0])
        if statistic == "mean":
            want = float((grp["rate"] * grp["w"]).sum() / grp["w"].sum())
        else:
            q = float(statistic[1:])
            grp = grp.sort_values("rate", kind="stable")
            cum = grp["w"].cumsum().to_numpy()
            i = int(np.searchsorted(cum, q / 100 * cum[-1] - 1e-12 * cum[-1]))
            want = float(grp["rate"].iloc[min(i, len(grp) - 1)])
        assert got == pytest.approx(want, rel=1e-9), zone


def test_all_cells_without_rate_give_a_remainder_zone_at_rate_zero() -> None:
    rate = np.full((4, 4), np.nan)
    t = transform_for(4)
    boundary = shapely.box(X0, Y0, X0 + 40, Y0 + 40)
    with pytest.warns(DataWarning):
        z = make_zones(rate, transform=t, crs=CRS, paddock="Dry", product="lime",
                       boundary=boundary, settings=ZoneSettings()).zones
    assert z["kind"].tolist() == ["remainder"] and z["rate_kg_ha"].tolist() == [0.0]
    assert_tiles(z, boundary)


# --------------------------------------------------------------------------- exclusions


def test_exclusions_polygon_and_creek_line(field) -> None:
    t, boundary = field["transform"], field["boundary"]
    rate = masked(field["rate"], t, boundary)
    dam = shapely.Point(X0 + 100, Y0 + 100).buffer(25)
    creek = shapely.LineString([(X0 - 50, Y0 + 60), (X0 + 400, Y0 + 60)])  # crosses it all
    ex = gpd.GeoDataFrame({"exclusion": ["dam", "creek"]}, geometry=[dam, creek], crs=CRS)
    res = quiet_zones(rate, transform=t, boundary=boundary, exclusions=ex,
                      settings=ZoneSettings(min_zone_area_ha=0.2), line_buffer_m=10.0)
    z = res.zones
    rate_z, excl_z = z[z["kind"] == "rate"], z[z["kind"] == "exclusion"]
    assert len(excl_z) == 2
    assert (excl_z["rate_kg_ha"] == 0).all() and (excl_z["passes"] == 0).all()
    # exclusions are numbered after the rate zones
    assert excl_z["zone"].min() == rate_z["zone"].max() + 1
    excluded = shapely.union_all([dam, creek.buffer(10.0)])
    assert_tiles(z, boundary, excluded)
    # the creek strip is 20 m wide across the paddock [derived: buffer 10 m each side]
    strip = boundary.intersection(shapely.box(X0 - 100, Y0 + 50, X0 + 500, Y0 + 70))
    creek_zone = excl_z[excl_z["label"] == "creek"].geometry.iloc[0]
    assert creek_zone.area == pytest.approx(strip.area, rel=1e-6)
    assert excl_z[excl_z["label"] == "dam"].geometry.iloc[0].area == pytest.approx(dam.area)
    # no rate zone reaches into an exclusion
    assert shapely.union_all(rate_z.geometry).intersection(excluded).area < 1e-6


def test_exclusions_in_another_crs_are_reprojected(field) -> None:
    t, boundary = field["transform"], field["boundary"]
    dam = shapely.box(X0 + 80, Y0 + 80, X0 + 140, Y0 + 130)
    ex_utm = gpd.GeoDataFrame(geometry=[dam], crs=CRS)
    ex_ll = ex_utm.to_crs("EPSG:4326")
    a = quiet_zones(field["rate"], transform=t, boundary=boundary, exclusions=ex_utm,
                    settings=ZoneSettings()).zones
    b = quiet_zones(field["rate"], transform=t, boundary=boundary, exclusions=ex_ll,
                    settings=ZoneSettings()).zones
    ea = a[a["kind"] == "exclusion"]["area_ha"].sum()
    eb = b[b["kind"] == "exclusion"]["area_ha"].sum()
    assert ea == pytest.approx(0.3) and eb == pytest.approx(ea, rel=1e-6)  # 60 m x 50 m


# --------------------------------------------------------------------------- user zones


@pytest.fixture
def columns_field():
    """4 x 4 cells of 10 m; each column has one rate: 0, 100, 200, 300 kg/ha."""
    rate = np.tile(np.array([0.0, 100.0, 200.0, 300.0]), (4, 1))
    return rate, transform_for(4), shapely.box(X0, Y0, X0 + 40, Y0 + 40)


def test_user_zones_get_area_weighted_means(columns_field) -> None:
    """Zones split at x = 15 m, half way through column 1: A covers 10 m of column 0 and
    5 m of column 1 -> (10 x 0 + 5 x 100) / 15; B -> (5 x 100 + 10 x 200 + 10 x 300) / 25
    [derived]."""
    rate, t, boundary = columns_field
    uz = gpd.GeoDataFrame({"zone": ["A", "B"]},
                          geometry=[shapely.box(X0, Y0, X0 + 15, Y0 + 40),
                                    shapely.box(X0 + 15, Y0, X0 + 40, Y0 + 40)], crs=CRS)
    z = quiet_zones(rate, transform=t, boundary=boundary, user_zones=uz,
                    settings=ZoneSettings(method="user_zones")).zones
    assert z["label"].tolist() == ["A", "B"]
    assert z["rate_raw_kg_ha"].tolist() == pytest.approx([500 / 15, 5500 / 25])
    assert z["area_ha"].tolist() == pytest.approx([0.06, 0.10])
    assert_tiles(z, boundary)
    # a percentile statistic: p100 is the highest cell under the zone, p0 the lowest
    for stat, expected in (("p100", [100.0, 300.0]), ("p0", [0.0, 100.0])):
        z = quiet_zones(rate, transform=t, boundary=boundary, user_zones=uz,
                        settings=ZoneSettings(method="user_zones", statistic=stat)).zones
        assert z["rate_raw_kg_ha"].tolist() == expected


def test_user_zones_in_another_crs_are_reprojected(columns_field) -> None:
    rate, t, boundary = columns_field
    uz = gpd.GeoDataFrame({"zone": ["A", "B"]},
                          geometry=[shapely.box(X0, Y0, X0 + 20, Y0 + 40),
                                    shapely.box(X0 + 20, Y0, X0 + 40, Y0 + 40)], crs=CRS)
    res = quiet_zones(rate, transform=t, boundary=boundary, user_zones=uz.to_crs("EPSG:4326"),
                      settings=ZoneSettings(method="user_zones"))
    assert res.zones["rate_raw_kg_ha"].tolist() == pytest.approx([50.0, 250.0], rel=1e-6)
    assert any("reprojected" in n for n in res.notes)


def test_user_zones_with_a_gap_get_a_remainder_zone(columns_field) -> None:
    rate, t, boundary = columns_field
    uz = gpd.GeoDataFrame({"zone": ["A"]}, geometry=[shapely.box(X0, Y0, X0 + 20, Y0 + 40)],
                          crs=CRS)
    with pytest.warns(DataWarning, match="remainder"):
        z = make_zones(rate, transform=t, crs=CRS, paddock="Home", product="gypsum",
                       boundary=boundary, user_zones=uz,
                       settings=ZoneSettings(method="user_zones", min_zone_area_ha=0.01)).zones
    assert z["kind"].tolist() == ["rate", "remainder"]
    assert z["rate_raw_kg_ha"].tolist() == pytest.approx([50.0, 250.0])
    assert_tiles(z, boundary)


def test_small_gap_between_user_zones_merges_without_remainder(columns_field) -> None:
    rate, t, boundary = columns_field
    uz = gpd.GeoDataFrame({"zone": ["A", "B"]},
                          geometry=[shapely.box(X0, Y0, X0 + 19.5, Y0 + 40),
                                    shapely.box(X0 + 20, Y0, X0 + 40, Y0 + 40)], crs=CRS)
    res = quiet_zones(rate, transform=t, boundary=boundary, user_zones=uz,
                      settings=ZoneSettings(method="user_zones", min_zone_area_ha=0.01))
    assert res.zones["kind"].tolist() == ["rate", "rate"]
    assert_tiles(res.zones, boundary)


def test_overlapping_user_zones_are_refused_naming_them(columns_field) -> None:
    rate, t, boundary = columns_field
    uz = gpd.GeoDataFrame({"zone": ["north", "south"]},
                          geometry=[shapely.box(X0, Y0, X0 + 30, Y0 + 40),
                                    shapely.box(X0 + 10, Y0, X0 + 40, Y0 + 40)], crs=CRS)
    with pytest.raises(InputError) as e:
        make_zones(rate, transform=t, crs=CRS, paddock="Home", product="gypsum",
                   boundary=boundary, user_zones=uz, settings=ZoneSettings(method="user_zones"))
    assert "'north' and 'south'" in str(e.value) and e.value.fix


def test_user_zones_method_needs_zones(columns_field) -> None:
    rate, t, boundary = columns_field
    with pytest.raises(SettingsError) as e:
        make_zones(rate, transform=t, crs=CRS, paddock="Home", product="gypsum",
                   boundary=boundary, settings=ZoneSettings(method="user_zones"))
    assert e.value.key == "method"


def test_user_zones_without_crs_are_refused(columns_field) -> None:
    rate, t, boundary = columns_field
    uz = gpd.GeoDataFrame({"zone": ["A"]}, geometry=[boundary])
    with pytest.raises(CRSError):
        make_zones(rate, transform=t, crs=CRS, paddock="Home", product="gypsum",
                   boundary=boundary, user_zones=uz, settings=ZoneSettings(method="user_zones"))


# --------------------------------------------------------------------------- spreader grid


def test_spreader_grid_north_on_an_aligned_paddock() -> None:
    """A 120 m x 80 m paddock, 20 m wide x 40 m long grid along north: 6 x 2 = 12 zones of
    0.08 ha [derived]."""
    rate = np.ones((8, 12)) * 250.0
    t = transform_for(8)
    boundary = shapely.box(X0, Y0, X0 + 120, Y0 + 80)
    z = quiet_zones(rate, transform=t, boundary=boundary,
                    settings=ZoneSettings(method="spreader_grid", working_width_m=20,
                                          grid_length_m=40, travel_direction_deg=0)).zones
    assert len(z) == 12
    assert z["area_ha"].tolist() == pytest.approx([0.08] * 12)
    assert (z["rate_raw_kg_ha"] == 250.0).all()
    assert_tiles(z, boundary)


@pytest.mark.parametrize("bearing", [30.0, 115.0])
def test_spreader_grid_follows_the_travel_direction(field, bearing: float) -> None:
    t, boundary = field["transform"], field["boundary"]
    z = quiet_zones(field["rate"], transform=t, boundary=boundary,
                    settings=ZoneSettings(method="spreader_grid", working_width_m=20,
                                          grid_length_m=40, travel_direction_deg=bearing,
                                          min_zone_area_ha=0.02)).zones
    assert_tiles(z, boundary)
    full = z[np.isclose(z.geometry.area, 800.0)]  # whole 20 m x 40 m cells
    assert len(full) > 10
    for g in full.geometry:
        ring = np.asarray(g.exterior.coords)
        for (xa, ya), (xb, yb) in zip(ring[:-1], ring[1:], strict=True):
            if math.isclose(math.hypot(xb - xa, yb - ya), 40.0, rel_tol=1e-9):
                along = math.degrees(math.atan2(xb - xa, yb - ya)) % 180.0
                assert along == pytest.approx(bearing % 180.0, abs=1e-6)
    # clipped edge pieces below half a cell (400 m2) and 0.02 ha merged into neighbours
    assert (z.geometry.area >= 200.0 - 1e-6).all()


# --------------------------------------------------------------------------- spreader limits


def test_limit_zone_rate_rules() -> None:
    # common practice: below the spreader's minimum nothing is spread
    z = limit_zone_rate(180.0, spreader=SpreaderSettings(min_rate=250))
    assert (z.rate_kg_ha, z.passes, z.per_pass_kg_ha, z.schedule) == (0.0, 0, 0.0, "")
    # rounded to the nearest 50 kg/ha step: 1234 -> 1250 [derived]
    z = limit_zone_rate(1234.0, spreader=SpreaderSettings(rate_step=50))
    assert (z.rate_kg_ha, z.passes, z.schedule) == (1250.0, 1, "")
    # rounding below the minimum goes up to the first step at or above it
    assert limit_zone_rate(260.0, spreader=SpreaderSettings(min_rate=255, rate_step=100)
                           ).rate_kg_ha == 300.0
    # 2500 kg/ha at most 1000 per pass: 3 equal passes [derived: ceil(2500 / 1000)]
    z = limit_zone_rate(2500.0, spreader=SpreaderSettings(max_per_pass=1000))
    assert (z.rate_kg_ha, z.passes) == (2500.0, 3)
    assert z.per_pass_kg_ha == pytest.approx(2500 / 3)
    assert z.schedule == "3 passes of 833 kg/ha"
    z = limit_zone_rate(2000.0, spreader=SpreaderSettings(max_per_pass=1000))
    assert (z.rate_kg_ha, z.passes, z.per_pass_kg_ha) == (2000.0, 2, 1000.0)
    # no spreader: the raw rate in one pass; not a number or 0: nothing
    assert limit_zone_rate(1234.5).rate_kg_ha == 1234.5
    assert limit_zone_rate(float("nan")).passes == 0 and limit_zone_rate(0.0).passes == 0


def test_limit_zone_rate_rounds_each_pass_by_the_spreader_mode() -> None:
    """2500 kg/ha in passes of at most 1000: 3 passes of 833.3, each rounded to the 100 kg/ha
    step: nearest 800 (2400 in all), up 900 (2700), down 800 (2400) [derived]."""
    for mode, per in (("nearest", 800.0), ("up", 900.0), ("down", 800.0)):
        sp = SpreaderSettings(max_per_pass=1000, rate_step=100, rounding=mode)
        z = limit_zone_rate(2500.0, spreader=sp)
        assert (z.passes, z.per_pass_kg_ha, z.rate_kg_ha) == (3, per, 3 * per), mode


def test_limit_zone_rate_schedule_in_seasons_and_the_spreader_unit() -> None:
    """4 t/ha at most 2.5 t/ha a year: 2 seasons of 2.0 t/ha [derived: ceil(4 / 2.5) = 2]."""
    sp = SpreaderSettings(unit="t/ha", max_per_pass=2.5, rate_step=0.25, split_into="seasons")
    z = limit_zone_rate(4000.0, spreader=sp)
    assert (z.passes, z.per_pass_kg_ha, z.rate_kg_ha) == (2, 2000.0, 4000.0)
    assert z.schedule == "2 seasons of 2.0 t/ha"
    assert limit_zone_rate(2000.0, spreader=sp).schedule == ""  # one season


@st.composite
def spreaders(draw) -> SpreaderSettings:
    step = draw(st.sampled_from([0.0, 25.0, 50.0, 100.0]))
    per_pass = draw(st.sampled_from([0.0, 500.0, 1500.0]))
    minimum = draw(st.sampled_from([0.0, 100.0, 250.0]))
    rounding = draw(st.sampled_from(["nearest", "up", "down"]))
    split = draw(st.sampled_from(["passes", "seasons"]))
    return SpreaderSettings(min_rate=minimum, max_per_pass=per_pass, rate_step=step,
                            rounding=rounding, split_into=split)


@given(raw=st.floats(0, 20000, allow_nan=False), sp=spreaders())
def test_limit_zone_rate_is_the_spreaders_rule(raw, sp) -> None:
    """The zone rate is what spreader.spreader_passes says the machine puts out, and its
    properties hold: equal passes within the machine's range, on the rate step."""
    z = limit_zone_rate(raw, spreader=sp)
    n, per = spreader_passes(raw, sp)
    assert (z.passes, z.per_pass_kg_ha) == (n, per if n else 0.0)
    assert z.rate_kg_ha == pytest.approx(z.passes * z.per_pass_kg_ha, abs=1e-9)
    if raw < sp.min_rate or raw == 0:
        assert (z.rate_kg_ha, z.passes) == (0.0, 0)
        return
    if z.passes == 0:  # rounded to 0 on the rate step (no minimum to hold it up)
        assert sp.min_rate == 0 and raw < sp.rate_step and z.rate_kg_ha == 0.0
        return
    assert z.per_pass_kg_ha >= sp.min_rate - 1e-9
    if sp.max_per_pass:
        assert z.per_pass_kg_ha <= sp.max_per_pass + 1e-9
        assert z.passes == max(1, math.ceil(raw / sp.max_per_pass - 1e-9))
    else:
        assert z.passes == 1
    if sp.rate_step:
        q = z.per_pass_kg_ha / sp.rate_step
        assert q == pytest.approx(round(q))
    assert (z.schedule != "") == (z.passes > 1)
    if z.passes > 1:
        assert z.schedule.startswith(f"{z.passes} {sp.split_into} of ")


def test_make_zones_applies_limits_and_warns(columns_field) -> None:
    """A: 500 kg/ha, below the 600 minimum: 0. B: 2500 kg/ha, at most 1000 a pass: 3 passes
    of 833.3, rounded to the 100 kg/ha step: 800 each, 2400 in all [derived]."""
    rate, t, boundary = columns_field
    uz = gpd.GeoDataFrame({"zone": ["A", "B"]},
                          geometry=[shapely.box(X0, Y0, X0 + 20, Y0 + 40),
                                    shapely.box(X0 + 20, Y0, X0 + 40, Y0 + 40)], crs=CRS)
    rate = rate * 10  # A: 500 kg/ha, B: 2500 kg/ha
    with pytest.warns(RateWarning) as record:
        z = make_zones(rate, transform=t, crs=CRS, paddock="Home", product="gypsum",
                       boundary=boundary, user_zones=uz,
                       settings=ZoneSettings(method="user_zones"),
                       spreader=SpreaderSettings(min_rate=600, max_per_pass=1000,
                                                 rate_step=100)).zones
    assert z["rate_raw_kg_ha"].tolist() == pytest.approx([500.0, 2500.0])
    assert z["rate_kg_ha"].tolist() == [0.0, 2400.0]
    assert z["passes"].tolist() == [0, 3]
    assert z["per_pass_kg_ha"].tolist() == [0.0, 800.0]
    assert z["schedule"].tolist() == ["", "3 passes of 800 kg/ha"]
    messages = " ".join(str(w.message) for w in record)
    assert "minimum rate of 600 kg/ha" in messages
    assert "more than 1000 kg/ha per pass: split into equal passes" in messages


def test_make_zones_takes_rounding_and_seasons_from_the_spreader(columns_field) -> None:
    """Settings in t/ha: B needs 2.5 t/ha, at most 1.0 t/ha a season: 3 seasons of 0.833,
    rounded up to the 0.1 t/ha step: 0.9 t/ha, 2.7 t/ha in all [derived]."""
    rate, t, boundary = columns_field
    uz = gpd.GeoDataFrame({"zone": ["A", "B"]},
                          geometry=[shapely.box(X0, Y0, X0 + 20, Y0 + 40),
                                    shapely.box(X0 + 20, Y0, X0 + 40, Y0 + 40)], crs=CRS)
    sp = SpreaderSettings(unit="t/ha", min_rate=0.6, max_per_pass=1.0, rate_step=0.1,
                          rounding="up", split_into="seasons")
    with pytest.warns(RateWarning, match="split into equal seasons"):
        z = make_zones(rate * 10, transform=t, crs=CRS, paddock="Home", product="lime",
                       boundary=boundary, user_zones=uz,
                       settings=ZoneSettings(method="user_zones"), spreader=sp).zones
    b = z[z["label"] == "B"].iloc[0]
    assert b["passes"] == 3
    assert b["per_pass_kg_ha"] == pytest.approx(900.0)
    assert b["rate_kg_ha"] == pytest.approx(2700.0)
    assert b["schedule"] == "3 seasons of 0.9 t/ha"
    assert list(z.columns) == list(ZONE_COLUMNS)


# --------------------------------------------------------------------------- bad input


def test_bad_inputs(columns_field) -> None:
    rate, t, boundary = columns_field
    with pytest.raises(CRSError):
        make_zones(rate, transform=t, crs="EPSG:4326", paddock="Home", product="gypsum",
                   boundary=boundary, settings=ZoneSettings())
    with pytest.raises(InputError, match="negative"):
        make_zones(rate - 50, transform=t, crs=CRS, paddock="Home", product="gypsum",
                   boundary=boundary, settings=ZoneSettings())
