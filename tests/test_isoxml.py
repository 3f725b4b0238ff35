"""ISO 11783-10 task data: TASKDATA.XML and the type 2 grid file, read back independently.

Sources beside the checks:
- Element codes (CTR, FRM, PFD, PLN, LSG, PNT, PDT, TSK, TZN, PDV, GRD, VPN), attribute
  letters and value codes: ISO 11783-10, as implemented by public open-source ISOXML
  libraries (confirmed there); where a check rests on memory only it says "from memory".
- DDI 6 = setpoint mass per area application rate in mg/m2: ISO 11783-11 data dictionary
  (docs/SOURCES.md, "Output formats").
- 1 kg/ha = 100 mg/m2: [derived] (docs/SOURCES.md, "Units and conversions").
- Binary rows start at the south edge, little-endian 32-bit integers: docs/SOURCES.md
  ("binary rows start at the south edge"); int32 little-endian from ISO 11783-10.
Every expected rate below is the fixture's own rate x 100 (derived), never a figure taken
from a run of the code under test.
"""

from __future__ import annotations

import math
import re
import warnings
import xml.etree.ElementTree as ET
from pathlib import Path

import geopandas as gpd
import numpy as np
import pyproj
import pytest
import shapely
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import geosoil.isoxml as isoxml
from geosoil.errors import CRSError, DataWarning, OutputExistsError, RateWarning
from geosoil.isoxml import (
    GRID_FILE_NAME,
    grid_bytes,
    grid_from_zones,
    taskdata_xml,
    write_taskdata,
)

UTM55S = "EPSG:32755"
X0, Y0 = 500_000.0, 6_160_000.0


def tm_crs(lat: float, lon: float) -> pyproj.CRS:
    """A transverse Mercator CRS (metres) centred at lat, lon."""
    return pyproj.CRS.from_proj4(
        f"+proj=tmerc +lat_0={lat} +lon_0={lon} +k=1 +x_0=0 +y_0=0 +datum=WGS84 +units=m"
    )


def band_zones(
    x0: float, y0: float, w: float, h: float, rates: list[float], *, crs: object,
    exclusion: shapely.Polygon | None = None, exclusion_rate: float = 0.0,
    paddock: str = "North Flat", product: str = "gypsum",
) -> tuple[gpd.GeoDataFrame, shapely.Polygon]:
    """A w x h paddock cut into len(rates) equal bands, south to north, less an exclusion."""
    boundary = shapely.box(x0, y0, x0 + w, y0 + h)
    bh = h / len(rates)
    geoms, kinds, rr = [], [], []
    for i, r in enumerate(rates):
        band = shapely.box(x0, y0 + i * bh, x0 + w, y0 + (i + 1) * bh)
        if exclusion is not None:
            band = band.difference(exclusion)
        geoms.append(band)
        kinds.append("rate")
        rr.append(r)
    if exclusion is not None:
        geoms.append(exclusion)
        kinds.append("exclusion")
        rr.append(exclusion_rate)
    n = len(geoms)
    zones = gpd.GeoDataFrame(
        {"paddock": [paddock] * n, "product": [product] * n, "zone": list(range(1, n + 1)),
         "kind": kinds, "rate_kg_ha": rr},
        geometry=geoms, crs=crs,
    )
    return zones, boundary


def read_back(paths: list[Path]) -> tuple[ET.Element, dict[str, float], np.ndarray]:
    """Parse the XML and read the grid file as the standard describes it (raw: row 0 south)."""
    xml_path, bin_path = paths
    root = ET.parse(xml_path).getroot()
    grd = root.find("TSK/GRD")
    assert grd is not None
    g = {"A": float(grd.get("A")), "B": float(grd.get("B")), "C": float(grd.get("C")),
         "D": float(grd.get("D")), "E": int(grd.get("E")), "F": int(grd.get("F"))}
    data = bin_path.read_bytes()
    raw = np.frombuffer(data, dtype="<i4").reshape(g["F"], g["E"])
    return root, g, raw


def cell_centres(g: dict[str, float], crs: object) -> tuple[np.ndarray, np.ndarray]:
    """Cell centres (x, y) in ``crs`` of the raw grid (row 0 south), from the GRD attributes."""
    lat = g["A"] + (np.arange(g["F"]) + 0.5) * g["C"]
    lon = g["B"] + (np.arange(g["E"]) + 0.5) * g["D"]
    lon_g, lat_g = np.meshgrid(lon, lat)
    tr = pyproj.Transformer.from_crs("EPSG:4326", crs, always_xy=True)
    x, y = tr.transform(lon_g, lat_g)
    return np.asarray(x), np.asarray(y)


def write(tmp_path: Path, zones: gpd.GeoDataFrame, boundary: shapely.Geometry, **kw: object):
    kw.setdefault("product_label", "Gypsum")
    kw.setdefault("farm", "Hill Farm")
    return write_taskdata(tmp_path, zones=zones, boundary=boundary, crs=zones.crs, **kw)


# --------------------------------------------------------------------------- the XML


def test_xml_has_the_required_elements_and_attributes(tmp_path: Path) -> None:
    zones, boundary = band_zones(X0, Y0, 300, 200, [1000.0, 2500.0], crs=UTM55S)
    paths = write(tmp_path, zones, boundary)
    assert [p.relative_to(tmp_path).as_posix() for p in paths] == [
        "TASKDATA/TASKDATA.XML", "TASKDATA/GRD00001.bin"]
    text = paths[0].read_text(encoding="utf-8")
    assert text.startswith('<?xml version="1.0" encoding="UTF-8"?>')
    root = ET.fromstring(text)
    # ISO 11783-10: root element and its attributes; version 4; 1 = from the FMIS
    assert root.tag == "ISO11783_TaskData"
    assert root.get("VersionMajor") == "4"
    assert root.get("VersionMinor") is not None
    assert root.get("ManagementSoftwareManufacturer") == "geosoil"
    assert root.get("ManagementSoftwareVersion")
    assert root.get("DataTransferOrigin") == "1"
    for tag in ("CTR", "FRM", "PFD", "PDT", "TSK", "VPN"):
        assert len(root.findall(tag)) == 1, tag
    assert root.find("FRM").get("B") == "Hill Farm"
    assert root.find("PDT").get("B") == "Gypsum"
    pfd = root.find("PFD")
    assert pfd.get("C") == "North Flat"
    # PLN A=1 partfield boundary, LSG A=1 exterior ring, PNT with C (north) and D (east)
    plns = pfd.findall("PLN")
    assert [p.get("A") for p in plns] == ["1"]
    assert [ls.get("A") for ls in plns[0].findall("LSG")] == ["1"]
    pnts = plns[0].findall("LSG/PNT")
    assert len(pnts) == 5  # a rectangle, closed (from memory: rings written closed)
    assert all(re.fullmatch(r"-?\d+\.\d{9}", p.get(k)) for p in pnts for k in "CD")
    # TSK G=1: planned
    tsk = root.find("TSK")
    assert tsk.get("G") == "1"
    # TZN with PDV: DDI 6 written as 4 hex digits, referencing the product
    pdt_id = root.find("PDT").get("A")
    tzns = tsk.findall("TZN")
    assert tzns
    for tzn in tzns:
        pdvs = tzn.findall("PDV")
        assert [p.get("A") for p in pdvs] == ["0006"]
        assert all(p.get("C") == pdt_id for p in pdvs)
        assert all(int(p.get("B")) == 0 for p in pdvs)
    # the out-of-field and position-lost zones spread nothing
    codes = {int(t.get("A")): t for t in tzns}
    for attr in ("I", "J"):
        assert int(codes[int(tsk.get(attr))].find("PDV").get("B")) == 0
    # GRD: type 2, file name pattern GRD[0-9]{5}, the zone code it refers to exists
    grd = tsk.find("GRD")
    assert grd.get("I") == "2"
    assert re.fullmatch(r"GRD[0-9]{5}", grd.get("G")) and grd.get("G") == GRID_FILE_NAME
    assert int(grd.get("J")) in codes
    assert -90 <= float(grd.get("A")) <= 90 and -180 <= float(grd.get("B")) <= 180
    assert 0 < float(grd.get("C")) <= 1 and 0 < float(grd.get("D")) <= 1
    assert int(grd.get("E")) > 0 and int(grd.get("F")) > 0
    # VPN: shows mg/m2 as kg/ha: (value + offset) x scale (from memory), 1 kg/ha = 100 mg/m2
    vpn = root.find("VPN")
    assert (25_000 + int(vpn.get("B"))) * float(vpn.get("C")) == pytest.approx(250.0)
    assert vpn.get("E") == "kg/ha"


def test_ids_follow_the_standard_pattern_and_every_reference_resolves(tmp_path: Path) -> None:
    zones, boundary = band_zones(X0, Y0, 200, 200, [500.0], crs=UTM55S)
    root, _, _ = read_back(write(tmp_path, zones, boundary))
    # ISO 11783-10 id pattern: (XXX|XXX-)([0-9])+ with XXX the element's code
    ids = {}
    for el in root.iter():
        if el.tag in ("CTR", "FRM", "PFD", "PDT", "TSK", "VPN"):
            assert re.fullmatch(rf"({el.tag}|{el.tag}-)[0-9]+", el.get("A")), el.get("A")
            ids[el.get("A")] = el.tag
    refs = [("FRM", "I", "CTR"), ("PFD", "E", "CTR"), ("PFD", "F", "FRM"),
            ("TSK", "C", "CTR"), ("TSK", "D", "FRM"), ("TSK", "E", "PFD"),
            ("TSK/TZN/PDV", "C", "PDT"), ("TSK/TZN/PDV", "E", "VPN")]
    for path, attr, target in refs:
        for el in root.findall(path):
            assert ids.get(el.get(attr)) == target, (path, attr)


def test_grid_file_is_columns_x_rows_x_4_bytes(tmp_path: Path) -> None:
    zones, boundary = band_zones(X0, Y0, 430, 170, [700.0, 0.0], crs=UTM55S)
    paths = write(tmp_path, zones, boundary, cell_size_m=7.5)
    grd = ET.parse(paths[0]).getroot().find("TSK/GRD")
    size = paths[1].stat().st_size
    # type 2 grid: one 4-byte integer per cell; H = the file's length
    assert int(grd.get("E")) * int(grd.get("F")) * 4 == size
    assert int(grd.get("H")) == size


def test_grid_covers_the_paddock_with_cells_of_the_asked_size(tmp_path: Path) -> None:
    zones, boundary = band_zones(X0, Y0, 320, 240, [100.0], crs=UTM55S)
    _, g, _ = read_back(write(tmp_path, zones, boundary, cell_size_m=10.0))
    west, south, east, north = pyproj.Transformer.from_crs(
        UTM55S, "EPSG:4326", always_xy=True).transform_bounds(*boundary.bounds)
    assert g["A"] <= south and g["A"] + g["F"] * g["C"] >= north
    assert g["B"] <= west and g["B"] + g["E"] * g["D"] >= east
    # [derived] a cell is cell_size_m high and wide at the paddock's centre (WGS 84 ellipsoid)
    geod = pyproj.Geod(ellps="WGS84")
    lat0, lon0 = (south + north) / 2, (west + east) / 2
    assert geod.inv(lon0, lat0, lon0, lat0 + g["C"])[2] == pytest.approx(10.0, rel=1e-6)
    assert geod.inv(lon0, lat0, lon0 + g["D"], lat0)[2] == pytest.approx(10.0, rel=1e-4)


# --------------------------------------------------------------------------- the grid values


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    lat=st.floats(-60, 60), lon=st.floats(-179, 179),
    w=st.floats(150, 600), h=st.floats(120, 450),
    rates=st.lists(st.floats(0, 20_000, allow_nan=False), min_size=1, max_size=4),
    with_exclusion=st.booleans(), exclusion_rate=st.sampled_from([0.0, math.nan]),
    cell=st.floats(5, 20),
)
def test_every_cell_holds_its_zone_rate_in_mg_m2(
    tmp_path_factory: pytest.TempPathFactory, lat: float, lon: float, w: float, h: float,
    rates: list[float], with_exclusion: bool, exclusion_rate: float, cell: float,
) -> None:
    crs = tm_crs(lat, lon)
    x0, y0 = -w / 3, -h / 2
    excl = (shapely.box(x0 + 0.3 * w, y0 + 0.3 * h, x0 + 0.6 * w, y0 + 0.6 * h)
            if with_exclusion else None)
    zones, boundary = band_zones(x0, y0, w, h, rates, crs=crs, exclusion=excl,
                                 exclusion_rate=exclusion_rate)
    _, g, raw = read_back(write(tmp_path_factory.mktemp("t"), zones, boundary, cell_size_m=cell))
    x, y = cell_centres(g, crs)
    # oracle: plain arithmetic on the rectangles (not the library's spatial lookup)
    eps = 1e-3
    near_edge = np.zeros(x.shape, bool)
    for e in (x0, x0 + w):
        near_edge |= np.abs(x - e) < eps
    for k in range(len(rates) + 1):
        near_edge |= np.abs(y - (y0 + k * h / len(rates))) < eps
    outside = (x < x0) | (x > x0 + w) | (y < y0) | (y > y0 + h)
    expected = np.zeros(x.shape, dtype=np.int64)
    band = np.clip(((y - y0) // (h / len(rates))).astype(int), 0, len(rates) - 1)
    mg = np.array([round(r * 100) for r in rates])  # 1 kg/ha = 100 mg/m2 [derived]
    expected[~outside] = mg[band[~outside]]
    if excl is not None:
        ex0, ey0, ex1, ey1 = excl.bounds
        for e in (ex0, ex1):
            near_edge |= (np.abs(x - e) < eps) & (y > ey0 - eps) & (y < ey1 + eps)
        for e in (ey0, ey1):
            near_edge |= (np.abs(y - e) < eps) & (x > ex0 - eps) & (x < ex1 + eps)
        expected[(x > ex0) & (x < ex1) & (y > ey0) & (y < ey1)] = 0
    check = ~near_edge
    np.testing.assert_array_equal(raw[check], expected[check])
    # every band was sampled somewhere
    for k in range(len(rates)):
        assert np.any(check & ~outside & (band == k))


def test_first_row_in_the_file_is_the_southernmost(tmp_path: Path) -> None:
    # docs/SOURCES.md: binary rows start at the south edge
    zones, boundary = band_zones(X0, Y0, 300, 300, [1000.0, 3000.0], crs=UTM55S)
    paths = write(tmp_path, zones, boundary)
    grd = ET.parse(paths[0]).getroot().find("TSK/GRD")
    cols = int(grd.get("E"))
    data = paths[1].read_bytes()
    rows_in_file = [np.frombuffer(data[i:i + 4 * cols], "<i4")
                    for i in range(0, len(data), 4 * cols)]
    filled = [r for r in rows_in_file if r.any()]
    assert set(np.unique(filled[0])) <= {0, 100_000}  # south band: 1000 kg/ha x 100
    assert 100_000 in filled[0]
    assert set(np.unique(filled[-1])) <= {0, 300_000}  # north band
    assert 300_000 in filled[-1]


def test_known_points_read_back_from_a_north_up_image(tmp_path: Path) -> None:
    rates = [250.0, 1200.5, 3750.0]
    zones, boundary = band_zones(X0, Y0, 400, 300, rates, crs=UTM55S)
    _, g, raw = read_back(write(tmp_path, zones, boundary))
    image = np.flipud(raw)  # north-up, as a map is drawn
    to_ll = pyproj.Transformer.from_crs(UTM55S, "EPSG:4326", always_xy=True)
    top = g["A"] + g["F"] * g["C"]
    for k, r in enumerate(rates):
        lon, lat = to_ll.transform(X0 + 200, Y0 + 50 + 100 * k)  # the middle of band k
        row = int((top - lat) // g["C"])
        col = int((lon - g["B"]) // g["D"])
        assert image[row, col] == round(r * 100)  # kg/ha x 100 = mg/m2 [derived]


def test_cells_outside_an_irregular_paddock_and_in_its_holes_are_zero(tmp_path: Path) -> None:
    hole = shapely.box(X0 + 150, Y0 + 60, X0 + 210, Y0 + 120)
    boundary = shapely.Polygon(
        [(X0, Y0), (X0 + 400, Y0 + 30), (X0 + 260, Y0 + 330), (X0 + 20, Y0 + 250)],
        holes=[hole.exterior.coords[::-1]],
    )
    zones = gpd.GeoDataFrame(
        {"paddock": ["Odd"], "product": ["lime"], "zone": [1], "kind": ["rate"],
         "rate_kg_ha": [2000.0]}, geometry=[boundary], crs=UTM55S)
    _, g, raw = read_back(write(tmp_path, zones, boundary, product_label="Lime"))
    x, y = cell_centres(g, UTM55S)
    dist = shapely.distance(boundary.boundary, shapely.points(x, y))
    inside = shapely.contains_xy(boundary, x, y)
    clear = dist > 0.01
    assert np.all(raw[clear & ~inside] == 0)
    assert np.all(raw[clear & inside] == 200_000)  # 2000 kg/ha x 100 [derived]
    assert np.any(clear & ~inside & shapely.contains_xy(hole, x, y))


# --------------------------------------------------------------------------- names and boundary


def test_hostile_names_are_escaped_and_the_xml_still_parses(tmp_path: Path) -> None:
    hostile = "<&\"'>"
    zones, boundary = band_zones(X0, Y0, 200, 100, [800.0], crs=UTM55S, paddock=hostile)
    paths = write(tmp_path, zones, boundary, product_label=f"a{hostile}b", farm=f"]]>{hostile}")
    text = paths[0].read_text(encoding="utf-8")
    assert hostile not in text and "&lt;&amp;" in text
    root = ET.fromstring(text)
    assert root.find("PFD").get("C") == hostile
    assert root.find("PDT").get("B") == f"a{hostile}b"
    assert root.find("FRM").get("B") == f"]]>{hostile}"
    assert root.find("CTR").get("B") == f"]]>{hostile}"


@settings(max_examples=25, deadline=None)
@given(name=st.text(min_size=0, max_size=60))
def test_any_name_gives_xml_that_parses(name: str) -> None:
    g = isoxml.TaskGrid(min_north=-35.0, min_east=148.0, cell_north=1e-4, cell_east=1e-4,
                        values=np.zeros((2, 2), dtype="int32"))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataWarning)
        text = taskdata_xml(g, boundary=shapely.box(148, -35, 148.0002, -34.9998),
                            crs="EPSG:4326", paddock=name, product_label=name, farm=name)
    root = ET.fromstring(text.encode("utf-8"))
    for el, attr in (("PFD", "C"), ("PDT", "B"), ("FRM", "B"), ("TSK", "B")):
        value = root.find(el).get(attr)
        assert 0 < len(value) <= 32  # ISO 11783-10: designators of at most 32 characters


def test_control_characters_and_long_names_are_changed_with_a_warning(tmp_path: Path) -> None:
    zones, boundary = band_zones(X0, Y0, 200, 100, [800.0], crs=UTM55S,
                                 paddock="Bottom\x00 paddock\nby the\ud800 creek and the old dam")
    with pytest.warns(DataWarning) as rec:
        paths = write(tmp_path, zones, boundary)
    messages = " ".join(str(w.message) for w in rec)
    assert "removed" in messages and "32" in messages
    name = ET.parse(paths[0]).getroot().find("PFD").get("C")
    # [derived] NUL and the lone surrogate dropped, the newline made a space, cut to 32
    assert name == "Bottom paddock by the creek and"


def _ring_points(lsg: ET.Element) -> list[tuple[float, float]]:
    return [(float(p.get("D")), float(p.get("C"))) for p in lsg.findall("PNT")]


@pytest.mark.parametrize("crs", [UTM55S, "EPSG:28355"])  # WGS 84 / UTM 55S; GDA94 / MGA 55
def test_boundary_points_round_trip_within_centimetres(tmp_path: Path, crs: str) -> None:
    outer = shapely.Polygon([(X0, Y0), (X0 + 500, Y0 - 40), (X0 + 620, Y0 + 380),
                             (X0 + 90, Y0 + 410)], holes=[[(X0 + 200, Y0 + 100),
                             (X0 + 260, Y0 + 100), (X0 + 230, Y0 + 170)]])
    island = shapely.box(X0 + 700, Y0, X0 + 800, Y0 + 80)
    boundary = shapely.MultiPolygon([outer, island])
    zones = gpd.GeoDataFrame(
        {"paddock": ["Two parts"], "product": ["gypsum"], "zone": [1], "kind": ["rate"],
         "rate_kg_ha": [1000.0]}, geometry=[boundary], crs=crs)
    root, _, _ = read_back(write(tmp_path, zones, boundary))
    back = pyproj.Transformer.from_crs("EPSG:4326", crs, always_xy=True)
    polys = []
    for pln in root.findall("PFD/PLN"):
        assert pln.get("A") == "1"
        rings = pln.findall("LSG")
        assert rings[0].get("A") == "1" and all(r.get("A") == "2" for r in rings[1:])
        ext = [back.transform(*p) for p in _ring_points(rings[0])]
        holes = [[back.transform(*p) for p in _ring_points(r)] for r in rings[1:]]
        polys.append(shapely.Polygon(ext, holes))
    got = shapely.MultiPolygon(polys)
    assert len(polys) == 2 and sum(len(p.interiors) for p in polys) == 1
    assert shapely.hausdorff_distance(got, boundary) < 0.02
    assert shapely.symmetric_difference(got, boundary).area < 1.0
    # PFD D: area in m2 (from memory); the projection's scale changes area by < 0.2 %
    assert int(root.find("PFD").get("D")) == pytest.approx(boundary.area, rel=2e-3)


# --------------------------------------------------------------------------- writing and refusing


def test_writing_leaves_only_the_two_files(tmp_path: Path) -> None:
    zones, boundary = band_zones(X0, Y0, 200, 100, [800.0], crs=UTM55S)
    write(tmp_path, zones, boundary)
    write(tmp_path, zones, boundary)  # again: replaced in place
    assert sorted(p.name for p in (tmp_path / "TASKDATA").iterdir()) == [
        "GRD00001.bin", "TASKDATA.XML"]


def test_a_failed_write_keeps_the_old_xml_and_leaves_no_temporary_file(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    zones, boundary = band_zones(X0, Y0, 200, 100, [800.0], crs=UTM55S)
    paths = write(tmp_path, zones, boundary)
    old = paths[0].read_bytes()
    real = isoxml.atomic_write

    from contextlib import contextmanager

    @contextmanager
    def failing(path, **kw):
        with real(path, **kw) as fh:
            if Path(path).name == "TASKDATA.XML":
                fh.write(b"<half")
                raise OSError("disk full")
            yield fh

    monkeypatch.setattr(isoxml, "atomic_write", failing)
    zones2, boundary2 = band_zones(X0, Y0, 300, 100, [900.0], crs=UTM55S)
    with pytest.raises(OSError, match="disk full"):
        write(tmp_path, zones2, boundary2)
    assert paths[0].read_bytes() == old
    assert sorted(p.name for p in (tmp_path / "TASKDATA").iterdir()) == [
        "GRD00001.bin", "TASKDATA.XML"]


def test_bad_zones_write_nothing(tmp_path: Path) -> None:
    zones, boundary = band_zones(X0, Y0, 200, 100, [800.0, 900.0], crs=UTM55S)
    zones.loc[1, "product"] = "lime"
    with pytest.raises(ValueError, match="one product"):
        write(tmp_path, zones, boundary)
    assert not (tmp_path / "TASKDATA").exists()


def _zones() -> tuple[gpd.GeoDataFrame, shapely.Polygon]:
    return band_zones(X0, Y0, 200, 100, [800.0, 900.0], crs=UTM55S)


@pytest.mark.parametrize("change, error, match", [
    (lambda z: z.drop(columns="kind"), ValueError, "no column 'kind'"),
    (lambda z: z.assign(paddock=["A", "B"]), ValueError, "one paddock"),
    (lambda z: z.assign(rate_kg_ha=[800.0, math.nan]), ValueError, "zone 2 .rate. has rate nan"),
    (lambda z: z.assign(rate_kg_ha=[800.0, -1.0]), ValueError, "0 or more"),
    (lambda z: z.assign(rate_kg_ha=[800.0, 3e7]), ValueError, "check the rate's unit"),
    (lambda z: z.assign(kind=["rate", "buffer"]), ValueError, "kind 'buffer'"),
    (lambda z: z.iloc[0:0], ValueError, "no column|no zones"),
])
def test_bad_zones_are_refused_with_a_message(change, error, match, tmp_path: Path) -> None:
    zones, boundary = _zones()
    with pytest.raises(error, match=match):
        write(tmp_path, change(zones), boundary)


def test_crs_problems_are_refused(tmp_path: Path) -> None:
    zones, boundary = _zones()
    with pytest.raises(CRSError, match="pass crs="):
        write_taskdata(tmp_path, zones=zones, boundary=boundary, crs=None,
                       product_label="Gypsum", farm="F")
    with pytest.raises(CRSError, match="zones are in"):
        write_taskdata(tmp_path, zones=zones, boundary=boundary, crs="EPSG:32756",
                       product_label="Gypsum", farm="F")


@pytest.mark.parametrize("cell", [0.0, -5.0, math.nan, math.inf])
def test_bad_cell_sizes_are_refused(tmp_path: Path, cell: float) -> None:
    zones, boundary = _zones()
    with pytest.raises(ValueError, match="cell_size_m"):
        write(tmp_path, zones, boundary, cell_size_m=cell)


def test_too_many_cells_are_refused(monkeypatch: pytest.MonkeyPatch) -> None:
    zones, boundary = _zones()
    monkeypatch.setattr(isoxml, "MAX_CELLS", 50)
    with pytest.raises(ValueError, match="larger cell size"):
        grid_from_zones(zones, boundary=boundary, crs=UTM55S)


def test_a_file_named_taskdata_is_not_overwritten(tmp_path: Path) -> None:
    zones, boundary = _zones()
    (tmp_path / "TASKDATA").write_text("mine")
    with pytest.raises(OutputExistsError, match="not a folder"):
        write(tmp_path, zones, boundary)
    assert (tmp_path / "TASKDATA").read_text() == "mine"


def test_rates_needing_several_passes_are_flagged(tmp_path: Path) -> None:
    zones, boundary = _zones()
    zones["passes"] = [1, 3]
    with pytest.warns(RateWarning, match="zone 2.*3 passes"):
        grid_from_zones(zones, boundary=boundary, crs=UTM55S)


def test_grid_bytes_are_little_endian_int32_in_row_order() -> None:
    values = np.array([[1, -2], [70_000, 2**31 - 1]], dtype="int32")
    g = isoxml.TaskGrid(min_north=0.0, min_east=0.0, cell_north=1e-4, cell_east=1e-4,
                        values=values)
    data = grid_bytes(g)
    # ISO 11783-10: 32-bit signed integers, least significant byte first
    assert data[:4] == b"\x01\x00\x00\x00" and data[4:8] == b"\xfe\xff\xff\xff"
    assert data[-4:] == b"\xff\xff\xff\x7f"
    assert np.frombuffer(data, "<i4").tolist() == [1, -2, 70_000, 2**31 - 1]


def test_zones_reaching_past_the_boundary_spread_nothing_outside_it(tmp_path: Path) -> None:
    boundary = shapely.box(X0, Y0, X0 + 300, Y0 + 200)
    zones = gpd.GeoDataFrame(
        {"paddock": ["Wide"], "product": ["gypsum"], "zone": [1], "kind": ["rate"],
         "rate_kg_ha": [1500.0]}, geometry=[boundary.buffer(40, join_style="mitre")], crs=UTM55S)
    _, g, raw = read_back(write(tmp_path, zones, boundary))
    x, y = cell_centres(g, UTM55S)
    clear = shapely.distance(boundary.boundary, shapely.points(x, y)) > 0.01
    inside = shapely.contains_xy(boundary, x, y)
    assert np.any(clear & ~inside & shapely.contains_xy(zones.geometry.iloc[0], x, y))
    assert np.all(raw[clear & ~inside] == 0)
    assert np.all(raw[clear & inside] == 150_000)  # 1500 kg/ha x 100 [derived]


def test_designators_are_cut_to_32_characters_and_kept_distinct() -> None:
    # ISO 11783-10 designators hold at most 32 characters
    names = ["Lower creek flat below the shearing shed", "Lower creek flat below the shearing "
             "shed 2", "Home", "Home"]
    short, changed = isoxml.designators(names)
    assert all(len(n) <= 32 for n in short)
    assert len(set(short[:3])) == 3 and short[3] == short[2] == "Home"
    assert [o for o, _ in changed] == names[:2]


def test_a_task_set_refuses_two_tasks_of_one_name() -> None:
    g = isoxml.TaskGrid(min_north=-35.0, min_east=148.0, cell_north=1e-4, cell_east=1e-4,
                        values=np.zeros((2, 2), dtype="int32"))
    pf = isoxml.Partfield(name="North", boundary=shapely.box(148, -35, 148.0002, -34.9998),
                          crs="EPSG:4326")
    t = isoxml.Task(name="lime North", partfield=0, product="lime", grid=g)
    with pytest.raises(ValueError, match="lime North"):
        isoxml.taskset_xml([pf], [t, t], farm="Demo")
    root = ET.fromstring(isoxml.taskset_xml(
        [pf], [t, isoxml.Task(name="lime North 2", partfield=0, product="lime", grid=g)],
        farm="Demo"))
    # one product, two tasks, each with its own grid file
    assert len(root.findall("PDT")) == 1
    assert [e.get("G") for e in root.findall("TSK/GRD")] == ["GRD00001", "GRD00002"]
