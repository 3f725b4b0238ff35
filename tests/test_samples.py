"""Tests for geosoil.samples: reading lab files and every kind of bad input.

Every fixture is a tiny file written into tmp_path by the test itself. The soil values in
them are invented; checks against the outside name their source.
"""

from __future__ import annotations

import hashlib
import warnings
from pathlib import Path

import geopandas as gpd
import numpy as np
import openpyxl
import pandas as pd
import pyproj
import pytest
from shapely.geometry import Point, Polygon, box

from geosoil.chemistry import derive
from geosoil.errors import CRSError, DataWarning, InputError, SettingsError
from geosoil.samples import SampleSettings, prepare_samples, read_samples
from geosoil.settings import from_mapping

HEADER = (
    "Sample ID,Longitude,Latitude,Exch Ca (meq/100g),Exch Mg (meq/100g),Exch K (meq/100g),"
    "Exch Na (meq/100g),Exch Al (meq/100g),pH (water),Notes"
)
ROWS = [
    "A1,147.0010,-35.0010,6.0,2.0,0.5,0.4,0.1,5.9,north end",
    "A2,147.0020,-35.0020,5.0,2.5,0.4,0.6,0.2,5.6,",
    "A3,147.0030,-35.0030,7.0,1.5,0.6,0.2,0.0,6.2,wet",
    "A4,147.0040,-35.0040,4.0,3.0,0.3,1.2,0.3,5.4,",
]
PADDOCKS = gpd.GeoDataFrame(
    {"paddock": ["Home"]}, geometry=[box(146.99, -35.01, 147.01, -34.99)], crs=4326
)
UTM55 = pyproj.CRS.from_epsg(32755)


def write(tmp_path: Path, text: str, name: str = "lab.csv", encoding: str = "utf-8") -> Path:
    path = tmp_path / name
    path.write_bytes(text.encode(encoding))
    return path


def lab(tmp_path: Path, rows=None, header=HEADER, name="lab.csv") -> Path:
    return write(tmp_path, "\n".join([header, *(ROWS if rows is None else rows)]) + "\n", name)


def read(path: Path, **settings):
    return read_samples(SampleSettings(file=path, **settings))


def error_of(path: Path, **settings) -> InputError:
    with pytest.raises(InputError) as info:
        read(path, **settings)
    return info.value


def assert_names(err: InputError, *, file, row, column) -> None:
    text = str(err)
    assert str(file) in text
    if row is not None:
        assert f"row {row}" in text and err.row == row
    if column is not None:
        assert f"column '{column}'" in text and err.column == column
    assert "Fix:" in text


# --------------------------------------------------------------------------- good files


def test_reads_a_plain_csv(tmp_path):
    path = lab(tmp_path)
    got = read(path)
    s = got.samples
    assert s.sample_id.tolist() == ["A1", "A2", "A3", "A4"]
    assert s.source_row.tolist() == [2, 3, 4, 5]  # header = row 1
    assert s.ca.tolist() == [6.0, 5.0, 7.0, 4.0]  # meq/100 g = cmol(+)/kg [derived]
    assert got.columns["ca"] == "Exch Ca (meq/100g)" and got.units["ca"] == "meq/100g"
    assert got.methods["ph"] == "water" and got.units["ph"] is None
    assert got.crs.equals(pyproj.CRS.from_epsg(4326))
    assert s.crs.equals(got.crs)
    assert s.geometry.iloc[0].x == pytest.approx(147.001) and s.geometry.iloc[0].y == -35.001
    assert s.Notes.tolist() == ["north end", "", "wet", ""]  # kept as the lab wrote it
    assert got.skipped == [] and got.file == path


def test_semicolons_decimal_commas_and_bom(tmp_path):
    text = "\ufeff" + "\n".join(
        r.replace(",", ";") for r in [HEADER] + [r.replace(".", "#") for r in ROWS]
    ).replace("#", ",")
    got = read(write(tmp_path, text + "\n"))
    assert got.samples.ca.tolist() == [6.0, 5.0, 7.0, 4.0]
    assert got.samples.geometry.iloc[1].x == pytest.approx(147.002)


def test_tab_separated(tmp_path):
    text = "\n".join(r.replace(",", "\t") for r in [HEADER, *ROWS]) + "\n"
    assert len(read(write(tmp_path, text, "lab.txt")).samples) == 4


def test_blank_lines_keep_the_file_row_numbers(tmp_path):
    path = lab(tmp_path, rows=[ROWS[0], "", ROWS[1].replace(",5.0,", ",x,")])
    assert_names(error_of(path), file=path, row=4, column="Exch Ca (meq/100g)")


def test_trailing_separators_add_no_columns(tmp_path):
    path = lab(tmp_path, header="ID,Lon,Lat,Ca,Mg,K,Na,,", rows=["S1,147.001,-35.001,5,2,1,1,,"])
    assert list(read(path).samples.columns) == [
        "sample_id", "source_row", "ca", "mg", "k", "na", "geometry"
    ]


def test_excel_dates_and_tick_boxes_are_not_numbers(tmp_path):
    import datetime

    path = tmp_path / "lab.xlsx"
    pd.DataFrame({"ID": ["A", "B", "C"], "Lon": [147.001, 147.002, 147.003],
                  "Lat": [-35.001, -35.002, -35.003], "Ca": [5.0, 4.0, 4.5],
                  "Mg": [datetime.datetime(2024, 3, 2), 2.0, 2.0],
                  "K": [0.5, True, 0.4], "Na": [0.3, 0.3, 0.3]}).to_excel(path, index=False)
    assert_names(error_of(path), file=path, row=2, column="Mg")
    with pytest.warns(DataWarning):
        got = read(path, on_bad_row="skip")
    assert [r for r, _ in got.skipped] == [2, 3]


def test_units_from_headers_are_converted(tmp_path):
    # docs/SOURCES.md: 200.39 mg Ca, 121.53 mg Mg, 390.98 mg K per cmol(+)/kg [derived];
    # 10 mmol(+)/kg = 1 cmol(+)/kg by definition.
    header = "Sample,Lon,Lat,Ca (mg/kg),Mg ppm,K_mg_kg,Na (mmol(+)/kg),pH"
    path = lab(tmp_path, header=header, rows=["S1,147.001,-35.001,200.39,121.53,390.98,25,6.1"])
    got = read(path)
    row = got.samples.iloc[0]
    assert row.ca == pytest.approx(1.0, rel=1e-4)
    assert row.mg == pytest.approx(1.0, rel=1e-4)
    assert row.k == pytest.approx(1.0, rel=1e-4)
    assert row.na == pytest.approx(2.5)
    assert got.units == {"ca": "mg/kg", "mg": "mg/kg", "k": "mg/kg", "na": "mmol/kg", "ph": None}


def test_settings_override_columns_units_and_default_unit(tmp_path):
    header = "Site,E,N,Calc,Mg,K,Na"
    path = lab(tmp_path, header=header, rows=["S1,500100,6100100,400.78,1,0.5,0.5"])
    got = read(path, id_column="Site", x_column="E", y_column="N", crs="EPSG:32755",
               columns={"ca": "Calc"}, units={"ca": "ppm"}, default_unit="meq/100 g")
    row = got.samples.iloc[0]
    assert row.ca == pytest.approx(2.0, rel=1e-4)  # 400.78 mg/kg / 200.39 (docs/SOURCES.md)
    assert got.units["ca"] == "mg/kg" and got.units["mg"] == "meq/100g"
    assert got.crs.to_epsg() == 32755 and row.geometry.x == 500100


@pytest.mark.parametrize(
    "crs", ["EPSG:28355", "28355", "urn:ogc:def:crs:EPSG::28355",
            pyproj.CRS.from_epsg(28355).to_wkt()]
)
def test_projected_coordinates_with_a_stated_crs(tmp_path, crs):
    header = "Sample,Easting,Northing,Ca,Mg,K,Na"
    path = lab(tmp_path, header=header, rows=["S1,590000,6126000,5,2,0.5,0.3"])
    got = read(path, crs=crs)
    assert got.crs.equals(pyproj.CRS.from_epsg(28355))


def test_xy_in_degrees_without_crs_assume_wgs84_with_a_warning(tmp_path):
    path = lab(tmp_path, header="ID,X,Y,Ca,Mg,K,Na", rows=["S1,147.001,-35.001,5,2,0.5,0.3"])
    with pytest.warns(DataWarning, match="WGS 84"):
        got = read(path)
    assert got.crs.to_epsg() == 4326


def test_other_columns_are_kept_and_clashing_names_renamed(tmp_path):
    header = "Sample,Lon,Lat,Ca,Ca %,paddock,Depth (cm)"
    path = lab(tmp_path, header=header, rows=["S1,147.001,-35.001,5,55.0,Back,0-10"])
    s = read(path).samples
    assert s["Ca %"].tolist() == ["55.0"] and s["Depth (cm)"].tolist() == ["0-10"]
    assert s["paddock_lab"].tolist() == ["Back"] and "paddock" not in s.columns


def test_empty_cells_allowed_for_optional_analytes(tmp_path):
    path = lab(tmp_path, rows=[ROWS[0].replace(",0.1,5.9", ",,5.9")])
    assert np.isnan(read(path).samples.al.iloc[0])


def test_below_detection_limit_taken_as_half_with_a_warning(tmp_path):
    path = lab(tmp_path, rows=[ROWS[0].replace(",0.1,5.9", ",<0.2,5.9")])
    with pytest.warns(DataWarning, match="below the detection limit"):
        got = read(path)
    assert got.samples.al.iloc[0] == pytest.approx(0.1)  # half the limit: common practice
    with pytest.warns(DataWarning, match="taken as the limit"):
        assert read(path, below_detection="limit").samples.al.iloc[0] == pytest.approx(0.2)


def test_below_detection_limit_can_stop(tmp_path):
    path = lab(tmp_path, rows=[ROWS[0].replace(",0.1,5.9", ",<0.2,5.9")])
    err = error_of(path, below_detection="stop")
    assert_names(err, file=path, row=2, column="Exch Al (meq/100g)")


def test_excel_rows_are_numbered_as_in_the_sheet(tmp_path):
    path = tmp_path / "lab.xlsx"
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.title = "Results"
    sheet.append([])  # rows 1-2 left empty by the lab
    sheet.append([])
    sheet.append(["Sample", "Lon", "Lat", "Ca (cmol(+)/kg)", "Mg", "K", "Na"])  # row 3
    sheet.append(["S1", 147.001, -35.001, 5.5, 2, 0.5, 0.3])  # row 4
    sheet.append([17, 147.002, -35.002, "5.5*", 2, 0.5, 0.3])  # row 5
    book.save(path)
    err = error_of(path, sheet_or_layer="Results")
    assert_names(err, file=path, row=5, column="Ca (cmol(+)/kg)")


def test_excel_good_workbook_and_numeric_ids(tmp_path):
    path = tmp_path / "lab.xlsx"
    pd.DataFrame({"ID": [101, 102], "Lon": [147.001, 147.002], "Lat": [-35.001, -35.002],
                  "Ca (meq/100g)": [5.5, 6.0], "Mg": [2.0, 2.1], "K": [0.5, 0.4],
                  "Na": [0.3, 0.2]}).to_excel(path, index=False, sheet_name="Data")
    got = read(path)
    assert got.samples.sample_id.tolist() == ["101", "102"]
    assert got.samples.source_row.tolist() == [2, 3]
    assert got.samples.ca.tolist() == [5.5, 6.0]


def _lab_workbook(path: Path, *, titles: list[list], header: list, units: list | None,
                  rows: list[list]) -> Path:
    book = openpyxl.Workbook()
    sheet = book.active
    for line in titles:
        sheet.append(line)
    sheet.append(header)
    if units is not None:
        sheet.append(units)
    for r in rows:
        sheet.append(r)
    book.save(path)
    return path


def test_excel_title_rows_above_the_header_are_passed_over(tmp_path):
    path = _lab_workbook(
        tmp_path / "lab.xlsx",
        titles=[["Soil analysis report 2027-114"], ["Client: Home farm", None, "Received 3/3"]],
        header=["Sample ID", "Lon", "Lat", "Exch Ca (meq/100g)", "Mg", "K", "Na"],
        units=None,
        rows=[["S1", 147.001, -35.001, 5.5, 2, 0.5, 0.3], ["S2", 147.002, -35.002, "x", 2, 0.5,
                                                            0.3]],
    )
    err = error_of(path)
    assert_names(err, file=path, row=5, column="Exch Ca (meq/100g)")  # the sheet's own rows
    with pytest.warns(DataWarning):
        got = read(path, on_bad_row="skip")
    assert got.samples.sample_id.tolist() == ["S1"] and got.samples.source_row.tolist() == [4]
    assert got.skipped[0][0] == 5


def test_excel_units_row_under_the_header_gives_the_units(tmp_path):
    # 1 cmol(+)/kg of Ca = 200.39 mg/kg; of K = 390.98 mg/kg (docs/SOURCES.md [derived]);
    # 1 meq/100 g = 1 cmol(+)/kg; 10 mmol(+)/kg = 1 cmol(+)/kg [derived].
    path = _lab_workbook(
        tmp_path / "lab.xlsx",
        titles=[["Soil analysis report"], []],
        header=["Sample ID", "Longitude", "Latitude", "pH (CaCl2)", "Exch Ca", "Exch Mg",
                "Exch K", "Exch Na", "EC", "Comments"],
        units=["", "deg", "deg", "pH units", "mg/kg", "meq/100g", "mg/kg", "mmol(+)/kg", "dS/m",
               ""],
        rows=[["S1", 147.001, -35.001, 5.1, 1001.95, 2.0, 195.49, 8.0, 0.1, "ok"],
              ["S2", 147.002, -35.002, 5.3, 801.56, 2.5, 390.98, 4.0, 0.2, None]],
    )
    got = read(path)
    s = got.samples
    assert s.source_row.tolist() == [5, 6]  # title rows 1-2, header 3, units 4
    assert s.ca.tolist() == pytest.approx([5.0, 4.0], rel=1e-4)
    assert s.mg.tolist() == [2.0, 2.5]
    assert s.k.tolist() == pytest.approx([0.5, 1.0], rel=1e-4)
    assert s.na.tolist() == pytest.approx([0.8, 0.4])
    assert got.units == {"ca": "mg/kg", "mg": "meq/100g", "k": "mg/kg", "na": "mmol/kg",
                         "ph_cacl2": None}
    assert got.columns["ca"] == "Exch Ca" and got.methods["ph_cacl2"] == "CaCl2"


def test_units_row_that_contradicts_the_header_is_an_error(tmp_path):
    path = _lab_workbook(
        tmp_path / "lab.xlsx", titles=[],
        header=["Sample", "Lon", "Lat", "Ca (mg/kg)", "Mg", "K", "Na"],
        units=[None, None, None, "meq/100g", "meq/100g", "meq/100g", "meq/100g"],
        rows=[["S1", 147.001, -35.001, 5.5, 2, 0.5, 0.3]],
    )
    err = error_of(path)
    assert_names(err, file=path, row=2, column="Ca (mg/kg)")
    assert "units row" in str(err) and "[samples.units]" in err.fix
    # The setting decides when the user says which is right.
    assert read(path, units={"ca": "meq/100g"}).samples.ca.tolist() == [5.5]


def test_units_row_percent_marks_a_saturation_not_an_amount(tmp_path):
    path = _lab_workbook(
        tmp_path / "lab.xlsx", titles=[],
        header=["Sample", "Lon", "Lat", "Ca", "Ca sat", "Mg", "K", "Na"],
        units=[None, None, None, "meq/100g", "%", "meq/100g", "meq/100g", "meq/100g"],
        rows=[["S1", 147.001, -35.001, 5.5, 60.0, 2, 0.5, 0.3]],
    )
    got = read(path)
    assert got.columns["ca"] == "Ca" and got.samples.ca.tolist() == [5.5]
    assert got.samples["Ca sat"].tolist() == [60.0]  # kept as the lab's own column


def test_a_header_written_twice_is_told_apart_by_the_units_row(tmp_path):
    # labs write "pH" twice with the method in the units row (invented values)
    path = _lab_workbook(
        tmp_path / "lab.xlsx", titles=[["Soil analysis report"]],
        header=["Sample", "Lon", "Lat", "pH", "pH", "Ca", "Mg", "K", "Na"],
        units=[None, None, None, "1:5 water", "1:5 CaCl2", "meq/100g", "meq/100g", "meq/100g",
               "meq/100g"],
        rows=[["S1", 147.001, -35.001, 6.1, 5.4, 5.5, 2, 0.5, 0.3]],
    )
    got = read(path)
    assert got.columns["ph"] == "pH (1:5 water)" and got.columns["ph_cacl2"] == "pH (1:5 CaCl2)"
    assert got.samples.ph.tolist() == [6.1] and got.samples.ph_cacl2.tolist() == [5.4]
    # without a units row to tell them apart, the twice-written header is refused by name
    twice = _lab_workbook(
        tmp_path / "twice.xlsx", titles=[], units=None,
        header=["Sample", "Lon", "Lat", "pH", "pH", "Ca", "Mg", "K", "Na"],
        rows=[["S1", 147.001, -35.001, 6.1, 5.4, 5.5, 2, 0.5, 0.3]],
    )
    assert "appears twice" in str(error_of(twice))


def test_units_row_gives_the_units_of_organic_carbon_and_clay(tmp_path):
    # a units row with no cation unit at all (g/kg, cm, deg) is still a units row, and its
    # g/kg under organic carbon and clay is the unit read (10 g/kg = 1 %, by definition)
    path = _lab_workbook(
        tmp_path / "lab.xlsx", titles=[["Soil report"]],
        header=["Sample", "Latitude", "Longitude", "Depth", "pH (CaCl2)", "Organic Carbon",
                "Clay"],
        units=[None, "deg", "deg", "cm", None, "g/kg", "g/kg"],
        rows=[["S1", -35.001, 147.001, "0-10", 5.2, 13.9, 69.2]],
    )
    got = read(path)
    assert got.units["oc"] == "g/kg" and got.units["clay"] == "g/kg"
    assert got.samples.oc.tolist() == pytest.approx([1.39])
    assert got.samples.clay.tolist() == pytest.approx([6.92])
    assert got.samples.source_row.tolist() == [4]  # title, header, units row, then S1


def test_csv_title_lines_units_row_semicolons_decimal_commas_and_bom(tmp_path):
    text = "\ufeff" + "\n".join([
        "Soil analysis report, batch 114",  # a comma in a title of a ';' file
        "",
        "Sample ID;Longitude;Latitude;Exch Ca;Exch Mg;Exch K;Exch Na;pH (water)",
        ";;;cmol(+)/kg;cmol(+)/kg;mg/kg;cmol(+)/kg;",
        "A1;147,001;-35,001;6,0;2,0;195,49;0,4;5,9",
        "A2;147,002;-35,002;5,5;2,5;390,98;0,6;x",
    ]) + "\n"
    path = write(tmp_path, text)
    err = error_of(path)
    assert_names(err, file=path, row=6, column="pH (water)")  # lines as numbered in the file
    with pytest.warns(DataWarning):
        got = read(path, on_bad_row="skip")
    assert got.samples.source_row.tolist() == [5]
    assert got.samples.ca.tolist() == [6.0]
    assert got.samples.k.tolist() == pytest.approx([0.5], rel=1e-4)  # 390.98 mg/kg per cmol
    assert got.samples.geometry.iloc[0].x == pytest.approx(147.001)


def test_excel_missing_sheet(tmp_path):
    path = tmp_path / "lab.xlsx"
    pd.DataFrame({"ID": [1]}).to_excel(path, index=False, sheet_name="Data")
    err = error_of(path, sheet_or_layer="Results")
    assert "no sheet 'Results'" in str(err) and "Data" in str(err) and str(path) in str(err)


def _points(crs=4326, **columns):
    xy = columns.pop("xy")
    return gpd.GeoDataFrame(columns, geometry=[Point(x, y) for x, y in xy], crs=crs)


def test_geojson_features_numbered_from_1(tmp_path):
    path = tmp_path / "lab.geojson"
    _points(ID=["A", "B"], Ca=[5.0, -1.0], Mg=[2.0, 2.0], K=[0.5, 0.5], Na=[0.3, 0.3],
            xy=[(147.001, -35.001), (147.002, -35.002)]).to_file(path)
    assert_names(error_of(path), file=path, row=2, column="Ca")


def test_geojson_reads(tmp_path):
    path = tmp_path / "lab.geojson"
    _points(ID=["A", "B"], Ca=[5.0, 4.0], Mg=[2.0, 2.0], K=[0.5, 0.5], Na=[0.3, 0.3],
            xy=[(147.001, -35.001), (147.002, -35.002)]).to_file(path)
    got = read(path)
    assert got.crs.to_epsg() == 4326 and got.samples.source_row.tolist() == [1, 2]


def test_geopackage_layers(tmp_path):
    path = tmp_path / "lab.gpkg"
    pts = _points(crs=28355, Sample=["A", "B"], Ca=[5.0, 4.0], Mg=[2.0, 2.0], K=[0.5, 0.5],
                  Na=[0.3, 0.3], xy=[(590000, 6126000), (590050, 6126000)])
    pts.to_file(path, layer="topsoil")
    pts.to_file(path, layer="subsoil")
    err = error_of(path)
    assert "2 layers" in str(err) and "sheet_or_layer" in str(err) and str(path) in str(err)
    got = read(path, sheet_or_layer="subsoil")
    assert got.crs.equals(pyproj.CRS.from_epsg(28355)) and len(got.samples) == 2
    assert "no layer 'deep'" in str(error_of(path, sheet_or_layer="deep"))


def test_shapefile_without_prj_needs_a_crs(tmp_path):
    path = tmp_path / "lab.shp"
    pts = _points(crs=None, ID=["A"], Ca=[5.0], Mg=[2.0], K=[0.5], Na=[0.3],
                  xy=[(590000, 6126000)])
    with pytest.warns(UserWarning, match="crs"):  # GDAL warns when writing without a .prj
        pts.to_file(path)
    err = error_of(path)
    assert "no CRS" in str(err) and "crs" in err.fix and str(path) in str(err)
    assert read(path, crs="EPSG:28355").crs.to_epsg() == 28355


def test_vector_crs_and_declared_crs_must_agree(tmp_path):
    path = tmp_path / "lab.gpkg"
    _points(crs=28355, ID=["A"], Ca=[5.0], Mg=[2.0], K=[0.5], Na=[0.3],
            xy=[(590000, 6126000)]).to_file(path)
    err = error_of(path, crs="EPSG:28356")
    assert "EPSG:28355" in str(err) and "EPSG:28356" in str(err)


def test_vector_feature_that_is_not_a_point(tmp_path):
    path = tmp_path / "lab.geojson"
    gpd.GeoDataFrame(
        {"ID": ["A", "B"], "Ca": [5.0, 4.0], "Mg": [2.0, 2.0], "K": [0.5, 0.5], "Na": [0.3, 0.3]},
        geometry=[Point(147.001, -35.001), Polygon([(147, -35), (147.1, -35), (147, -35.1)])],
        crs=4326,
    ).to_file(path)
    assert_names(error_of(path), file=path, row=2, column="geometry")


def test_zipped_shapefile(tmp_path):
    import zipfile

    folder = tmp_path / "shp"
    folder.mkdir()
    _points(crs=28355, ID=["A"], Ca=[5.0], Mg=[2.0], K=[0.5], Na=[0.3],
            xy=[(590000, 6126000)]).to_file(folder / "lab.shp")
    path = tmp_path / "lab.zip"
    with zipfile.ZipFile(path, "w") as z:
        for f in folder.iterdir():
            z.write(f, f.name)
    assert read(path).crs.to_epsg() == 28355


def test_input_files_are_never_modified(tmp_path):
    csv = lab(tmp_path)
    gpkg = tmp_path / "lab.gpkg"
    _points(crs=28355, ID=["A"], Ca=[5.0], Mg=[2.0], K=[0.5], Na=[0.3],
            xy=[(590000, 6126000)]).to_file(gpkg)

    def state():
        return {p.name: (hashlib.sha256(p.read_bytes()).hexdigest(), p.stat().st_mtime_ns)
                for p in tmp_path.iterdir()}

    before = state()
    read(csv)
    read(gpkg)
    with pytest.raises(InputError):
        read(csv, columns={"ca": "nope"})
    assert state() == before


def test_same_soil_in_mg_kg_and_meq_per_100g_files_gives_the_same_saturations(tmp_path):
    # Ca 5, Mg 2, K 0.5, Na 0.8 cmol(+)/kg written in mg/kg with docs/SOURCES.md factors
    # (200.39, 121.53, 390.98, 229.90 mg/kg per cmol(+)/kg [derived]).
    meq = lab(tmp_path, header="ID,Lon,Lat,Ca (meq/100g),Mg (meq/100g),K (meq/100g),"
              "Na (meq/100g),Exch Acidity (meq/100g)", rows=["S1,147.001,-35.001,5,2,0.5,0.8,0.4"],
              name="meq.csv")
    mg = lab(tmp_path, header="ID,Lon,Lat,Ca (mg/kg),Mg (mg/kg),K (mg/kg),Na (mg/kg),"
             "Exch Acidity (meq/100g)",
             rows=["S1,147.001,-35.001,1001.95,243.06,195.49,183.92,0.4"],
             name="mg.csv")
    a = derive(read(meq).samples).iloc[0]
    b = derive(read(mg).samples).iloc[0]
    for column in ("ecec", "ca_sat", "mg_sat", "k_sat", "na_sat", "esp", "base_sat"):
        assert a[column] == pytest.approx(b[column], rel=1e-4)


# --------------------------------------------------------------------------- bad input


def test_missing_file(tmp_path):
    path = tmp_path / "nowhere.csv"
    err = error_of(path)
    assert str(path) in str(err) and "does not exist" in str(err) and "[samples] file" in err.fix


def test_folder_instead_of_file(tmp_path):
    assert "folder" in str(error_of(tmp_path))


@pytest.mark.parametrize("name", ["lab.docx", "lab", "lab.xls"])
def test_unreadable_format_by_name(tmp_path, name):
    path = write(tmp_path, "x", name)
    err = error_of(path)
    assert str(path) in str(err) and err.fix


@pytest.mark.parametrize("name", ["lab.xlsx", "lab.geojson", "lab.gpkg"])
def test_unreadable_content(tmp_path, name):
    path = write(tmp_path, "this is not what it claims to be", name)
    err = error_of(path)
    assert str(path) in str(err) and "cannot be read" in str(err)


def test_not_utf8(tmp_path):
    text = "\n".join([HEADER, ROWS[0], ROWS[1] + "Pr\u00e9"]) + "\n"
    path = write(tmp_path, text, encoding="cp1252")
    err = error_of(path)
    assert_names(err, file=path, row=3, column=None)
    assert "UTF-8" in str(err)


def test_ragged_row(tmp_path):
    path = lab(tmp_path, rows=[ROWS[0], ROWS[1] + ",extra,more"])
    err = error_of(path)
    assert_names(err, file=path, row=3, column=None)
    assert "fields" in str(err)


def test_empty_file_and_header_only(tmp_path):
    assert "empty" in str(error_of(write(tmp_path, "")))
    assert "no data rows" in str(error_of(lab(tmp_path, rows=[])))


def test_duplicate_header(tmp_path):
    path = lab(tmp_path, header="ID,Lon,Lat,Ca,Ca,Mg,K,Na", rows=["S1,147,-35,5,5,2,0.5,0.3"])
    assert_names(error_of(path), file=path, row=1, column="Ca")


def test_no_id_column(tmp_path):
    path = lab(tmp_path, header="Where,Lon,Lat,Ca,Mg,K,Na", rows=["S1,147,-35,5,2,0.5,0.3"])
    err = error_of(path)
    assert_names(err, file=path, row=1, column=None)
    assert "sample ID" in str(err) and "id_column" in err.fix


def test_no_id_and_no_coordinate_columns_are_named_together(tmp_path):
    # user trial: only the ID was named when the coordinates were unknown too
    path = lab(tmp_path, header="Where,Ost,Nord,Ca,Mg,K,Na", rows=["S1,147,-35,5,2,0.5,0.3"])
    err = error_of(path)
    assert_names(err, file=path, row=1, column=None)
    assert "sample ID, x (longitude or easting) or y (latitude or northing)" in str(err)
    assert "[samples] id_column, [samples] x_column and [samples] y_column" in err.fix
    assert err.keys == ("id_column", "x_column", "y_column")
    path = lab(tmp_path, header="Where,Longitude,Nord,Ca", rows=["S1,147,-35,5"])
    err = error_of(path, x_column="Longitude")
    assert "for the sample ID or y (latitude or northing) (recognised: x 'Longitude')" \
        in str(err)
    assert err.keys == ("id_column", "y_column")


def test_no_coordinate_columns(tmp_path):
    path = lab(tmp_path, header="ID,Ca,Mg,K,Na", rows=["S1,5,2,0.5,0.3"])
    err = error_of(path)
    assert "coordinate" in str(err) and "x_column" in err.fix and "row 1" in str(err)


def test_no_analyte_column(tmp_path):
    path = lab(tmp_path, header="ID,Lon,Lat,Colour,Ca %", rows=["S1,147,-35,red,50"])
    err = error_of(path)
    assert "no analyte" in str(err) and "[samples.columns]" in err.fix
    assert "Ca %" in str(err)  # says why that header was passed over


def test_mapped_column_not_in_file(tmp_path):
    path = lab(tmp_path)
    err = error_of(path, columns={"ca": "Exch Ca (meq/100 g)"})
    assert_names(err, file=path, row=1, column="Exch Ca (meq/100 g)")
    assert "did you mean 'Exch Ca (meq/100g)'" in err.fix
    assert_names(error_of(path, id_column="Sample"), file=path, row=1, column="Sample")


def test_ambiguous_columns(tmp_path):
    header = "ID,Lon,Lat,Ca (mg/kg),Calcium (meq/100g),Mg,K,Na"
    path = lab(tmp_path, header=header, rows=["S1,147.001,-35.001,1002,5,2,0.5,0.3"])
    err = error_of(path)
    assert "'Ca (mg/kg)' and 'Calcium (meq/100g)'" in str(err) and "[samples.columns]" in err.fix
    got = read(path, columns={"ca": "Calcium (meq/100g)"})
    assert got.samples.ca[0] == 5.0 and got.samples["Ca (mg/kg)"][0] == "1002"


@pytest.mark.parametrize("value", ["abc", "1.2.3", "5.5*", "inf"])
def test_non_numeric_value(tmp_path, value):
    path = lab(tmp_path, rows=[ROWS[0], ROWS[1].replace(",2.5,", f",{value},")])
    err = error_of(path)
    assert_names(err, file=path, row=3, column="Exch Mg (meq/100g)")
    assert "not a number" in str(err)


def test_empty_value(tmp_path):
    path = lab(tmp_path, rows=[ROWS[0], ROWS[1], ROWS[2].replace(",7.0,", ",,")])
    err = error_of(path)
    assert_names(err, file=path, row=4, column="Exch Ca (meq/100g)")
    assert "empty" in str(err) and "empty_allowed" in err.fix


def test_negative_concentration(tmp_path):
    path = lab(tmp_path, rows=[ROWS[0], ROWS[1], ROWS[2], ROWS[3].replace(",1.2,", ",-1.2,")])
    err = error_of(path)
    assert_names(err, file=path, row=5, column="Exch Na (meq/100g)")
    assert "negative" in str(err)


def test_duplicate_sample_id(tmp_path):
    path = lab(tmp_path, rows=[ROWS[0], ROWS[1].replace("A2", "A1")])
    err = error_of(path)
    assert_names(err, file=path, row=3, column="Sample ID")
    assert "also on row 2" in str(err)


def test_empty_sample_id(tmp_path):
    path = lab(tmp_path, rows=[ROWS[0], ROWS[1].replace("A2", "")])
    assert_names(error_of(path), file=path, row=3, column="Sample ID")


def test_implausible_magnitude_for_the_unit(tmp_path):
    # Ca = 1500 declared as cmol(+)/kg: above the plausible bound (common practice).
    path = lab(tmp_path, rows=[ROWS[0], ROWS[1].replace(",5.0,", ",1500,"), ROWS[2], ROWS[3]])
    err = error_of(path)
    assert_names(err, file=path, row=3, column="Exch Ca (meq/100g)")
    assert "implausibly large" in str(err) and "[samples.units]" in err.fix


def test_a_whole_column_in_the_wrong_unit_stops_even_when_skipping(tmp_path):
    header = "ID,Lon,Lat,Ca,Mg,K,Na"
    path = lab(tmp_path, header=header, rows=["S1,147.001,-35.001,1002,243,195,92",
                                              "S2,147.002,-35.002,1503,300,180,80"])
    err = error_of(path, on_bad_row="skip")
    assert_names(err, file=path, row=1, column="Ca")
    assert "unit looks wrong" in str(err) and "ca = 'mg/kg'" in err.fix


def test_ph_out_of_range(tmp_path):
    path = lab(tmp_path, rows=[ROWS[0].replace(",5.9,", ",59,")])
    assert_names(error_of(path), file=path, row=2, column="pH (water)")


def test_latitude_out_of_range(tmp_path):
    path = lab(tmp_path, rows=[ROWS[0], ROWS[1].replace("-35.0020", "-95.0020")])
    err = error_of(path)
    assert_names(err, file=path, row=3, column="Latitude")
    assert "outside" in str(err)


def test_longitude_and_latitude_swapped(tmp_path):
    path = lab(tmp_path, rows=[ROWS[0], "A2,-35.0020,147.0020,5.0,2.5,0.4,0.6,0.2,5.6,"])
    err = error_of(path)
    assert_names(err, file=path, row=3, column="Latitude")
    assert "swapped" in str(err) and "x_column = 'Latitude'" in err.fix


def test_zero_zero_location(tmp_path):
    path = lab(tmp_path, rows=[ROWS[0], "A2,0,0,5.0,2.5,0.4,0.6,0.2,5.6,"])
    assert_names(error_of(path), file=path, row=3, column="Longitude")


def test_empty_coordinate(tmp_path):
    path = lab(tmp_path, rows=[ROWS[0], "A2,147.002,,5.0,2.5,0.4,0.6,0.2,5.6,"])
    assert_names(error_of(path), file=path, row=3, column="Latitude")


def test_projected_coordinates_without_crs(tmp_path):
    path = lab(tmp_path, header="ID,Easting,Northing,Ca,Mg,K,Na",
               rows=["S1,590000,6126000,5,2,0.5,0.3"])
    err = error_of(path)
    assert_names(err, file=path, row=2, column="Easting")
    assert "crs = 'EPSG:" in err.fix
    assert isinstance(err, CRSError)  # a caller may offer a CRS and read again


def test_degrees_with_a_projected_crs(tmp_path):
    path = lab(tmp_path)
    err = error_of(path, crs="EPSG:28355")
    assert_names(err, file=path, row=2, column="Longitude")
    assert "EPSG:4326" in err.fix


def test_skip_bad_rows_lists_them(tmp_path):
    rows = [ROWS[0], ROWS[1].replace(",2.5,", ",abc,"), ROWS[2],
            ROWS[3].replace(",1.2,", ",-1.2,").replace("-35.0040", "-95")]
    path = lab(tmp_path, rows=rows)
    with pytest.warns(DataWarning, match="2 bad row"):
        got = read(path, on_bad_row="skip")
    assert got.samples.sample_id.tolist() == ["A1", "A3"]
    assert [r for r, _ in got.skipped] == [3, 5]
    assert "not a number" in got.skipped[0][1] and "Exch Mg" in got.skipped[0][1]
    assert "negative" in got.skipped[1][1] and "Latitude" in got.skipped[1][1]


def test_skipped_rows_are_data_the_caller_may_report_itself(tmp_path):
    """Issue: 'new' hid the reader's "bad row(s) skipped" warning by matching its words. The
    rows passed over are in SampleRead.skipped; with warn_skipped=False the reader warns
    nothing about them (other warnings still come), and the caller says what it wants."""
    import warnings

    rows = [ROWS[0], ROWS[1].replace(",2.5,", ",abc,"), ROWS[2]]
    path = lab(tmp_path, rows=rows)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        got = read_samples(SampleSettings(file=path, on_bad_row="skip"), warn_skipped=False)
    about_rows = [str(w.message) for w in caught if "row" in str(w.message)
                  and "column(s) not read" not in str(w.message)]  # the 'Notes' column
    assert about_rows == []
    assert got.samples.sample_id.tolist() == ["A1", "A3"]
    assert [r for r, _ in got.skipped] == [3] and "Exch Mg" in got.skipped[0][1]


def test_skip_keeps_the_first_of_duplicate_ids(tmp_path):
    path = lab(tmp_path, rows=[ROWS[0], ROWS[1].replace("A2", "A1"), ROWS[2]])
    with pytest.warns(DataWarning):
        got = read(path, on_bad_row="skip")
    assert got.samples.source_row.tolist() == [2, 4]


def test_every_row_bad_stops_even_when_skipping(tmp_path):
    path = lab(tmp_path, rows=[ROWS[0].replace(",6.0,", ",x,")])
    assert_names(error_of(path, on_bad_row="skip"), file=path, row=2, column=None)


def test_ecec_lacking_a_component_names_file_row_and_column(tmp_path):
    header = "Sample ID,Longitude,Latitude,Exch Ca,Exch Mg,Exch K,pH (water)"
    path = lab(tmp_path, header=header, rows=["A1,147.001,-35.001,6,2,0.5,6.1"])
    got = read(path)
    with pytest.raises(InputError) as info:
        derive(got.samples, file=str(got.file), headers=got.columns)
    assert_names(info.value, file=path, row=2, column="na, acidity")
    assert "Na" in info.value.problem and "lab CEC" in info.value.fix


# --------------------------------------------------------------------------- prepare


def _read_lonlat(tmp_path, rows):
    return read(lab(tmp_path, rows=rows))


def test_prepare_reprojects_and_names_paddocks(tmp_path):
    got = read(lab(tmp_path))
    out = prepare_samples(got.samples, paddocks=PADDOCKS, working_crs=UTM55,
                          settings=SampleSettings(file=got.file), file=str(got.file))
    assert out.crs.equals(UTM55)
    assert out.paddock.tolist() == ["Home"] * 4
    # The same points, transformed independently (always_xy).
    t = pyproj.Transformer.from_crs(4326, UTM55, always_xy=True)
    x, y = t.transform(147.001, -35.001)
    assert out.geometry.iloc[0].x == pytest.approx(x) and out.geometry.iloc[0].y == pytest.approx(y)
    assert got.samples.crs.to_epsg() == 4326  # the input frame is left alone


def test_overlapping_paddocks_take_the_first_with_a_warning(tmp_path):
    got = read(lab(tmp_path))
    two = gpd.GeoDataFrame({"paddock": ["Home", "Also"]},
                           geometry=[box(146.99, -35.01, 147.01, -34.99)] * 2, crs=4326)
    with pytest.warns(DataWarning, match="more than one paddock"):
        out = prepare_samples(got.samples, paddocks=two, working_crs=UTM55,
                              settings=SampleSettings(file=got.file), file=str(got.file))
    assert set(out.paddock) == {"Home"}


def test_prepare_needs_crs_on_both(tmp_path):
    got = read(lab(tmp_path))
    with pytest.raises(CRSError):
        prepare_samples(got.samples, paddocks=PADDOCKS.set_crs(None, allow_override=True),
                        working_crs=UTM55, settings=SampleSettings(file=got.file),
                        file=str(got.file))


def test_point_outside_every_paddock(tmp_path):
    rows = [ROWS[0], ROWS[1].replace("147.0020", "147.0500")]
    got = _read_lonlat(tmp_path, rows)
    settings = SampleSettings(file=got.file)
    with pytest.raises(InputError) as info:
        prepare_samples(got.samples, paddocks=PADDOCKS, working_crs=UTM55, settings=settings,
                        file=str(got.file))
    assert_names(info.value, file=got.file, row=3, column="Longitude/Latitude")
    assert "outside every paddock" in str(info.value) and "'A2'" in str(info.value)
    skip = SampleSettings(file=got.file, on_bad_row="skip")
    with pytest.warns(DataWarning, match="row 3"):
        out = prepare_samples(got.samples, paddocks=PADDOCKS, working_crs=UTM55, settings=skip,
                              file=str(got.file))
    assert out.sample_id.tolist() == ["A1"]


def test_point_outside_that_fits_when_swapped(tmp_path):
    paddocks = gpd.GeoDataFrame({"paddock": ["Steppe"]}, geometry=[box(40.0, 50.0, 40.01, 50.01)],
                                crs=4326)
    rows = ["A1,40.005,50.005,6,2,0.5,0.4,0.1,5.9,", "A2,50.005,40.005,6,2,0.5,0.4,0.1,5.9,"]
    got = _read_lonlat(tmp_path, rows)
    with pytest.raises(InputError, match="swapped"):
        prepare_samples(got.samples, paddocks=paddocks, working_crs=pyproj.CRS.from_epsg(32637),
                        settings=SampleSettings(file=got.file), file=str(got.file))


def test_no_point_in_any_paddock_blames_the_crs(tmp_path):
    got = read(lab(tmp_path))
    far = gpd.GeoDataFrame({"paddock": ["Away"]}, geometry=[box(10, 10, 11, 11)], crs=4326)
    with pytest.raises(InputError, match="CRS"):
        prepare_samples(got.samples, paddocks=far, working_crs=UTM55,
                        settings=SampleSettings(file=got.file, on_bad_row="skip"),
                        file=str(got.file))


def test_near_duplicates_stop_by_default(tmp_path):
    # 147.00100 vs 147.00101 degrees: about 0.9 m apart at 35 S.
    rows = [ROWS[0], ROWS[1].replace("147.0020,-35.0020", "147.00101,-35.0010"), ROWS[2]]
    got = _read_lonlat(tmp_path, rows)
    with pytest.raises(InputError) as info:
        prepare_samples(got.samples, paddocks=PADDOCKS, working_crs=UTM55,
                        settings=SampleSettings(file=got.file), file=str(got.file))
    assert_names(info.value, file=got.file, row=3, column="Longitude/Latitude")
    assert "'A1' (row 2)" in str(info.value) and "duplicates = 'average'" in info.value.fix


def test_near_duplicates_averaged(tmp_path):
    rows = [ROWS[0], ROWS[1].replace("147.0020,-35.0020", "147.00100,-35.0010"), ROWS[2]]
    got = _read_lonlat(tmp_path, rows)
    settings = SampleSettings(file=got.file, duplicates="average")
    with pytest.warns(DataWarning, match="merged by averaging"):
        out = prepare_samples(got.samples, paddocks=PADDOCKS, working_crs=UTM55,
                              settings=settings, file=str(got.file))
    assert out.sample_id.tolist() == ["A1+A2", "A3"]
    merged = out.iloc[0]
    assert merged.ca == pytest.approx(5.5) and merged.na == pytest.approx(0.5)
    assert merged.source_row == 2 and merged.paddock == "Home"


def test_duplicate_distance_is_a_setting(tmp_path):
    got = read(lab(tmp_path))  # neighbours about 145 m apart
    settings = SampleSettings(file=got.file, duplicates="average", duplicate_distance_m=200.0)
    with pytest.warns(DataWarning):
        out = prepare_samples(got.samples, paddocks=PADDOCKS, working_crs=UTM55,
                              settings=settings, file=str(got.file))
    assert out.sample_id.tolist() == ["A1+A2+A3+A4"]
    assert out.ca[0] == pytest.approx(5.5)


# --------------------------------------------------------------------------- settings


@pytest.mark.parametrize(
    "table, key",
    [
        ({"columns": {"calcium": "Ca"}}, "samples.columns.calcium"),
        ({"units": {"ca": "ppb"}}, "samples.units.ca"),
        ({"units": {"ph": "pH units"}}, "samples.units.ph"),
        ({"units": {"acidity": "mg/kg"}}, "samples.units.acidity"),
        ({"default_unit": "g/L"}, "samples.default_unit"),
        ({"on_bad_row": "skp"}, "samples.on_bad_row"),
        ({"duplicates": "merge"}, "samples.duplicates"),
        ({"duplicate_distance_m": -1.0}, "samples.duplicate_distance_m"),
        ({"crs": "EPSG:99999999"}, "samples.crs"),
        ({"below_detection": "third"}, "samples.below_detection"),
        ({"empty_allowed": ["alu"]}, "samples.empty_allowed"),
    ],
)
def test_settings_errors_name_the_key(table, key):
    with pytest.raises(SettingsError) as info:
        from_mapping(SampleSettings, {"file": "lab.csv", **table}, section="samples")
    assert info.value.key == key


def test_settings_from_mapping_resolve_the_file(tmp_path):
    s = from_mapping(SampleSettings, {"file": "lab.csv", "crs": "EPSG:28355"}, section="samples",
                     base_dir=tmp_path)
    assert s.file == tmp_path / "lab.csv" and s.on_bad_row == "stop"


def test_reading_records_no_unexpected_warnings(tmp_path):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        read(lab(tmp_path))
    # the fixture's 'Notes' column is record keeping: not read, and no warning of it
    assert [str(w.message) for w in caught] == []


# ------------------------------------------------------------------ messy files (hypothesis)
#
# Whatever a user's file holds, reading it either works or raises a GeosoilError whose message
# names the file (and the row, where one row is at fault): never another exception.

import json  # noqa: E402
import traceback  # noqa: E402

from click.testing import CliRunner  # noqa: E402
from geosoil.cli.main import cli  # noqa: E402
from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

from geosoil.errors import GeosoilError  # noqa: E402

_FUZZ = settings(max_examples=60, deadline=None,
                 suppress_health_check=[HealthCheck.function_scoped_fixture])

#: Header cells as labs write them, and junk.
_HEADER_WORDS = [
    "Sample ID", "Sample", "ID", "Lab No", "Longitude", "Latitude", "Lon", "Lat", "Easting",
    "Northing", "X", "Y", "Exch Ca (meq/100g)", "Ca", "Mg", "K", "Na", "Al", "Ca (mg/kg)",
    "Mg (cmol(+)/kg)", "pH (water)", "pH (CaCl2)", "CEC", "ECEC", "SAR", "Notes", "Ca %",
    "", " ", "(meq/100g)", "meq/100g", "Lat Lon", "Ca Ca", "Échantillon",
]
#: Cell values as labs write them, and junk.
_CELL_WORDS = [
    "1", "0", "-1", "3,5", "3.5", "<0.1", "< 0,1", "<", "n.d.", "", "NaN", "inf", "-inf",
    "1e308", "1e400", "99999999", "146.9", "-35.1", "146,9", "-35,1", "A1", "A1", '"q,1"',
    "  ", "-", "<-1", "0x10", "1_000", "½", "True", ".", "1e-320",
]


@st.composite
def messy_csv(draw) -> bytes:
    """CSV bytes: random headers and cells, separator, line ends, ragged rows, BOM, stray bytes."""
    sep = draw(st.sampled_from([",", ";", "\t"]))
    width = draw(st.integers(1, 7))
    cell = st.sampled_from(_CELL_WORDS) | st.text(max_size=4)
    lines = [sep.join(draw(st.lists(st.sampled_from(_HEADER_WORDS) | st.text(max_size=6),
                                    min_size=width, max_size=width)))]
    for _ in range(draw(st.integers(0, 5))):
        n = draw(st.integers(0, width + 1))
        lines.append(sep.join(draw(st.lists(cell, min_size=n, max_size=n))))
    data = draw(st.sampled_from(["\n", "\r\n", "\r"])).join(lines).encode("utf-8",
                                                                          "surrogatepass")
    if draw(st.booleans()):
        data = b"\xef\xbb\xbf" + data
    if draw(st.integers(0, 5)) == 0:
        at = draw(st.integers(0, len(data)))
        stray = draw(st.sampled_from([b"\xff", b"\xe9", b"\x00", b'"', b"\r"]))
        data = data[:at] + stray + data[at:]
    return data


def _assert_only_geosoil_errors(path: Path, call) -> GeosoilError | None:
    """Run ``call``; any exception must be a GeosoilError naming ``path``."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            call()
    except GeosoilError as exc:
        assert path.name in str(exc) or "setting" in str(exc), str(exc)
        return exc
    except Exception as exc:  # noqa: BLE001 - the property under test
        pytest.fail("escaped as " + "".join(traceback.format_exception_only(exc)))
    return None


@_FUZZ
@given(data=messy_csv(), on_bad_row=st.sampled_from(["stop", "skip"]))
def test_messy_csv_raises_only_input_errors_naming_the_file(tmp_path, data, on_bad_row):
    path = tmp_path / "lab.csv"
    path.write_bytes(data)
    exc = _assert_only_geosoil_errors(
        path, lambda: read(path, on_bad_row=on_bad_row))
    if isinstance(exc, InputError) and exc.row is not None:
        assert 1 <= exc.row <= len(data.splitlines()) + 1
        assert f"row {exc.row}" in str(exc)


_GOOD = [("S1", "146.901", "-35.101", "5.1", "2.3", "6.1", "0.5", "0.4", "0.1"),
         ("S2", "146.902", "-35.102", "4.2", "1.9", "5.8", "0.6", "0.3", "0.2"),
         ("S3", "146.903", "-35.103", "6.0", "2.8", "6.4", "0.4", "0.5", "0.0"),
         ("S4", "146.904", "-35.104", "3.7", "2.1", "5.5", "0.7", "0.2", "0.3")]
_GOOD_HEADER = ("Sample", "Longitude", "Latitude", "Ca (cmol/kg)", "Mg (cmol/kg)", "pH (water)",
                "K (cmol/kg)", "Na (cmol/kg)", "Al (cmol/kg)")
#: Cells that are wrong in each column (common practice: a lab value is a non-negative number,
#: a pH lies within 1.5-12.5, a longitude within +-180 and a latitude within +-90 degrees).
_BAD_CELLS = {
    0: ["", "S1"],  # empty or repeated sample ID (S1 is the first row's)
    1: ["abc", "", "999", "n.d."],
    2: ["abc", "", "999", "1e400"],
    # ('n.d.' in an amount is below detection: tests of its own)
    3: ["abc", "-1", "", "5.5*", "1e400", "inf", "99999", "<", "1..2"],
    4: ["abc", "-1", "", "5.5*", "1e400", "inf", "99999", "<", "1..2"],
    5: ["abc", "-1", "", "99", "inf"],
}


@st.composite
def one_bad_cell(draw) -> tuple[bytes, int, str]:
    """A good lab file written in any of the accepted ways, with one wrong cell.

    Returns the bytes, the line number of the bad row (as a person counts lines in the file)
    and the header of the bad column.
    """
    sep = draw(st.sampled_from([",", ";", "\t"]))
    comma = sep != "," and draw(st.booleans())
    quote = draw(st.booleans())
    bad_row = draw(st.integers(1, len(_GOOD) - 1))  # the first row keeps ID 'S1'
    bad_col = draw(st.sampled_from(sorted(_BAD_CELLS)))
    rows = [list(r) for r in _GOOD]
    rows[bad_row][bad_col] = draw(st.sampled_from(_BAD_CELLS[bad_col]))

    def field(text: str) -> str:
        if comma and text[:1].isdigit() or comma and text[:1] == "-":
            text = text.replace(".", ",")
        return f'"{text}"' if quote else text

    lines = []
    if draw(st.booleans()):
        lines += ["Soil test results", ""]
    lines.append(sep.join(field(h) for h in _GOOD_HEADER))
    header_line = len(lines)
    bad_line = 0
    for i, r in enumerate(rows):
        if draw(st.integers(0, 3)) == 0:
            lines.append("")
        lines.append(sep.join(field(c) for c in r))
        if i == bad_row:
            bad_line = len(lines)
    assert header_line < bad_line
    text = draw(st.sampled_from(["\n", "\r\n"])).join(lines) + draw(st.sampled_from(["", "\n"]))
    bom = b"\xef\xbb\xbf" if draw(st.booleans()) else b""
    return bom + text.encode("utf-8"), bad_line, _GOOD_HEADER[bad_col]


@pytest.mark.slow
@_FUZZ
@given(case=one_bad_cell())
def test_one_bad_cell_is_named_by_row_and_column(tmp_path, case):
    data, line, column = case
    path = tmp_path / "lab.csv"
    path.write_bytes(data)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        err = error_of(path)
    assert_names(err, file=path, row=line, column=column)
    # with on_bad_row = 'skip' the same row, and only it, is passed over
    with pytest.warns(DataWarning, match=f"row {line}"):
        got = read(path, on_bad_row="skip")
    assert [r for r, _ in got.skipped] == [line]
    assert line not in got.samples["source_row"].tolist() and len(got.samples) == 3


def test_the_good_file_behind_one_bad_cell_reads(tmp_path):
    path = write(tmp_path, "\n".join(",".join(r) for r in [_GOOD_HEADER, *_GOOD]))
    got = read(path)
    assert got.samples["sample_id"].tolist() == ["S1", "S2", "S3", "S4"]
    assert got.samples["ca"].tolist() == [5.1, 4.2, 6.0, 3.7]


_PROPS = [{}, {"Sample": "A1", "Ca": 1}, {"Sample": "A1", "Ca": "x"}, {"Sample": None, "Ca": None},
          {"Sample": "A2", "Ca": [1, 2]}, {"Sample": "A3", "Ca": {"v": 1}},
          {"Sample": "A3", "Ca": True},
          {"Sample": 5, "Ca": 1e308}, {" Sample ": "A5", " Ca": 2}, {"sample": "A6", "CA": -1},
          {"Sample": "A7", "Ca": 1, "source_row": 3, "paddock": "x", "geometry": 1}]
_POINTS = [None, {"type": "Point", "coordinates": [146, -35]}, {"type": "Point", "coordinates": []},
           {"type": "Point", "coordinates": [146, -35, 3]},
           {"type": "MultiPoint", "coordinates": [[146, -35], [146.1, -35]]},
           {"type": "MultiPoint", "coordinates": []},
           {"type": "Polygon", "coordinates": [[[0, 0], [1, 0], [1, 1], [0, 0]]]},
           {"type": "GeometryCollection", "geometries": []},
           {"type": "Point", "coordinates": [540000, 6160000]},
           {"type": "Point", "coordinates": [1e308, 0]}]


@st.composite
def messy_sample_geojson(draw) -> str:
    features = [{"type": "Feature", "properties": draw(st.sampled_from(_PROPS)),
                 "geometry": draw(st.sampled_from(_POINTS))}
                for _ in range(draw(st.integers(0, 4)))]
    top: dict = {"type": "FeatureCollection", "features": features}
    crs = draw(st.sampled_from([None, "EPSG:4326", "EPSG:28355", "junk"]))
    if crs:
        top["crs"] = {"type": "name", "properties": {"name": crs}}
    text = json.dumps(top)
    if draw(st.integers(0, 9)) == 0:
        text = text[: draw(st.integers(0, len(text)))]  # cut short
    return text


@_FUZZ
@given(text=messy_sample_geojson(), on_bad_row=st.sampled_from(["stop", "skip"]))
def test_messy_sample_geojson_raises_only_input_errors(tmp_path, text, on_bad_row):
    path = write(tmp_path, text, name="lab.geojson")
    exc = _assert_only_geosoil_errors(path, lambda: read(path, on_bad_row=on_bad_row))
    if isinstance(exc, InputError) and exc.row is not None:
        assert 1 <= exc.row <= text.count('"Feature"')


# Regressions: the smallest failing files hypothesis found, written out.


def test_geojson_array_property_is_a_bad_cell_not_a_crash(tmp_path):
    """A GeoJSON array in a value column was a ValueError ('truth value of an array')."""
    feature = {"type": "Feature", "properties": {"Sample": "A2", "Ca": [1, 2]},
               "geometry": {"type": "Point", "coordinates": [146, -35]}}
    path = write(tmp_path, json.dumps({"type": "FeatureCollection", "features": [feature]}),
                 name="lab.geojson")
    assert_names(error_of(path), file=path, row=1, column="Ca")
    assert "not a number" in str(error_of(path))


def test_geojson_property_names_with_spaces_are_found(tmp_path):
    """Property names with spaces around them (' Ca', 'Sample ') were a KeyError."""
    feature = {"type": "Feature", "properties": {"Sample ": "A1", " Ca": 1.5},
               "geometry": {"type": "Point", "coordinates": [146, -35]}}
    path = write(tmp_path, json.dumps({"type": "FeatureCollection", "features": [feature]}),
                 name="lab.geojson")
    got = read(path, crs="EPSG:4326")
    assert got.columns["ca"] == " Ca" and got.samples["ca"].tolist() == [1.5]
    assert got.samples["sample_id"].tolist() == ["A1"]


def test_a_cell_over_the_csv_size_limit_is_an_input_error(tmp_path):
    """A field longer than the csv module's limit (131072 characters) was a _csv.Error."""
    path = write(tmp_path, "Sample,Lon,Lat,Ca\nA," + "1" * 200_000 + ",-35,1\n")
    err = error_of(path)
    assert_names(err, file=path, row=2, column=None)


def test_an_unclosed_quote_names_its_row(tmp_path):
    """A quote never closed swallowed the rest of the file into one cell; the error blamed
    an empty coordinate instead of the quote."""
    path = write(tmp_path, 'Sample,Lon,Lat,Ca\nA,146,-35,1\n"B,146,-35,1\nC,146,-35,1\n')
    err = error_of(path)
    assert_names(err, file=path, row=3, column=None)
    assert "quote" in str(err)


# The command line on such files: exit 1, a message, never a traceback.


def _project(folder: Path, lab_bytes: bytes) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    gpd.GeoDataFrame({"name": ["Home"]}, geometry=[box(146.89, -35.12, 146.92, -35.09)],
                     crs=4326).to_file(folder / "paddocks.geojson")
    (folder / "lab.csv").write_bytes(lab_bytes)
    (folder / "geosoil.toml").write_text(
        '[samples]\nfile = "lab.csv"\n\n[boundaries]\npaddocks = "paddocks.geojson"\n\n'
        f'[output]\ncache_dir = "{(folder / "cache").as_posix()}"\n'
    )
    return folder


def _assert_clean_failure(result) -> None:
    assert result.exit_code == 1, (result.exit_code, result.stderr, result.exception)
    assert isinstance(result.exception, SystemExit), repr(result.exception)  # no escape
    lines = result.stderr.splitlines()
    assert any(ln.startswith(("error:", "problem:")) for ln in lines), result.stderr
    assert "Traceback" not in result.stderr + result.stdout


def test_cli_good_project_behind_the_messy_files_checks(tmp_path):
    good = "\n".join(",".join(r) for r in [_GOOD_HEADER, *_GOOD]).encode()
    result = CliRunner().invoke(cli, ["check", str(_project(tmp_path / "p", good))])
    assert result.exit_code == 0, result.stderr


@settings(max_examples=12, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(case=one_bad_cell(), command=st.sampled_from(["check", "run"]))
def test_cli_on_a_bad_lab_file_exits_1_with_a_message(tmp_path_factory, case, command):
    data, line, _column = case
    folder = _project(tmp_path_factory.mktemp("cli"), data)
    extra = [] if command == "check" else ["--out", str(folder / "out")]
    result = CliRunner().invoke(cli, [command, str(folder), *extra])
    _assert_clean_failure(result)
    assert f"row {line}" in result.stderr


@settings(max_examples=12, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=messy_csv(), command=st.sampled_from(["check", "run"]))
def test_cli_on_a_messy_lab_file_never_shows_a_traceback(tmp_path_factory, data, command):
    folder = _project(tmp_path_factory.mktemp("cli"), data)
    extra = [] if command == "check" else ["--out", str(folder / "out")]
    result = CliRunner().invoke(cli, [command, str(folder), *extra])
    if result.exit_code != 0:  # a random file may happen to be a good one
        _assert_clean_failure(result)


def test_utf16_unicode_text_export_is_read(tmp_path):
    """Excel's 'Unicode text' export: UTF-16 with a byte-order mark, tab separated."""
    text = "\n".join("\t".join(r) for r in [_GOOD_HEADER, *_GOOD]) + "\n"
    path = tmp_path / "lab.txt"
    path.write_bytes(text.encode("utf-16"))  # Python writes the BOM
    got = read(path)
    assert got.samples["sample_id"].tolist() == ["S1", "S2", "S3", "S4"]
    assert got.samples["ca"].tolist() == [5.1, 4.2, 6.0, 3.7]


def test_broken_utf16_is_an_input_error(tmp_path):
    path = tmp_path / "lab.csv"
    path.write_bytes(b"\xff\xfeS\x00a\x00\x00\xd8")  # a lone surrogate
    assert_names(error_of(path), file=path, row=None, column=None)


def _damaged_workbook(tmp_path: Path, part: str) -> Path:
    """A good workbook with one of its XML parts replaced by a cut-off tag."""
    good, bad = tmp_path / "good.xlsx", tmp_path / "lab.xlsx"
    book = openpyxl.Workbook()
    for row in [_GOOD_HEADER, *_GOOD]:
        book.active.append(list(row))
    book.save(good)
    import zipfile

    with zipfile.ZipFile(good) as zin, zipfile.ZipFile(bad, "w") as zout:
        for item in zin.infolist():
            zout.writestr(item, b"<worksheet" if item.filename == part else zin.read(item))
    return bad


@pytest.mark.parametrize("part", ["xl/worksheets/sheet1.xml", "xl/workbook.xml"])
def test_damaged_workbook_is_an_input_error(tmp_path, part):
    """A workbook whose sheet XML is cut off raised xml.etree.ElementTree.ParseError."""
    path = _damaged_workbook(tmp_path, part)
    err = error_of(path)
    assert_names(err, file=path, row=None, column=None)
    assert "cannot be read" in str(err)


def test_unreadable_csv_is_an_input_error(tmp_path, monkeypatch):
    """A file the user may not read (PermissionError) is an InputError, not an OSError.
    Simulated: tests may run as a user who can read everything."""
    path = lab(tmp_path)

    def refuse(self):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(Path, "read_bytes", refuse)
    err = error_of(path)
    assert_names(err, file=path, row=None, column=None)
    assert "Permission denied" in str(err)


@pytest.mark.parametrize(
    "given, column, keys",
    [
        ({"columns": {"ca": "Ca", "mg": "Ca"}}, "Ca", ("columns.ca", "columns.mg")),
        ({"x_column": "Lon", "y_column": "Lon"}, "Lon", ("x_column", "y_column")),
        ({"columns": {"ca": "Sample"}}, "Sample", ("columns.ca", "id_column")),
        ({"columns": {"ca": "Lon"}}, "Lon", ("columns.ca", "x_column")),
    ],
)
def test_settings_that_read_one_column_twice_are_an_error(tmp_path, given, column, keys):
    """One header mapped to Ca and Mg was read silently as both; x_column = y_column
    was blamed on a missing CRS."""
    path = write(tmp_path, "Sample,Lon,Lat,Ca,Mg\nA,146,-35,1,2\nB,146.1,-35,1,2\n")
    err = error_of(path, **given)
    assert_names(err, file=path, row=1, column=column)
    assert all(f"[samples] {k}" in str(err) for k in keys)


def test_a_point_without_coordinates_is_named_without_gdal_noise(tmp_path):
    """GDAL warned (RuntimeWarning, a traceback when warnings are errors) about a point
    with empty coordinates; the reader reports the row itself."""
    features = [{"type": "Feature", "properties": {"Sample": "A1", "Ca": 1.0},
                 "geometry": {"type": "Point", "coordinates": [146.0, -35.0]}},
                {"type": "Feature", "properties": {"Sample": "A2", "Ca": 1.0},
                 "geometry": {"type": "Point", "coordinates": []}}]
    path = write(tmp_path, json.dumps({"type": "FeatureCollection", "features": features}),
                 name="lab.geojson")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        err = error_of(path, crs="EPSG:4326")
    assert not [w for w in caught if issubclass(w.category, RuntimeWarning)]
    assert_names(err, file=path, row=2, column="geometry")


# --------------------------------------------------------------------------- lime analytes


def test_lime_analytes_and_volumetric_units_are_read(tmp_path: Path) -> None:
    # invented values; conversions [derived]: mmolc/dm3 / 10 / scoop density; g/kg / 10 -> %
    path = write(tmp_path, "Sample,Lon,Lat,pH (CaCl2),OC (g/kg),Clay %,SMP buffer pH,"
                 "CTC pH 7 (mmolc/dm3),Ca (cmolc/dm3)\n"
                 "A1,146.90,-35.10,4.8,15,20,6.1,54.6,2.4\n"
                 "A2,146.91,-35.11,5.1,12,25,,60,3.6\n")
    with pytest.warns(DataWarning, match="scoop density of 1.2 g/cm3"):
        read = read_samples(SampleSettings(file=path, scoop_density_g_cm3=1.2))
    s = read.samples
    assert s["oc"].tolist() == pytest.approx([1.5, 1.2])
    assert s["clay"].tolist() == [20.0, 25.0]
    assert s["cec_ph7"].tolist() == pytest.approx([5.46 / 1.2, 6.0 / 1.2])
    assert s["ca"].tolist() == pytest.approx([2.0, 3.0])
    assert s["bph_smp"].iloc[0] == 6.1 and np.isnan(s["bph_smp"].iloc[1])  # empty: not measured
    assert read.units["oc"] == "g/kg" and read.units["cec_ph7"] == "mmol/dm3"


def test_implausible_clay_names_the_row(tmp_path: Path) -> None:
    path = write(tmp_path, "Sample,Lon,Lat,pH,Clay (%)\nA1,146.90,-35.10,5.0,20\n"
                 "A2,146.91,-35.11,5.1,250\n")
    with pytest.raises(InputError, match="row 3.*implausibly large"):
        read_samples(SampleSettings(file=path))


def test_averaged_near_duplicates_match_a_group_by_group_mean() -> None:
    """The grouped (vectorised) averaging against a plain loop over the groups that
    scipy's connected components give (invented points: pairs, a chain of three, loners)."""
    import warnings as _w

    import geopandas as gpd
    import shapely
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components
    from scipy.spatial import cKDTree

    from geosoil.samples import SampleSettings, _near_duplicates

    rng = np.random.default_rng(7)
    n = 300
    x, y = rng.uniform(0, 2000, n), rng.uniform(0, 2000, n)
    x[1::7], y[1::7] = x[0::7][: len(x[1::7])] + 0.4, y[0::7][: len(y[1::7])]
    x[2::7], y[2::7] = x[0::7][: len(x[2::7])] + 0.8, y[0::7][: len(y[2::7])]  # chains of 3
    ca = rng.uniform(1, 10, n)
    ca[::11] = np.nan
    pts = gpd.GeoDataFrame({"sample_id": [f"S{i}" for i in range(n)],
                            "source_row": np.arange(2, n + 2), "ca": ca},
                           geometry=shapely.points(x, y), crs="EPSG:32755")
    settings = SampleSettings(file=Path("x.csv"), duplicates="average", duplicate_distance_m=0.5)
    with _w.catch_warnings():
        _w.simplefilter("ignore")
        got = _near_duplicates(pts.copy(), settings, "x.csv", None)
    pairs = cKDTree(np.column_stack([x, y])).query_pairs(r=0.5, output_type="ndarray")
    _, label = connected_components(
        coo_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])), shape=(n, n)),
        directed=False)
    expected = {}
    for g in np.unique(label):
        members = np.flatnonzero(label == g)
        vals = ca[members]
        expected["+".join(f"S{i}" for i in members)] = (
            np.nanmean(vals) if np.isfinite(vals).any() else np.nan,
            x[members].mean(), y[members].mean())
    assert len(got) == len(expected) < n
    for sid, value, gx, gy in zip(got["sample_id"], got["ca"], got.geometry.x, got.geometry.y,
                                  strict=True):
        ev, ex, ey = expected[sid]
        assert (np.isnan(ev) and np.isnan(value)) or value == pytest.approx(ev)
        assert (gx, gy) == pytest.approx((ex, ey))


@given(
    pts=st.lists(st.tuples(st.integers(0, 40), st.integers(0, 40)), min_size=0, max_size=60),
    distance=st.sampled_from([0.5, 1.0, 1.5, 3.0]),
)
@settings(max_examples=60, deadline=None)
def test_close_pairs_match_scipys_kd_tree(pts, distance) -> None:
    """The near-duplicate pairs (shapely's STRtree) against scipy's cKDTree.query_pairs, on
    integer grids where many pairs sit exactly at the distance (both include them)."""
    from scipy.spatial import cKDTree

    from geosoil.samples import close_pairs

    xy = np.array(pts, dtype=float).reshape(-1, 2) * 0.5
    got = close_pairs(xy, distance)
    want = cKDTree(xy).query_pairs(r=distance, output_type="ndarray") if len(xy) else \
        np.empty((0, 2), dtype=int)
    want = want[np.lexsort((want[:, 1], want[:, 0]))] if len(want) else want.reshape(0, 2)
    assert got.tolist() == want.tolist()


# --------------------------------------------------------------------------- depths

DEPTH_HEADER = "Sample ID,Depth,Longitude,Latitude,Exch Ca (meq/100g),Exch Na (meq/100g)"


def test_a_depth_range_column_gives_top_and_bottom_in_cm(tmp_path: Path) -> None:
    path = lab(tmp_path, [
        "A1,0-10,147.0010,-35.0010,6.0,0.4",
        "A1,10 to 30 cm,147.0010,-35.0010,4.0,1.4",   # one place at two depths: one ID
        "A2,0–10 cm,147.0020,-35.0020,5.0,0.6",
        "A2,0.1-0.3 m,147.0020,-35.0020,3.0,1.6",
    ], header=DEPTH_HEADER)
    got = read(path).samples
    assert got["depth_top_cm"].tolist() == [0, 10, 0, 10]
    assert got["depth_bottom_cm"].tolist() == [10, 30, 10, 30]
    assert got["Depth"].tolist()[1] == "10 to 30 cm"  # the lab's column kept as written
    # the same place at two depths is not a near-duplicate
    placed = prepare_samples(got, paddocks=PADDOCKS, working_crs=UTM55,
                             settings=SampleSettings(file=path), file=str(path))
    assert len(placed) == 4


def test_top_and_bottom_columns_with_a_unit_in_the_header(tmp_path: Path) -> None:
    header = "Sample ID,Depth from (m),Depth to (m),Longitude,Latitude,Exch Ca (meq/100g)"
    path = lab(tmp_path, ["A1,0,0.1,147.0010,-35.0010,6.0", "B1,0.1,0.3,147.0010,-35.0010,4.0"],
               header=header)
    got = read(path).samples
    assert got["depth_top_cm"].tolist() == [0, 10]
    assert got["depth_bottom_cm"].tolist() == [10, 30]
    # named in the settings, with the unit of headers that name none
    header = "Sample ID,Upper,Lower,Longitude,Latitude,Exch Ca (meq/100g)"
    path = lab(tmp_path, ["A1,0,4,147.0010,-35.0010,6.0", "B1,4,12,147.0010,-35.0010,4.0"],
               header=header, name="lab2.csv")
    got = read(path, depth_top_column="Upper", depth_bottom_column="Lower",
               depth_unit="in").samples
    assert got["depth_bottom_cm"].tolist() == pytest.approx([10.16, 30.48])  # 2.54 cm/in


def test_a_depth_that_cannot_be_read_names_file_row_and_column(tmp_path: Path) -> None:
    path = lab(tmp_path, [
        "A1,0-10,147.0010,-35.0010,6.0,0.4",
        "A2,topsoil,147.0020,-35.0020,5.0,0.6",
    ], header=DEPTH_HEADER)
    err = error_of(path)
    assert (err.file, err.row, err.column) == (str(path), 3, "Depth")
    assert "'topsoil' is not a depth range" in str(err)
    assert "depths = 'ignore'" in str(err)
    # with on_bad_row = "skip" the row is listed and passed over
    with pytest.warns(DataWarning, match="row 3"):
        got = read(path, on_bad_row="skip")
    assert got.samples["sample_id"].tolist() == ["A1"]
    # "ignore" reads the file as one layer, the depth column kept as the lab wrote it (a
    # column not read, as the user asked: no warning of it)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        whole = read(path, depths="ignore")
    got = whole.samples
    assert "depth_top_cm" not in got.columns and got["Depth"].tolist() == ["0-10", "topsoil"]
    assert not any("not read" in str(w.message) for w in caught)
    assert "a depth column not read" in whole.unused["Depth"]
    # top and bottom the wrong way round
    header = "Sample ID,Top (cm),Bottom (cm),Longitude,Latitude,Exch Ca (meq/100g)"
    path = lab(tmp_path, ["A1,30,10,147.0010,-35.0010,6.0"], header=header, name="lab2.csv")
    err = error_of(path)
    assert (err.row, err.column) == (2, "Bottom (cm)")
    assert "bottom must be below the top" in str(err)


def test_a_spreadsheet_date_in_the_depth_column_is_named(tmp_path: Path) -> None:
    # Excel turns '10-30' typed in a general cell into a date
    path = tmp_path / "lab.xlsx"
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.append(["Sample ID", "Depth", "Longitude", "Latitude", "Exch Ca (meq/100g)"])
    sheet.append(["A1", "0-10", 147.001, -35.001, 6.0])
    sheet.append(["A1", pd.Timestamp("2026-10-30").to_pydatetime(), 147.001, -35.001, 4.0])
    book.save(path)
    err = error_of(path)
    assert (err.row, err.column) == (3, "Depth")
    assert "date" in str(err) and "as text" in str(err)


def test_one_id_twice_at_the_same_depth_is_still_a_duplicate(tmp_path: Path) -> None:
    path = lab(tmp_path, [
        "A1,0-10,147.0010,-35.0010,6.0,0.4",
        "A1,0-10,147.0020,-35.0020,5.0,0.6",
    ], header=DEPTH_HEADER)
    err = error_of(path)
    assert err.row == 3 and "also on row 2 at the same depth" in str(err)


def test_a_depth_column_named_in_the_settings_must_exist(tmp_path: Path) -> None:
    path = lab(tmp_path, ["A1,0-10,147.0010,-35.0010,6.0,0.4"], header=DEPTH_HEADER)
    err = error_of(path, depth_column="Dpth")
    assert err.column == "Dpth" and "did you mean 'Depth'" in str(err)
    with pytest.raises(SettingsError, match="both the top and the bottom"):
        read(path, depth_top_column="Depth")


# --------------------------------------------------------------------------- soluble cations


def test_soluble_cations_read_in_mmol_charge_per_litre_and_give_cross(tmp_path: Path) -> None:
    # units [derived]: meq/L = mmol(+)/L; Ca in mmol/L x 2; Mg in mg/L / (24.305 / 2)
    header = ("Sample ID,Longitude,Latitude,Exch Ca (meq/100g),Soluble Na (meq/L),"
              "Sol. K (meq/L),Ca 1:5 (mmol/L),Soluble Mg (mg/L)")
    path = lab(tmp_path, ["A1,147.0010,-35.0010,6.0,10,2,2,24.305",
                          "A2,147.0020,-35.0020,5.0,5,5,1,72.915"], header=header)
    read_ = read(path)
    got = read_.samples
    assert got["na_sol"].tolist() == [10, 5] and got["k_sol"].tolist() == [2, 5]
    assert got["ca_sol"].tolist() == [4, 2]
    assert got["mg_sol"].tolist() == pytest.approx([2, 6])
    assert read_.samples.attrs["solution_columns"]["mg"] == "Soluble Mg (mg/L)"
    assert "ca" in read_.columns and read_.columns["ca"] == "Exch Ca (meq/100g)"
    from geosoil.salinity import derive_samples
    out = derive_samples(got)
    # CROSS (Rengasamy & Marchuk 2011; coefficients from memory), worked by hand in
    # docs/SOURCES.md: (10 + 0.56 x 2) / sqrt((4 + 0.6 x 2) / 2) = 6.896;
    # (5 + 0.56 x 5) / sqrt((2 + 0.6 x 6) / 2) = 4.661
    assert out["cross"].tolist() == pytest.approx([6.896, 4.661], abs=5e-4)


def test_soluble_cations_named_in_the_settings(tmp_path: Path) -> None:
    header = "Sample ID,Longitude,Latitude,Exch Ca (meq/100g),SNa,SK,SCa,SMg"
    path = lab(tmp_path, ["A1,147.0010,-35.0010,6.0,10,2,4,2"], header=header)
    got = read(path, solution_columns={"na": "SNa", "k": "SK", "ca": "SCa", "mg": "SMg"}).samples
    assert [got[c].iloc[0] for c in ("na_sol", "k_sol", "ca_sol", "mg_sol")] == [10, 2, 4, 2]
    err = error_of(path, solution_columns={"na": "Sna"})
    assert err.column == "Sna" and "did you mean 'SNa'" in str(err)
    with pytest.raises(SettingsError, match="not a soluble cation"):
        SampleSettings(file=path, solution_columns={"cl": "SCl"})
    # without a solution unit, a header is not taken as soluble: an exchangeable "Na" stays
    assert "na_sol" not in read(lab(tmp_path, ["A1,147.0010,-35.0010,6.0,0.4"],
                                    header="Sample ID,Longitude,Latitude,Ca,Na",
                                    name="x.csv")).samples.columns


# --------------------------------------------------------------------------- unit stated by no one

# Invented amounts of a loam in mmol(+)/kg (ECEC about 12-19 cmol(+)/kg); headers state no unit.
_NO_UNIT_HEADER = "ID,Lon,Lat,Ca,Mg,K,Na"
_NO_UNIT_ROWS = [f"S{i},147.00{i},-35.00{i},{ca},{mg},{k},{na}" for i, (ca, mg, k, na) in
                 enumerate([(126.7, 33.1, 8.2, 4.2), (108.3, 25.5, 8.4, 3.9),
                            (94.3, 24.4, 8.7, 3.6), (141.0, 40.2, 7.9, 5.1)], start=1)]


def test_unstated_units_ten_times_too_large_are_suspected_for_the_whole_farm(tmp_path):
    # user trial: mmol(+)/kg read as cmol(+)/kg gave ten times the gypsum, with only the
    # largest values flagged one by one and 'skip' offered as the fix
    path = lab(tmp_path, header=_NO_UNIT_HEADER, rows=_NO_UNIT_ROWS)
    err = error_of(path, on_bad_row="skip")
    text = str(err)
    assert err.column == "Ca" and "'Ca', 'Mg', 'K', 'Na'" in text
    assert "cmol/kg ([samples] default_unit)" in text and "probably mmol/kg" in text
    # the range seen: row sums 131.0 (94.3 + 24.4 + 8.7 + 3.6) to 194.2 (hand arithmetic)
    assert "131-194 cmol(+)/kg" in text
    assert "ca = 'mmol/kg'" in err.fix and "na = 'mmol/kg'" in err.fix
    assert "skip" not in text


def test_the_stated_unit_reads_the_same_file_in_cmol(tmp_path):
    path = lab(tmp_path, header=_NO_UNIT_HEADER, rows=_NO_UNIT_ROWS)
    got = read(path, units={a: "mmol/kg" for a in ("ca", "mg", "k", "na")})
    # 1 cmol(+)/kg = 10 mmol(+)/kg (SI prefixes): 126.7 mmol(+)/kg is 12.67 cmol(+)/kg
    assert got.samples["ca"].iloc[0] == pytest.approx(12.67)
    assert got.assumed_units == () and got.unit_problem is None


def test_unstated_units_in_mg_kg_point_to_mg_kg(tmp_path):
    rows = [f"S{i},147.00{i},-35.00{i},{ca},{mg},{k},{na}" for i, (ca, mg, k, na) in
            enumerate([(2539, 402, 321, 97), (2170, 310, 328, 90), (1890, 297, 340, 83)],
                      start=1)]
    err = error_of(lab(tmp_path, header=_NO_UNIT_HEADER, rows=rows))
    assert "probably mg/kg" in str(err) and "ca = 'mg/kg'" in err.fix


def test_plausible_unstated_units_are_read_and_listed_as_assumed(tmp_path):
    rows = [f"S{i},147.00{i},-35.00{i},{ca},{mg},0.8,0.4" for i, (ca, mg) in
            enumerate([(12.7, 3.3), (10.8, 2.5), (9.4, 2.4)], start=1)]
    got = read(lab(tmp_path, header=_NO_UNIT_HEADER, rows=rows))
    assert got.assumed_units == ("ca", "mg", "k", "na") and got.unit_problem is None


def test_a_suspected_unit_can_be_kept_for_new(tmp_path):
    path = lab(tmp_path, header=_NO_UNIT_HEADER, rows=_NO_UNIT_ROWS)
    got = read_samples(SampleSettings(file=path), suspect_units="keep")
    assert "probably mmol/kg" in got.unit_problem and got.skipped == []


def test_cations_in_g_kg_are_element_mass_per_kg(tmp_path):
    # user trial: Ca/Mg/K/Na over a units row of g/kg were dropped without a word.
    # 2.539 g/kg of Ca = 2539 mg/kg / 200.39 mg per cmol(+) (IUPAC atomic weight 40.078 / 2
    # x 10) = 12.670 cmol(+)/kg; 0.097 g/kg of Na / 229.90 = 0.4219 (hand arithmetic)
    path = write(tmp_path, "ID,Lon,Lat,Ca,Na,Organic carbon\n,deg,deg,g/kg,g/kg,g/kg\n"
                           "S1,147.001,-35.001,2.539,0.097,8.9\n")
    got = read(path)
    assert got.samples["ca"].iloc[0] == pytest.approx(12.670, abs=5e-4)
    assert got.samples["na"].iloc[0] == pytest.approx(0.4219, abs=5e-5)
    assert got.samples["oc"].iloc[0] == pytest.approx(0.89)  # g/kg / 10 = %
    assert got.units["ca"] == "g/kg" and got.unused == {}


def test_columns_not_read_are_listed_with_why(tmp_path):
    path = write(tmp_path, "ID,Lon,Lat,Ca (cmol(+)/kg),Ca %,Colwell K,Kalzium frei,Notes\n"
                           "S1,147.001,-35.001,5.0,60,120,3,x\n")
    got = read(path)
    assert got.unused == {
        "Ca %": "a percentage (saturation), not an amount",
        "Colwell K": "another extract or measure, not the exchangeable amount",
        "Kalzium frei": "name not recognised",
        "Notes": "record keeping, not an analyte",
    }


def test_record_keeping_columns_are_no_warning_analyte_like_ones_are(tmp_path, caplog):
    # user trial: every run warned of the demo's 'Comments'. Columns that plainly keep
    # records (a comment, a date, a lab number) are one info line; columns that may hold an
    # analyte geosoil does not use stay a warning; every one stays in SampleRead.unused
    path = write(tmp_path, "Sample ID,Lon,Lat,Ca (cmol(+)/kg),Notes,Date sampled,Lab no.,Zn,"
                           "B (mg/kg),Olsen P\nS1,147.001,-35.001,5.0,dry,2026-03-01,L17,2,0.5,"
                           "12\n")
    with caplog.at_level("INFO", logger="geosoil.samples"), \
            warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        got = read(path)
    said = [str(w.message) for w in caught]
    assert len(said) == 1 and "3 column(s) not read" in said[0]
    assert all(f"'{h}'" in said[0] for h in ("Zn", "B (mg/kg)", "Olsen P"))
    assert not any(h in said[0] for h in ("Notes", "Date sampled", "Lab no."))
    assert list(got.unused) == ["Notes", "Date sampled", "Lab no.", "Zn", "B (mg/kg)",
                                "Olsen P"]
    info = [r.getMessage() for r in caplog.records if "record-keeping" in r.getMessage()]
    assert info == [f"{path}: 3 record-keeping column(s) not read, kept as the lab's own "
                    "columns: 'Notes', 'Date sampled', 'Lab no.'"]


@pytest.mark.parametrize("word", ["n.d.", "ND", "nd", "<LOD", "<LOR", "bdl", "BDL", "< LOD"])
def test_lab_words_for_below_detection_take_the_column_s_stated_limit(tmp_path, word):
    # user trial: 'n.d.' and '<LOD' were "not a number". Like '<0.2' they are below the
    # detection limit; they give no limit, so the smallest one the column states (0.2) is
    # used, halved as '<0.2' is (common practice)
    rows = [ROWS[0].replace(",0.1,5.9", ",<0.2,5.9"), ROWS[1].replace(",0.2,5.6", f",{word},5.6")]
    with pytest.warns(DataWarning, match="smallest stated limit, 0.2") as caught:
        got = read(lab(tmp_path, rows=rows))
    assert got.samples.al.tolist() == pytest.approx([0.1, 0.1])
    assert any(word in str(w.message) for w in caught)


def test_below_detection_without_any_limit_is_zero_and_said(tmp_path):
    rows = [ROWS[0], ROWS[1].replace(",0.2,5.6", ",n.d.,5.6")]
    with pytest.warns(DataWarning, match="no limit is stated anywhere in the column, so they "
                                        "are taken as 0"):
        got = read(lab(tmp_path, rows=rows))
    assert got.samples.al.iloc[1] == 0.0


def test_below_detection_words_stop_when_asked_and_a_ph_has_no_detection_limit(tmp_path):
    rows = [ROWS[0], ROWS[1].replace(",0.2,5.6", ",n.d.,5.6")]
    err = error_of(lab(tmp_path, rows=rows), below_detection="stop")
    assert_names(err, file=tmp_path / "lab.csv", row=3, column="Exch Al (meq/100g)")
    rows = [ROWS[0], ROWS[1].replace(",0.2,5.6", ",0.2,n.d.")]
    err = error_of(lab(tmp_path, rows=rows))
    assert_names(err, file=tmp_path / "lab.csv", row=3, column="pH (water)")
    assert "'n.d.' is not a number" in str(err)


@pytest.mark.parametrize("text, expected", [
    # hand arithmetic: degrees + minutes / 60 + seconds / 3600, south and west negative
    ("34°41.1760'S", -(34 + 41.1760 / 60)),           # -34.6862667
    ("147°27'12.5\"E", 147 + 27 / 60 + 12.5 / 3600),  # 147.4534722
    ("S 34° 41' 10.56\"", -(34 + 41 / 60 + 10.56 / 3600)),
    ("-34°41'", -(34 + 41 / 60)),
    ("147.4523°", 147.4523),
    ("34°41′10″S", -(34 + 41 / 60 + 10 / 3600)),
    # separated by spaces or colons (user trial: "34 41 10 S" was "not a number"):
    # 34 + 41/60 + 10/3600 = 34.6861111; 147 + 27/60 + 12/3600 = 147.4533333
    ("34 41 10 S", -34.686111111111111),
    ("147 27 12 E", 147.45333333333333),
    ("-34 41 10", -34.686111111111111),
    ("S 34 41 10", -34.686111111111111),
    ("34:41:10 S", -34.686111111111111),
    ("-34:41:10", -34.686111111111111),
    ("147 : 27 : 12.5", 147 + 27 / 60 + 12.5 / 3600),  # 147.4534722
    ("34 41.1760 S", -(34 + 41.1760 / 60)),              # degrees and decimal minutes
    ("34 41 S", -(34 + 41 / 60)),
    ("34.6861 S", -34.6861),                              # decimal degrees and a letter
    ("147 27 12,5 E", 147 + 27 / 60 + 12.5 / 3600),      # a decimal comma
])
def test_degrees_minutes_seconds(text, expected):
    from geosoil.samples import parse_degrees

    assert parse_degrees(text)[0] == pytest.approx(expected, abs=1e-12)


@pytest.mark.parametrize("text", ["34°75'S", "34°41'61\"S", "S34°E", "-34°41'S",
                                  "34.5°41'10\"", "34 75 S", "-34 41 10 S", "6 123 456",
                                  "34:41 10", "34.5 41 10", "S 34 41 10 S", "12", "-12.5"])
def test_degrees_that_are_not_a_coordinate(text):
    from geosoil.samples import parse_degrees

    assert parse_degrees(text) is None


@pytest.mark.parametrize("text, why", [
    ("-34 41 10 S", "both a sign and a hemisphere letter"),
    ("34 75 10 S", "minutes (75) are not below 60"),
    ("34:41:60", "seconds (60) are not below 60"),
    ("6 123 456", "thousands spaced (6123456)"),
    ("S 34 41 10 S", "a hemisphere letter at both ends"),
    ("34.5 41 10", "only its last part"),
])
def test_ambiguous_degrees_cells_are_named_by_row_and_column(tmp_path, text, why):
    # user trial: a cell that reads as degrees in more than one way (or in none) is named
    path = write(tmp_path, "ID,Latitude,Longitude,Ca (cmol(+)/kg)\n"
                           "S1,34 41 10 S,147 27 12 E,5.0\n"
                           f"S2,{text},147 27 12 E,5.5\n")
    err = error_of(path)
    assert_names(err, file=path, row=3, column="Latitude")
    assert f"'{text}' cannot be read as degrees" in str(err) and why in str(err)
    assert "34 41 10 S" in err.fix


def test_coordinates_separated_by_spaces_or_colons_are_read(tmp_path):
    # user trial: "34 41 10 S" and "-34 41 10" were "not a number". Hand-converted:
    # 34°41'10" = 34 + 41/60 + 10/3600 = 34.686111; 147°27'12" = 147.453333;
    # 34°41'12.6" = 34.686833; 147°27'9" = 147.4525 (south and west negative)
    path = write(tmp_path, "ID,Latitude,Longitude,Ca (cmol(+)/kg)\n"
                           "S1,34 41 10 S,147 27 12 E,5.0\n"
                           "S2,-34 41 12.6,147 27 9,5.5\n"
                           "S3,34:41:10 S,147:27:12 E,6.0\n")
    got = read(path)
    assert got.samples.geometry.y.tolist() == pytest.approx([-34.686111, -34.686833,
                                                             -34.686111], abs=5e-7)
    assert got.samples.geometry.x.tolist() == pytest.approx([147.453333, 147.4525,
                                                             147.453333], abs=5e-7)
    assert got.crs.to_epsg() == 4326


def test_coordinates_in_degrees_and_minutes_are_read(tmp_path):
    # user trial: "34°41.1760'S" was "not a number"
    path = write(tmp_path, "ID,Latitude,Longitude,Ca (cmol(+)/kg)\n"
                           "S1,34°41.1760'S,147°27'12.5\"E,5.0\n"
                           "S2,34°41.2000'S,147°27.3000'E,5.5\n")
    got = read(path)
    assert got.samples.geometry.y.tolist() == pytest.approx([-(34 + 41.1760 / 60),
                                                             -(34 + 41.2 / 60)])
    assert got.samples.geometry.x.tolist() == pytest.approx([147 + 27 / 60 + 12.5 / 3600,
                                                             147 + 27.3 / 60])
    assert got.crs.to_epsg() == 4326


def test_a_latitude_letter_in_the_longitude_column_is_named(tmp_path):
    path = write(tmp_path, "ID,Latitude,Longitude,Ca (cmol(+)/kg)\n"
                           "S1,147°27'12.5\"E,34°41.1760'S,5.0\n")
    err = error_of(path)
    assert "is a latitude (S) in the longitude column" in str(err) or \
        "is a longitude (E) in the latitude column" in str(err)


# hand arithmetic: 59 + 10.393 / 60 = 59.17321667 degrees; the hemisphere letters of
# Spanish (Oeste), Portuguese (Oeste, Leste), French (Ouest) and German (Ost) are the
# languages' own words for west and east
_O_ROWS = "M1,34°19.297'S,59°10.393'O,5.0\nM2,34°19.221'S,59°10.387'O,5.5\n"


@pytest.mark.parametrize("header, west", [
    ("Muestra,Latitud,Longitud,Ca intercambiable (cmol/kg)", True),       # Spanish: oeste
    ("Amostra,Latitude,Longitude,Cálcio trocável (cmol/kg)", True),       # Portuguese: oeste
    ("Échantillon,Latitude,Longitude,Ca échangeable (cmol/kg)", True),    # French: ouest
    ("Probe,Breite,Länge,Calcium austauschbar (cmol/kg)", False),        # German: Ost
])
def test_the_letter_o_of_a_longitude_is_read_by_the_headers_language(tmp_path, header, west):
    # user trial: "59°10.393'O" in a Spanish workbook was "not a number"
    got = read(write(tmp_path, header + "\n" + _O_ROWS))
    x = got.samples.geometry.x.tolist()
    sign = -1 if west else 1
    assert x == pytest.approx([sign * (59 + 10.393 / 60), sign * (59 + 10.387 / 60)])
    assert got.samples.geometry.y.iloc[0] == pytest.approx(-(34 + 19.297 / 60))


def test_the_letter_o_with_english_headers_is_refused_naming_row_column_and_setting(tmp_path):
    path = write(tmp_path, "ID,Lat,Long,Ca (cmol/kg)\n" + _O_ROWS)
    err = error_of(path)
    assert_names(err, file=path, row=2, column="Long")
    assert "west in Spanish, Portuguese and French" in str(err)
    assert "east in German" in str(err) and "letter_o" in err.fix
    assert "(and 1 more cell)" in str(err)
    # a setting decides it, not a row: skipping bad rows does not pass over it
    from geosoil.samples import SettingNeededError

    assert isinstance(error_of(path, on_bad_row="skip"), SettingNeededError)
    for setting, sign in (("west", -1), ("east", 1)):
        got = read(path, letter_o=setting)
        assert got.samples.geometry.x.iloc[0] == pytest.approx(sign * (59 + 10.393 / 60))


def test_the_letter_o_after_spaced_degrees_minutes_seconds(tmp_path):
    # hand arithmetic: 59 + 10 / 60 + 23.6 / 3600 = 59.17322222 degrees, west
    got = read(write(tmp_path, "Muestra,Latitud,Longitud,Ca (cmol/kg)\n"
                               "M1,34 19 17.8 S,59 10 23.6 O,5.0\n"))
    assert got.samples.geometry.x.iloc[0] == pytest.approx(-(59 + 10 / 60 + 23.6 / 3600))


def test_the_letter_l_is_east_and_an_o_in_the_latitude_column_is_named(tmp_path):
    got = read(write(tmp_path, "Amostra,Latitude,Longitude,Ca (cmol/kg)\n"
                               "P1,34°19.297'S,59°10.393'L,5.0\n"))
    assert got.samples.geometry.x.iloc[0] == pytest.approx(59 + 10.393 / 60)
    path = write(tmp_path, "Muestra,Latitud,Longitud,Ca (cmol/kg)\n"
                           "M1,59°10.393'O,34°19.297'S,5.0\n")
    assert "is a longitude (O) in the latitude column" in str(error_of(path))


_NOTE = "Methods: pH 1:5 water; cations 1 M NH4Cl"


@pytest.mark.parametrize("kind", ["csv", "xlsx"])
def test_a_note_below_the_table_is_passed_over_and_said(tmp_path, kind):
    # user trial: a last row "Methods: pH 1:5 water..." stopped the run ("row 9 ... the
    # coordinate is empty"); it is a note, not a sample, and is said
    header = HEADER.split(",")
    lines = [header, *(r.split(",") for r in ROWS[:3]), [""] * len(header), [_NOTE],
             ["Results relate to the samples as received"]]
    if kind == "csv":
        path = write(tmp_path, "\n".join(",".join(f'"{c}"' if "," in c else c for c in line)
                                         for line in lines) + "\n")
    else:
        path = _workbook(tmp_path / "lab.xlsx", {"Results": [
            [float(c) if c.replace(".", "").replace("-", "").isdigit() else (c or None)
             for c in line] for line in lines]})
    with pytest.warns(DataWarning, match=r"2 note row\(s\) below the table passed over, not "
                                         r"samples: row 6: 'Methods: pH 1:5 water"):
        got = read(path)
    assert got.samples.sample_id.tolist() == ["A1", "A2", "A3"]
    assert got.footnotes == [(6, _NOTE), (7, "Results relate to the samples as received")]
    assert got.skipped == []


def test_a_lone_sample_id_at_the_end_stays_a_bad_row(tmp_path):
    # an ID with no values is a sample with missing cells, not a note
    path = lab(tmp_path, rows=[*ROWS[:3], "A4,,,,,,,,,"])
    err = error_of(path)
    assert_names(err, file=path, row=5, column="Longitude")
    assert "the coordinate is empty" in str(err)


def _workbook(path: Path, sheets: dict[str, list[list]]) -> Path:
    book = openpyxl.Workbook()
    book.remove(book.active)
    for title, lines in sheets.items():
        sheet = book.create_sheet(title)
        for line in lines:
            sheet.append(line)
    book.save(path)
    return path


_RESULTS = [["Muestra", "Longitud", "Latitud", "Ca intercambiable (cmol(+)/kg)"],
            ["M1", 147.001, -35.001, 5.0], ["M2", 147.002, -35.002, 6.0]]


def test_a_cover_sheet_before_the_results_is_passed_over_and_named(tmp_path):
    # user trial: a cover sheet ('Portada') first gave "the file has no data rows"
    path = _workbook(tmp_path / "lab.xlsx", {
        "Portada": [["Informe de análisis de suelos"], ["Cliente: invented farm"]],
        "Resultados": _RESULTS})
    with pytest.warns(DataWarning, match="read sheet 'Resultados'.*'Portada', 'Resultados'.*"
                                         "sheet_or_layer"):
        got = read(path)
    assert got.samples["ca"].tolist() == [5.0, 6.0]
    assert (got.sheet, got.sheets) == ("Resultados", ("Portada", "Resultados"))


def test_a_workbook_without_any_table_names_its_sheets(tmp_path):
    path = _workbook(tmp_path / "lab.xlsx", {"Portada": [["Informe"]], "Notas": [["nada"]]})
    err = error_of(path)
    assert "no sheet of the workbook holds a table" in str(err)
    assert "'Portada', 'Notas'" in str(err) and "sheet_or_layer" in err.fix


def test_readme_and_the_setting_say_what_the_default_below_detection_does(tmp_path):
    # user trial: README said below-detection words take "the column's smallest stated
    # limit", while the default `new` writes, below_detection = "half", halves it
    import dataclasses

    field = next(f for f in dataclasses.fields(SampleSettings) if f.name == "below_detection")
    assert field.default == "half"  # what `new` writes (every setting at its default)
    assert "'n.d.', '<LOD', 'bdl' take the column's smallest stated limit" in str(
        field.metadata)
    readme = " ".join((Path(__file__).parent.parent / "README.md").read_text(
        encoding="utf-8").split())
    assert "below detection (`<0.1`) as half the limit by default" in readme
    assert "`n.d.`, `<LOD`, `bdl` alike, with the column's smallest stated limit" in readme
    # and the code does what they say: '<0.2' and 'n.d.' in one column are both 0.1
    rows = [ROWS[0].replace(",0.1,5.9", ",<0.2,5.9"), ROWS[1].replace(",0.2,5.6", ",n.d.,5.6")]
    with pytest.warns(DataWarning, match="taken as half the limit"):
        got = read(lab(tmp_path, rows=rows))
    assert got.samples.al.tolist() == pytest.approx([0.1, 0.1])


def test_every_row_bad_gives_the_example_s_own_fix(tmp_path):
    # user trial: "every row is bad, e.g. ... not a number" said only "check the file and
    # the [samples] settings"; the example's own fix comes first
    rows = [",".join(f if k != 1 else "147°00.060'X" for k, f in enumerate(r.split(",")))
            for r in ROWS]
    err = error_of(lab(tmp_path, rows=rows), on_bad_row="skip")
    assert "every row is bad" in str(err)
    assert err.fix.startswith("give the sample's location in decimal degrees")
    assert err.fix.endswith("else check the file and the [samples] settings")
