"""Tests for geosoil.prescriptions: one pass per machine file, the machine CRS, the zone raster."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pyproj
import pytest
import rasterio.transform
import shapely
from hypothesis import given
from hypothesis import strategies as st

from geosoil.prescriptions import (
    MACHINE_CRS_CHOICES,
    machine_crs,
    n_passes,
    pass_frames,
    pass_suffix,
    zone_raster,
)
from geosoil.spreader import SpreaderSettings
from geosoil.zones import limit_zone_rate

CRS = "EPSG:32755"


def _zones(raw: list[float], sp: SpreaderSettings) -> gpd.GeoDataFrame:
    """Zones side by side, 100 m wide, each rate limited by the spreader's own rules."""
    limited = [limit_zone_rate(r, spreader=sp) for r in raw]
    geoms = [shapely.box(500000 + 100 * i, 6000000, 500100 + 100 * i, 6000100)
             for i in range(len(raw))]
    return gpd.GeoDataFrame(
        {"paddock": "Home", "product": "lime", "zone": range(1, len(raw) + 1), "kind": "rate",
         "label": "", "rate_kg_ha": [z.rate_kg_ha for z in limited],
         "rate_raw_kg_ha": raw, "passes": [z.passes for z in limited],
         "per_pass_kg_ha": [z.per_pass_kg_ha for z in limited],
         "schedule": [z.schedule for z in limited], "area_ha": 1.0, "n_cells": 100},
        geometry=geoms, crs=CRS,
    )


@given(raw=st.lists(st.floats(0.0, 20000.0), min_size=1, max_size=6),
       max_pass=st.sampled_from([1000.0, 2500.0, 4000.0]),
       step=st.sampled_from([0.0, 50.0, 250.0]))
def test_passes_add_up_to_the_prescription_and_none_exceeds_the_limit(
    raw: list[float], max_pass: float, step: float
) -> None:
    sp = SpreaderSettings(min_rate=0.0, max_per_pass=max_pass, rate_step=step)
    zones = _zones(raw, sp)
    frames = list(pass_frames(zones))
    assert [k for k, _ in frames] == list(range(1, n_passes(zones) + 1))
    total = sum(f["rate_kg_ha"].to_numpy() for _, f in frames)
    np.testing.assert_allclose(total, zones["rate_kg_ha"].to_numpy(), rtol=0, atol=1e-6)
    for _, f in frames:
        assert (f["rate_kg_ha"] <= max_pass + 1e-9).all()
        # nothing in a one-pass file can be read as more than one pass
        assert not {"rate_raw_kg_ha", "per_pass_kg_ha", "passes", "schedule"} & set(f.columns)


def test_a_one_pass_product_has_one_frame_with_its_rates() -> None:
    sp = SpreaderSettings(max_per_pass=4000.0)
    zones = _zones([1200.0, 0.0, 3000.0], sp)
    [(k, f)] = list(pass_frames(zones))
    assert k == 1 and f["rate_kg_ha"].tolist() == [1200.0, 0.0, 3000.0]
    assert set(f["of_passes"]) == {1}


def test_pass_suffix_names_passes_or_seasons() -> None:
    assert [pass_suffix(k, 3) for k in (1, 2, 3)] == ["_pass1", "_pass2", "_pass3"]
    assert pass_suffix(2, 2, split_into="seasons") == "_season2"
    assert pass_suffix(1, 1) == ""


def test_machine_crs_choices() -> None:
    assert MACHINE_CRS_CHOICES == ("wgs84", "working", "boundaries")
    assert machine_crs("wgs84", working=CRS).equals(pyproj.CRS("EPSG:4326"))
    assert machine_crs("working", working=CRS).to_epsg() == 32755
    assert machine_crs("boundaries", working=CRS, boundaries="EPSG:28355").to_epsg() == 28355
    assert machine_crs("boundaries", working=CRS, boundaries=None).to_epsg() == 32755
    with pytest.raises(ValueError, match="wgs84"):
        machine_crs("utm", working=CRS)


def test_zone_raster_in_lonlat_holds_each_zones_rate_at_its_centre() -> None:
    """Cells of about 10 m in degrees over the zones; each zone's interior holds its rate
    (checked at points transformed by pyproj, an outside library)."""
    sp = SpreaderSettings(max_per_pass=4000.0)
    zones = _zones([1200.0, 2500.0, 3000.0], sp)
    zones.loc[1, "kind"] = "exclusion"
    arr, transform = zone_raster(zones, crs="EPSG:4326", cell_size_m=10.0)
    to_ll = pyproj.Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)
    for geom, rate, kind in zip(zones.geometry, zones["rate_kg_ha"], zones["kind"], strict=True):
        c = geom.centroid
        lon, lat = to_ll.transform(c.x, c.y)
        row, col = rasterio.transform.rowcol(transform, lon, lat)
        value = arr[row, col]
        if kind == "exclusion":
            assert np.isnan(value)
        else:
            assert value == rate
    # about 10 m: 300 m of zones across is about 30 cells
    assert 28 <= arr.shape[1] <= 33 and 9 <= arr.shape[0] <= 12
