"""Reading lab results with locations into a checked samples GeoDataFrame.  [I/O]

Accepted files: CSV (comma, semicolon or tab separated; decimal point, or
decimal comma with ';' or tab separators; UTF-8 with or without BOM, or UTF-16
with BOM as Excel's 'Unicode text' export), Excel
workbooks (.xlsx, .xlsm), GeoJSON, GeoPackage and shapefile (.shp, or zipped
.zip). Columns are recognised by :func:`geosoil.columns.detect_columns`;
``[samples.columns]`` and ``[samples.units]`` override what the headers say.
Exchangeable amounts are converted to cmol(+)/kg with
:func:`geosoil.units.to_cmol_kg`; the lab's other columns are kept as they were.

Rows are numbered as a person numbers them in the file: in CSV and Excel the
header is row 1 and the first data row is row 2 (Excel: the sheet's own row
numbers); in vector files the feature number from 1. Labs often put a title,
the client or a date above the header: in CSV and Excel the header is the row
among the first :data:`HEADER_SEARCH_ROWS` that names the most analytes, sample
ID and coordinate columns, and the rows above it are passed over. A row of units
right under the header (``meq/100g``, ``mg/kg``, ...: no numbers, at least one
cation unit) gives the unit of each column whose header names none. Every problem with a row
raises :class:`~geosoil.errors.InputError` naming the file, row, column and the
fix; with ``on_bad_row = "skip"`` the row is passed over instead, listed in
:attr:`SampleRead.skipped` and in a :class:`~geosoil.errors.DataWarning` (unless the caller
reports them itself: ``warn_skipped=False``).
Input files are only read, never written.

Plausible ranges (:data:`PLAUSIBLE_MAX_CMOL`, :data:`PLAUSIBLE_PH`,
:data:`PLAUSIBLE_MAX_SAR`) are common practice: generous upper bounds meant to
catch a wrong unit (Ca = 1500 "cmol(+)/kg" is mg/kg), not to judge real soils.

Examples
--------
>>> import tempfile, pathlib
>>> folder = pathlib.Path(tempfile.mkdtemp())
>>> _ = (folder / "lab.csv").write_text(
...     "Sample;Lon;Lat;Ca (mg/kg);Mg;K;Na\\n"
...     "A1;146,90;-35,10;1002;3,0;0,5;0,4\\n"
...     "A2;146,91;-35,11;801,6;2,5;0,4;0,3\\n", encoding="utf-8")
>>> read = read_samples(SampleSettings(file=folder / "lab.csv"))
>>> read.samples[["sample_id", "source_row", "ca", "mg"]].round(3).to_dict("list")
{'sample_id': ['A1', 'A2'], 'source_row': [2, 3], 'ca': [5.0, 4.0], 'mg': [3.0, 2.5]}
>>> read.units["ca"], read.units["mg"], read.crs.to_epsg()
('mg/kg', 'cmol/kg', 4326)
"""

from __future__ import annotations

import csv
import dataclasses
import difflib
import io
import logging
import math
import re
import warnings
import zipfile
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import Any, NamedTuple, NoReturn, cast
from xml.etree import ElementTree

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj
import shapely
from numpy.typing import NDArray

from .chemistry import DERIVED, SOLUBLE_DERIVED
from .columns import (
    BUFFER_PH,
    CANONICAL,
    PH_METHODS,
    PROPERTIES,
    PROPERTY_UNIT_TEXTS,
    UNITLESS,
    detect_columns,
    is_bookkeeping,
    letter_o_reading,
    parse_header,
)
from .crs import describe_crs, parse_crs
from .errors import CRSError, DataWarning, InputError, SettingsError
from .layers import DEPTH_UNITS, check_depths, depth_role, depth_unit_of, parse_depth
from .salinity import to_ds_m
from .settings import setting
from .units import (
    CATION_UNITS,
    DEFAULT_SCOOP_DENSITY_G_CM3,
    ELEMENT_MASS_UNITS,
    LAB_UNITS,
    VOLUMETRIC_UNITS,
    from_cmol_kg,
    mg_per_cmol,
    normalise_unit,
    to_cmol_kg,
)
from .vectors import read_layer

__all__ = [
    "DEPTH_COLUMNS",
    "SOLUTION_COLUMNS",
    "SOLUTION_UNITS",
    "SampleSettings",
    "SampleRead",
    "CRSInputError",
    "PLAUSIBLE_MAX_CMOL",
    "PLAUSIBLE_PH",
    "PLAUSIBLE_MAX_SAR",
    "PLAUSIBLE_BUFFER_PH",
    "PLAUSIBLE_MAX_PROPERTY",
    "TYPICAL_MAX_ECEC_CMOL",
    "TYPICAL_MIN_ECEC_CMOL",
    "HEADER_SEARCH_ROWS",
    "read_samples",
    "read_columns",
    "SettingNeededError",
    "prepare_samples",
    "unused_message",
    "RECORD_KEEPING",
    "record_keeping",
    "record_keeping_message",
    "parse_degrees",
    "degrees_problem",
]

logger = logging.getLogger(__name__)

#: Largest plausible exchangeable amount, cmol(+)/kg (common practice; generous,
#: to catch values in the wrong unit). cec covers organic soils.
PLAUSIBLE_MAX_CMOL: dict[str, float] = {
    "ca": 150.0,
    "mg": 80.0,
    "k": 25.0,
    "na": 80.0,
    "al": 30.0,
    "h": 30.0,
    "acidity": 40.0,
    "acidity_potential": 60.0,
    "cec": 300.0,
    "cec_ph7": 300.0,
}
#: Largest median ECEC (cmol(+)/kg) a farm's samples are taken to have when the lab's
#: columns state no unit (common practice, from memory: the effective CEC of mineral soils
#: seldom passes about 40-60 cmol(+)/kg even in heavy smectitic clays; organic soils go
#: higher). Above it the unit assumed is suspected first: mmol(+)/kg read as cmol(+)/kg
#: makes every amount ten times too large, which a per-value bound catches only in part.
TYPICAL_MAX_ECEC_CMOL: float = 60.0
#: Smallest median ECEC (cmol(+)/kg) a unit offered instead may give (common practice, from
#: memory: the ECEC of sandy soils runs down to about 1 cmol(+)/kg).
TYPICAL_MIN_ECEC_CMOL: float = 1.0
#: Plausible buffer pH range (common practice: the buffers start at pH 7.5 to 8.0 and
#: strongly acid soils bring them down to about 4.5).
PLAUSIBLE_BUFFER_PH: tuple[float, float] = (3.5, 8.5)
#: Largest plausible organic carbon, organic matter and clay (%), and pHBC (cmol(+)/kg/pH)
#: (common practice; generous, to catch a wrong unit such as g/kg read as %).
PLAUSIBLE_MAX_PROPERTY: dict[str, float] = {"oc": 60.0, "om": 100.0, "clay": 100.0,
                                           "phbc": 30.0, "ec_1_5": 30.0, "ece": 300.0}
#: Plausible soil pH range (common practice; acid sulfate soils reach below 3).
PLAUSIBLE_PH: tuple[float, float] = (1.5, 12.5)
#: Largest plausible SAR (common practice).
PLAUSIBLE_MAX_SAR: float = 300.0
#: Non-empty rows at the top of a CSV file or sheet searched for the header row.
HEADER_SEARCH_ROWS: int = 30

_TABLE_SUFFIXES = (".csv", ".txt", ".tsv")
#: Amounts given in charge only: no mg/kg or g/kg form.
_NO_MASS_FORM = ("acidity", "acidity_potential", "cec", "cec_ph7")
_EXCEL_SUFFIXES = (".xlsx", ".xlsm")
_VECTOR_SUFFIXES = (".geojson", ".json", ".gpkg", ".shp", ".zip")
_EMPTY_WORDS = {"", "na", "n/a", "n.a.", "-", "--", "nan", "none", "null"}
#: Cells that say "below the detection limit" without a number (spaces taken out): not
#: detected, below detection limit, below the limit of detection / reporting /
#: quantification (common lab shorthand).
_BELOW_WORDS = {"n.d.", "n.d", "nd", "bdl", "b.d.l.", "bld", "<lod", "<lor", "<dl", "<d.l.",
                "<loq", "<ld", "notdetected", "belowdetection", "belowdetectionlimit"}
#: The columns the depth of each sample is read into (cm below the surface).
DEPTH_COLUMNS = ("depth_top_cm", "depth_bottom_cm")

#: Soluble (solution) cations of an extract, read into these columns in mmol(+)/L (meq/L).
SOLUTION_COLUMNS: dict[str, str] = {"na": "na_sol", "k": "k_sol", "ca": "ca_sol", "mg": "mg_sol"}
#: Units of solution concentrations and their factor to mmol(+)/L for each ion [derived]:
#: meq/L = mmolc/L = mmol(+)/L; mmol/L x charge; mg/L / (atomic weight / charge).
SOLUTION_UNITS: tuple[str, ...] = ("mmolc/L", "mmol/L", "mg/L")
_ION_WORDS = {"na": "na", "sodium": "na", "k": "k", "potassium": "k", "ca": "ca",
              "calcium": "ca", "mg": "mg", "magnesium": "mg"}
_SOLUTION_UNIT_TEXT = re.compile(
    r"(meq|mmolc|mmol\s*\(\+\)|mmol\s*\+|mmol_c|mmol|mg)\s*/\s*l\b", re.IGNORECASE)
_SOLUTION_WORDS = {"soluble", "sol", "solution", "water", "extract", "sat", "saturation",
                   "paste", "se", "in", "h", "o"}

_RESERVED = set(CANONICAL) | set(DERIVED) | set(SOLUBLE_DERIVED) | {
    "sample_id", "source_row", "paddock", "geometry", "layer", *DEPTH_COLUMNS,
    *SOLUTION_COLUMNS.values(), "cross"}


@dataclasses.dataclass(frozen=True)
class SampleSettings:
    """Where the lab results are and how to read them (the ``[samples]`` table)."""

    file: Path = setting(
        doc="lab results: CSV, Excel (.xlsx), GeoJSON, GeoPackage or shapefile (.shp or .zip)"
    )
    sheet_or_layer: str | None = setting(
        None,
        doc="Excel sheet or GeoPackage layer to read (default: the first sheet, the only layer)",
    )
    id_column: str | None = setting(None, doc="header of the sample ID (default: detected)")
    x_column: str | None = setting(
        None, doc="header of longitude or easting (default: detected; tables only)"
    )
    y_column: str | None = setting(
        None, doc="header of latitude or northing (default: detected; tables only)"
    )
    crs: str | None = setting(
        None,
        doc="CRS of the coordinates: EPSG code ('EPSG:28355'), authority string or WKT "
        "(default: the file's own, else WGS 84 longitude/latitude when they look like it)",
    )
    letter_o: str = setting(
        "auto",
        doc="what the letter O after a longitude in degrees means (59°10.4'O): 'west' "
        "(oeste, ouest: Spanish, Portuguese, French), 'east' (Ost: German), or 'auto': "
        "the language of the headers says",
        choices=("auto", "west", "east"),
    )
    columns: dict[str, str] = setting(
        default_factory=dict,
        doc="analyte -> header, overriding detection (analytes: " + ", ".join(CANONICAL) + ")",
    )
    units: dict[str, str] = setting(
        default_factory=dict,
        doc="analyte -> unit, overriding the header (" + ", ".join(LAB_UNITS) + "; oc, om "
        "and clay: %, g/kg; phbc: cmol/kg/pH, mmol/kg/pH; ec_1_5 and ece: dS/m, mS/cm, uS/cm, "
        "mS/m)",
    )
    scoop_density_g_cm3: float = setting(
        DEFAULT_SCOOP_DENSITY_G_CM3,
        doc="density of the soil the lab measured by volume (scoop), used to read "
        + ", ".join(VOLUMETRIC_UNITS) + " as cmol(+)/kg (1 when the lab states none: a "
        "convention)",
        unit="g/cm3", minimum=0.3, maximum=2.0,
    )
    default_unit: str = setting(
        "cmol/kg", doc="unit of exchangeable columns whose header names none"
    )
    empty_allowed: tuple[str, ...] = setting(
        ("al", "h", "acidity", "acidity_potential", "cec", "sar", "sar_1to5", *BUFFER_PH),
        doc="analytes whose empty cells mean 'not measured' (elsewhere an empty cell is an error)",
    )
    below_detection: str = setting(
        "half",
        doc="values below detection such as '<0.1': 'half' the limit (common practice), the "
        "'limit', 'zero', or 'stop'; 'n.d.', '<LOD', 'bdl' take the column's smallest stated "
        "limit (else 0) and are treated alike",
        choices=("half", "limit", "zero", "stop"),
    )
    duplicates: str = setting(
        "stop",
        doc="samples closer than duplicate_distance_m: 'stop', or 'average' them into one",
        choices=("stop", "average"),
    )
    duplicate_distance_m: float = setting(
        1.0, doc="samples closer than this are at the same place", unit="m", minimum=0.0,
        maximum=1000.0,
    )
    on_bad_row: str = setting(
        "stop", doc="a bad row: 'stop' with an error, or 'skip' it and list it",
        choices=("stop", "skip"),
    )
    depths: str = setting(
        "layers",
        doc="the samples' depth: 'layers' (samples at several depths make separate layers) "
        "or 'ignore' (every sample is of the one treated layer, the depth column kept as "
        "the lab wrote it)",
        choices=("layers", "ignore"),
    )
    depth_column: str | None = setting(
        None, doc="header of the depth range ('0-10', '10-30 cm'; default: detected)"
    )
    depth_top_column: str | None = setting(
        None, doc="header of the top of each sample's depth, when the lab gives top and "
        "bottom apart (default: detected)"
    )
    depth_bottom_column: str | None = setting(
        None, doc="header of the bottom of each sample's depth (default: detected)"
    )
    depth_unit: str = setting(
        "cm", doc="unit of depths whose header and cell name none",
        choices=tuple(DEPTH_UNITS),
    )
    solution_columns: dict[str, str] = setting(
        default_factory=dict,
        doc="soluble cations of an extract (na, k, ca, mg) -> header, for CROSS (default: "
        "detected from headers naming a solution unit, as 'Soluble Na (meq/L)')",
    )
    solution_unit: str = setting(
        "mmolc/L", doc="unit of soluble cations whose header names none (mmolc/L = meq/L)",
        choices=SOLUTION_UNITS,
    )

    def __post_init__(self) -> None:
        # Choices and ranges are checked by settings.from_mapping; these are the checks it
        # cannot make (keys of the tables, units, the CRS).
        for analyte in (*self.columns, *self.units, *self.empty_allowed):
            if analyte not in CANONICAL:
                near = difflib.get_close_matches(analyte, CANONICAL, n=1)
                hint = f"; did you mean '{near[0]}'?" if near else ""
                key = "empty_allowed" if analyte in self.empty_allowed else (
                    f"columns.{analyte}" if analyte in self.columns else f"units.{analyte}"
                )
                raise SettingsError(
                    f"'{analyte}' is not an analyte{hint} Analytes: {', '.join(CANONICAL)}",
                    key=key,
                )
        for analyte, unit in self.units.items():
            if analyte in UNITLESS:
                raise SettingsError(f"{analyte} has no unit; remove it", key=f"units.{analyte}")
            if analyte in PROPERTIES:
                if unit not in PROPERTIES[analyte]:
                    raise SettingsError(
                        f"{analyte} is read in {' or '.join(PROPERTIES[analyte])} (got '{unit}')",
                        key=f"units.{analyte}",
                    )
                continue
            unit = _checked_unit(unit, key=f"units.{analyte}")
            if unit in ELEMENT_MASS_UNITS and analyte in (
                    "acidity", "acidity_potential", "cec", "cec_ph7"):
                raise SettingsError(
                    f"{analyte} has no {unit} form; use cmol/kg, meq/100g or mmol/kg",
                    key=f"units.{analyte}",
                )
        _checked_unit(self.default_unit, key="default_unit")
        for ion in self.solution_columns:
            if ion not in SOLUTION_COLUMNS:
                raise SettingsError(f"'{ion}' is not a soluble cation; use "
                                    f"{', '.join(SOLUTION_COLUMNS)}",
                                    key=f"solution_columns.{ion}")
        if self.crs is not None:
            parse_crs(self.crs, key="crs")


def _checked_unit(text: str, *, key: str) -> str:
    try:
        return normalise_unit(text)
    except SettingsError as exc:
        raise SettingsError(exc.bare_message, key=key) from None


@dataclasses.dataclass(frozen=True)
class SampleRead:
    """What :func:`read_samples` read.

    Attributes
    ----------
    samples
        GeoDataFrame in the file's (or declared) CRS: ``sample_id`` (str),
        ``source_row`` (int), the canonical analytes found (exchangeable ones in
        cmol(+)/kg; ``ph`` and ``sar`` as given), the lab's other columns as they
        were (renamed ``<name>_lab`` where a name is one geosoil uses), geometry.
    columns
        Analyte -> header read.
    units
        Analyte -> unit the values were in (None for pH and SAR).
    methods
        Analyte -> method named in the header (``methods.get("ph")`` is
        "water", "CaCl2" or None; pass it to :func:`geosoil.chemistry.derive`).
    skipped
        (row, reason) of each row passed over (``on_bad_row = "skip"``).
    footnotes
        (row, text) of each note below the table (a row whose only cell is text, as
        "Methods: pH 1:5 water"), passed over whatever ``on_bad_row`` says, and said.
    readings
        Header -> the usual reading taken for a detected header that names no
        method (a bare "pH" read as pH in water), with the setting that changes it.
    undecided
        Header -> why it was not read (an acidity that names neither the
        exchangeable nor the potential method); only with ``undecided="keep"``.
    assumed_units
        Analytes whose unit no header, units row or setting states (read in
        ``[samples] default_unit``).
    unit_problem
        Why the unit assumed for those columns looks wrong for the farm as a
        whole, and the setting that states it; only with ``suspect_units="keep"``
        (else it is raised).
    sheet, sheets
        The workbook sheet read and all the workbook's sheets (Excel only).
    unused
        Header -> why the column is not read (kept as the lab's own column),
        for every column that is not an analyte, ID, coordinate, depth or
        soluble cation.
    crs
        CRS of ``samples``.
    file
        The file read.
    """

    samples: gpd.GeoDataFrame
    columns: dict[str, str]
    units: dict[str, str | None]
    methods: dict[str, str | None]
    skipped: list[tuple[int, str]]
    crs: pyproj.CRS
    file: Path
    readings: dict[str, str] = dataclasses.field(default_factory=dict)
    undecided: dict[str, str] = dataclasses.field(default_factory=dict)
    assumed_units: tuple[str, ...] = ()
    unit_problem: str | None = None
    sheet: str | None = None
    sheets: tuple[str, ...] = ()
    unused: dict[str, str] = dataclasses.field(default_factory=dict)
    footnotes: list[tuple[int, str]] = dataclasses.field(default_factory=list)


class SettingNeededError(InputError):
    """A column of the samples file needs a ``[samples]`` setting before the rows can be
    read: the sample ID or coordinate columns were not recognised, or most values of a
    column do not fit its unit. ``geosoil new`` writes the project anyway, with the
    setting left to the user (:func:`read_columns` gives what the header row says).
    ``keys`` names the ``[samples]`` settings of the ID and coordinate columns that were
    not recognised (empty for a unit)."""

    keys: tuple[str, ...] = ()


class CRSInputError(InputError, CRSError):
    """The CRS of a samples file is missing or does not fit its coordinates.

    Both an :class:`~geosoil.errors.InputError` (it names file, row and column) and a
    :class:`~geosoil.errors.CRSError`, so a caller can offer a CRS and try again.
    """


class _Issue(NamedTuple):
    row: int
    column: str | None
    problem: str
    fix: str


class _Raw(NamedTuple):
    """A file as read: cells as the file gave them, row numbers, points if any.

    ``unit_cells`` holds, per header, the cell of the units row under the header
    (only cells that name a cation unit or a percentage); ``units_row`` is its row.
    """

    table: pd.DataFrame
    rows: np.ndarray
    header_row: int | None
    geometry: gpd.GeoSeries | None
    crs: pyproj.CRS | None
    decimal_comma: bool
    unit_cells: dict[str, str] = {}
    units_row: int | None = None
    sheet: str | None = None
    sheets: tuple[str, ...] = ()


# --------------------------------------------------------------------------- reading


def _excel_column(i: int) -> str:
    letters = ""
    i += 1
    while i:
        i, r = divmod(i - 1, 26)
        letters = chr(65 + r) + letters
    return letters


def _missing(value: Any) -> bool:
    """True for an empty cell as pandas or a reader gives it (None, NaN, NA, NaT).

    A list or mapping (a GeoJSON array or object property) is not empty: it is
    reported as a cell that is not a number.
    """
    if isinstance(value, str) or not pd.api.types.is_scalar(value):
        return False
    return bool(pd.isna(value))


def _header_text(cell: Any) -> str:
    """A header cell as text ('' when empty; 2.0 -> '2')."""
    if _missing(cell):
        return ""
    if isinstance(cell, float) and cell.is_integer():
        return str(int(cell))
    return str(cell).replace("\ufeff", "").strip()


def _find_header(table: pd.DataFrame, settings: SampleSettings) -> int:
    """0-based position of the header row in a table read without a header.

    Among the first :data:`HEADER_SEARCH_ROWS` non-empty rows, the first that names
    the most analytes, sample ID and coordinate columns (or headers named in the
    settings); the first non-empty row when none names any (its headers are then
    reported as not recognised).
    """
    named = {h for h in (*settings.columns.values(), settings.id_column, settings.x_column,
                         settings.y_column) if h}
    best, best_score, seen = -1, 0, 0
    for i in range(len(table)):
        texts = [t for t in (_header_text(c) for c in table.iloc[i].tolist()) if t]
        if not texts:
            continue
        if best < 0:
            best = i
        if len(texts) >= 2:
            # a number names no column (parse_header gives it no role; a test holds it), so
            # a data row's numbers are not parsed: 80 % of the demo's header search
            guess = detect_columns([t for t in texts if not _is_number(t)])
            score = (len(guess.analytes) + len(guess.ambiguous) + (guess.id is not None)
                     + 2 * (guess.x is not None) + sum(t in named for t in texts))
            if score > best_score:
                best, best_score = i, score
        seen += 1
        if seen >= HEADER_SEARCH_ROWS:
            break
    return max(best, 0)


def _is_number(text: str) -> bool:
    try:
        return math.isfinite(float(text.replace(",", ".").lstrip("<").strip()))
    except ValueError:
        return False


#: Units-row cells that name no analyte's unit but show the row is a units row (depth,
#: coordinates, pH).
_OTHER_UNIT_TEXTS = frozenset({
    "cm", "mm", "m", "in", "inch", "inches", "deg", "degrees", "\u00b0", "dd",
    "decimal degrees", "ph units", "ph unit", "units", "unit", "-", "n/a",
})


def _unit_cell(text: str) -> str | None:
    """The units-row cell ``text`` when it names a unit (a cation unit, a percentage, a
    property's unit such as g/kg or dS/m, or a depth or coordinate unit), else None."""
    inner = text.strip().strip("()[]{}").strip()
    if not inner:
        return None
    if "%" in inner:
        return inner
    squashed = inner.lower().replace(" ", "")
    if squashed in {k.replace(" ", "") for k in PROPERTY_UNIT_TEXTS} or (
            inner.lower() in _OTHER_UNIT_TEXTS):
        return inner
    try:
        normalise_unit(inner)
    except SettingsError:
        return None
    return inner


def _cation_unit(cell: str) -> str | None:
    """The exchangeable unit a units-row cell names, or None (a percentage or another unit)."""
    try:
        return normalise_unit(cell)
    except SettingsError:
        return None


def _filled(body: pd.DataFrame) -> pd.DataFrame:
    """True for each cell that holds something (not empty, not only spaces), as
    ``not _missing(v) and str(v).strip() != ""`` says of it, with whole columns at once."""
    arr = body.to_numpy(dtype=object)
    flat = arr.ravel()
    if pd.api.types.infer_dtype(flat, skipna=False) == "string":  # every CSV
        out = np.strings.str_len(_stripped(flat)) > 0
    else:
        out = np.array([not _missing(v) and str(v).strip() != "" for v in flat.tolist()],
                       dtype=bool)
    return pd.DataFrame(out.reshape(arr.shape), index=body.index, columns=body.columns)


def _body(
    table: pd.DataFrame, first: int, *, file: str, excel: bool
) -> tuple[pd.DataFrame, np.ndarray, dict[str, str], int | None]:
    """Rows after the header row ``first`` (0-based), named by it, with their 0-based positions.

    Wholly empty rows are dropped (their numbers are kept by the positions), and so are
    columns with neither a header nor any value (trailing separators). A units row right
    under the header (no numbers, at least one cation unit) is taken out of the rows:
    its cells that name a unit are returned by header, with the row's 0-based position.
    """
    cells = table.iloc[first].tolist()
    names = []
    for i, cell in enumerate(cells):
        text = _header_text(cell)
        names.append(text or f"column {_excel_column(i) if excel else i + 1}")
    body = table.iloc[first + 1 :].copy()
    body.columns = range(len(names))
    filled = _filled(body)
    unnamed = [i for i, c in enumerate(cells) if (_missing(c) or not str(c).strip())]
    keep_columns = [i for i in range(len(names)) if i not in unnamed or filled[i].any()]
    names = [names[i] for i in keep_columns]
    keep_rows = filled.any(axis=1).to_numpy()
    body = body.loc[keep_rows, keep_columns]
    positions = np.flatnonzero(keep_rows) + first + 1
    unit_texts = _units_row_texts(body)
    if unit_texts is not None:
        # a header the lab wrote twice ("pH", "pH") told apart by the units row under it
        # ("1:5 water", "1:5 CaCl2") reads as one header: "pH (1:5 water)"
        twice = {n for n in names if names.count(n) > 1}
        names = [f"{n} ({t})" if n in twice and t else n
                 for n, t in zip(names, unit_texts, strict=True)]
    _check_unique(names, keep_columns, file=file, header_row=first + 1, excel=excel)
    body.columns = names
    body = body.reset_index(drop=True)
    unit_cells: dict[str, str] = {}
    units_row = None
    if unit_texts is not None:
        unit_cells = {n: u for n, t in zip(names, unit_texts, strict=True)
                      if t and (u := _unit_cell(t)) is not None}
        units_row = int(positions[0])
        body, positions = body.iloc[1:].reset_index(drop=True), positions[1:]
    return body, positions, unit_cells, units_row


def _units_row_texts(body: pd.DataFrame) -> list[str] | None:
    """The cells of the units row heading ``body`` (no numbers, at least one cation unit),
    or None when its first row is data."""
    if not len(body):
        return None
    texts = [_header_text(v) for v in body.iloc[0].tolist()]
    given = [t for t in texts if t]
    found = [u for t in given if (u := _unit_cell(t)) is not None]
    if given and found and not any(_is_number(t) for t in given):
        return texts
    return None


def _check_unique(
    names: list[str], positions: list[int], *, file: str, header_row: int, excel: bool
) -> None:
    seen: dict[str, int] = {}
    for i, name in zip(positions, names, strict=True):
        if name in seen:
            where = (f"columns {_excel_column(seen[name])} and {_excel_column(i)}" if excel
                     else f"columns {seen[name] + 1} and {i + 1}")
            raise InputError(
                f"the header appears twice ({where})", file=file, row=header_row, column=name,
                fix="rename one of the two columns",
            )
        seen[name] = i


def _separator(text: str) -> str:
    """The field separator (',', ';' or tab) of CSV ``text``.

    The one that splits the most of the first non-blank lines into the same number
    (more than one) of fields: title lines above the header and decimal commas in
    a ';'-separated file do not mislead it. ',' when none splits any line.
    """
    lines = [line for line in text.splitlines() if line.strip()][: HEADER_SEARCH_ROWS]
    best, best_key = ",", (0, 0)
    for sep in (",", ";", "\t"):
        try:
            counts = [len(r) for r in csv.reader(lines, delimiter=sep)]
        except csv.Error:  # e.g. a field over the csv module's size limit: not this one
            continue
        split = [c for c in counts if c > 1]
        if not split:
            continue
        mode = max(set(split), key=lambda c: (split.count(c), c))
        key = (split.count(mode), mode)
        if key > best_key:
            best, best_key = sep, key
    return best


def _read_csv(path: Path, name: str, settings: SampleSettings) -> _Raw:
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise InputError(f"the file cannot be read ({exc.strerror or exc})", file=name,
                         fix="check that the file is yours to read and not open elsewhere "
                         "(or locked)") from None
    # Excel's "Unicode text" export is UTF-16 with a byte-order mark.
    encoding = "utf-16" if data[:2] in (b"\xff\xfe", b"\xfe\xff") else "utf-8-sig"
    try:
        text = data.decode(encoding)
    except UnicodeDecodeError as exc:
        if encoding == "utf-16":
            raise InputError(
                "the file starts like UTF-16 text but is not", file=name,
                fix="save it as 'CSV UTF-8' from the spreadsheet program",
            ) from None
        line = data[: exc.start].count(b"\n") + 1
        raise InputError(
            f"the file is not UTF-8 text (byte 0x{data[exc.start]:02x})", file=name, row=line,
            fix="save it as 'CSV UTF-8' from the spreadsheet program",
        ) from None
    if not text.strip():
        raise InputError("the file is empty", file=name, fix="export the lab results again")
    sep = _separator(text)
    records: list[list[str]] = []
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=sep)
    try:
        records.extend(reader)
    except csv.Error as exc:
        raise InputError(
            f"the file cannot be read as CSV ({exc})", file=name, row=len(records) + 1,
            fix=f"check the separator ('{sep}' was used) and the quotes on that row",
        ) from None
    try:
        if '"' in text:  # only a quote can open and never close
            for _ in csv.reader(io.StringIO(text, newline=""), delimiter=sep, strict=True):
                pass
    except csv.Error as exc:
        if "unexpected end of data" in str(exc) and records:
            # a quote opened and never closed swallows the rest of the file into one cell
            raise InputError(
                "a quote (\") opens on this row and is never closed, so the rest of the file "
                "runs into one cell", file=name, row=len(records),
                fix="remove the stray quote or close it",
            ) from None
    widths = np.fromiter(map(len, records), dtype=np.int64, count=len(records))
    width = int(widths.max(initial=0))
    if (widths == width).all():
        table = pd.DataFrame(records, dtype=object)
    else:
        table = pd.DataFrame([r + [""] * (width - len(r)) for r in records], dtype=object)
    first = _find_header(table, settings)
    # A row with values beyond the header's last field has too many fields.
    longer = np.flatnonzero(widths[first + 1 :] > len(records[first])) + first + 1
    for n, record in zip(longer + 1, (records[i] for i in longer), strict=True):
        if any(c.strip() for c in record[len(records[first]) :]):
            raise InputError(
                f"the row has {len(record)} fields where the header (row {first + 1}) has "
                f"{len(records[first])}", file=name, row=int(n),
                fix=f"check the separator ('{sep}' was used) and the quotes on that row",
            )
    body, positions, unit_cells, units_row = _body(table, first, file=name, excel=False)
    decimal_comma = False
    if sep != ",":
        cells = pd.Series(body.to_numpy().ravel()).astype(str).str.strip()
        decimal_comma = bool(cells.str.fullmatch(r"[+-]?\d*,\d+").any())
    return _Raw(body, positions + 1, first + 1, None, None, decimal_comma, unit_cells,
                None if units_row is None else units_row + 1)


def _read_excel(path: Path, name: str, settings: SampleSettings) -> _Raw:
    sheet = settings.sheet_or_layer
    try:
        book = pd.ExcelFile(path, engine="openpyxl")
    except (zipfile.BadZipFile, OSError, ValueError, KeyError, ElementTree.ParseError) as exc:
        raise InputError(
            f"the file cannot be read as an Excel workbook ({exc})", file=name,
            fix="open it in a spreadsheet program and save it as .xlsx or CSV UTF-8",
        ) from None
    with book:
        names = [str(n) for n in book.sheet_names]
        if sheet is not None and sheet not in names:
            raise InputError(
                f"there is no sheet '{sheet}'; the sheets are {', '.join(names)}",
                file=name, fix="set [samples] sheet_or_layer to one of them",
            )
        if sheet is not None:
            table = _excel_sheet(book, sheet, name)
        else:
            # the first sheet with a table of samples: a cover sheet ("Portada", "Cover")
            # or notes before the results are passed over
            for sheet in names:
                table = _excel_sheet(book, sheet, name)
                if _has_table(table, settings):
                    break
            else:
                sheet, table = names[0], _excel_sheet(book, names[0], name)
                if len(names) > 1:
                    raise InputError(
                        "no sheet of the workbook holds a table of samples (a header row "
                        "naming analytes with rows under it); the sheets are "
                        + ", ".join(f"'{n}'" for n in names), file=name,
                        fix="set [samples] sheet_or_layer to the sheet of the results, and "
                        "[samples.columns] to its analyte columns",
                    )
            if sheet != names[0]:
                warnings.warn(
                    f"{name}: read sheet '{sheet}', the first with a table of samples (the "
                    f"workbook's sheets: {', '.join(repr(n) for n in names)}); set [samples] "
                    "sheet_or_layer to read another", DataWarning, stacklevel=4,
                )
    filled = table.notna().any(axis=1).to_numpy()
    if not filled.any():
        raise InputError("the sheet is empty", file=name, fix="set [samples] sheet_or_layer")
    first = _find_header(table, settings)
    body, positions, unit_cells, units_row = _body(table, first, file=name, excel=True)
    return _Raw(body, positions + 1, first + 1, None, None, False, unit_cells,
                None if units_row is None else units_row + 1, sheet, tuple(names))


def _excel_sheet(book: pd.ExcelFile, sheet: str, name: str) -> pd.DataFrame:
    """One sheet's cells, no header taken."""
    try:
        return pd.read_excel(book, sheet_name=sheet, header=None, dtype=object)
    except Exception as exc:  # noqa: BLE001 - openpyxl and XML errors of a damaged sheet
        raise InputError(
            f"sheet '{sheet}' cannot be read ({type(exc).__name__}: {exc})", file=name,
            fix="open it in a spreadsheet program and save it again as .xlsx or CSV UTF-8",
        ) from None


def _has_table(table: pd.DataFrame, settings: SampleSettings) -> bool:
    """True when a sheet has a header row naming an analyte with a row of values under it."""
    if table.empty or not table.notna().any(axis=None):
        return False
    first = _find_header(table, settings)
    texts = [t for t in (_header_text(c) for c in table.iloc[first].tolist()) if t]
    named = {h for h in (*settings.columns.values(), settings.id_column) if h}
    found = bool(detect_columns(texts).analytes) or bool(named & set(texts))
    return found and bool(table.iloc[first + 1:].notna().any(axis=None))


def _read_vector(path: Path, name: str, layer: str | None) -> _Raw:
    # GDAL's notes on odd features (e.g. a point with no coordinates) are silenced by
    # read_layer: the checks below report them row by row
    frame = read_layer(path, layer=layer, layer_setting="[samples] sheet_or_layer", file=name)
    rows = np.arange(1, len(frame) + 1)
    geometry = None
    crs = None
    if isinstance(frame, gpd.GeoDataFrame) and frame.geometry.notna().any():
        geometry = frame.geometry.reset_index(drop=True)
        crs = frame.crs
        table = pd.DataFrame(frame.drop(columns=frame.geometry.name))
    else:
        table = pd.DataFrame(frame.drop(columns="geometry", errors="ignore"))
    table.columns = [str(c) for c in table.columns]
    return _Raw(table.reset_index(drop=True), rows, None, geometry, crs, False)


def _read_raw(settings: SampleSettings, name: str) -> _Raw:
    path = Path(settings.file)
    if not path.exists():
        raise InputError(
            "the file does not exist", file=name,
            fix="check the path in [samples] file (relative paths start at the project file)",
        )
    if path.is_dir():
        raise InputError("this is a folder, not a file", file=name,
                         fix="name the file in [samples] file")
    suffix = path.suffix.lower()
    if suffix in _TABLE_SUFFIXES:
        return _read_csv(path, name, settings)
    if suffix in _EXCEL_SUFFIXES:
        return _read_excel(path, name, settings)
    if suffix in _VECTOR_SUFFIXES:
        return _read_vector(path, name, settings.sheet_or_layer)
    if suffix == ".xls":
        raise InputError("the old Excel format .xls is not read", file=name,
                         fix="save the workbook as .xlsx or as CSV UTF-8")
    kinds = ", ".join((*_TABLE_SUFFIXES, *_EXCEL_SUFFIXES, *_VECTOR_SUFFIXES))
    raise InputError(f"the file type '{suffix or '(none)'}' is not read", file=name,
                     fix=f"give a file ending in one of {kinds}")


# --------------------------------------------------------------------------- cells


def _cell(value: Any, *, decimal_comma: bool) -> tuple[float, str, str]:
    """(number, status, text) of one cell; status: ok, empty, below, bad."""
    if _missing(value):
        return math.nan, "empty", ""
    if isinstance(value, (bool, np.bool_, np.datetime64)) or hasattr(value, "isoformat"):
        return math.nan, "bad", str(value)  # a tick box or a date, not an amount
    if isinstance(value, (int, float, np.integer, np.floating)):
        try:
            v = float(value)
        except OverflowError:  # a whole number beyond any float (a workbook's cell)
            return math.nan, "bad", str(value)
        return (v, "ok", str(value)) if math.isfinite(v) else (math.nan, "bad", str(value))
    text = str(value).strip()
    if text.lower() in _EMPTY_WORDS:
        return math.nan, "empty", text
    if text.lower().replace(" ", "") in _BELOW_WORDS:
        return math.nan, "below", text  # below detection, no limit given
    number = text.replace(",", ".") if decimal_comma else text
    status = "ok"
    if number.startswith("<"):
        number, status = number[1:].strip(), "below"
    try:
        v = float(number)
    except ValueError:
        return math.nan, "bad", text
    if not math.isfinite(v):
        return math.nan, "bad", text
    return v, status, text


def _stripped(texts: np.ndarray) -> np.ndarray:
    """``str.strip()`` of every element of an object array of str, in numpy's string
    routines (the same whitespace as Python's; a test holds them equal)."""
    return np.strings.strip(texts.astype(np.dtypes.StringDType()))


def _floats(texts: np.ndarray) -> np.ndarray:
    """``float(t)`` of each text (numpy strings, whose cast to float parses as Python's
    ``float`` does), NaN where ``float`` refuses it."""
    try:
        return texts.astype(float)
    except (ValueError, TypeError, OverflowError):
        pass
    out = np.full(texts.size, np.nan)
    for i, t in enumerate(texts.astype(object).tolist()):
        try:
            out[i] = float(t)
        except (ValueError, TypeError, OverflowError):
            pass
    return out


def _cells(values: pd.Series, *, decimal_comma: bool) -> tuple[np.ndarray, np.ndarray, list[str]]:
    """(numbers, status, texts) of a column, each cell as :func:`_cell` reads it.

    A column of text (every CSV) or of numbers (a workbook's or vector file's) is parsed
    whole: Python's ``float`` over the stripped texts, as :func:`_cell` applies it. The
    cells that gives no finite number for (empty words, ``<0.1``, text that is not a
    number) and every cell of a mixed column go through :func:`_cell` one by one. The
    tests hold the two equal cell by cell.
    """
    arr = values.to_numpy(dtype=object)
    n = arr.size
    numbers = np.full(n, np.nan)
    status = np.full(n, "ok", dtype=object)
    texts = np.full(n, "", dtype=object)
    done = np.zeros(n, dtype=bool)
    kind = pd.api.types.infer_dtype(arr, skipna=False)
    if kind == "string":
        text = _stripped(arr)
        number = np.strings.replace(text, ",", ".") if decimal_comma else text
        v = _floats(number)
        done = np.isfinite(v)
        numbers[done] = v[done]
        texts[done] = text[done].astype(object)
    elif kind in ("floating", "integer", "mixed-integer-float"):
        try:
            v = arr.astype(float)
        except OverflowError:  # an integer beyond a float: _cell says so
            v = np.full(n, np.nan)
        done = np.isfinite(v)  # NaN is an empty cell, inf not a number: _cell says so
        numbers[done] = v[done]
        texts[done] = [str(x) for x in arr[done]]
    for i in np.flatnonzero(~done):
        numbers[i], status[i], texts[i] = _cell(arr[i], decimal_comma=decimal_comma)
    return numbers, status, texts.tolist()


def _footnotes(
    table: pd.DataFrame, rows: np.ndarray, id_header: str, *, name: str, table_file: bool,
) -> tuple[pd.DataFrame, np.ndarray, list[tuple[int, str]]]:
    """``table`` and ``rows`` without the notes below the table, and those notes (row,
    text), said in a warning. A note is one of the last rows whose only filled cell is
    text that is not a number and, in the sample ID column, not like the IDs above it
    (longer than any, or with a colon): "Methods: pH 1:5 water", "Results relate to the
    samples as received". A lone ID ("A43") stays a row (its empty cells are bad cells).
    A vector file (``table_file`` False) has none."""
    table, rows, notes = _trailing_notes(table, rows, id_header) if table_file else (
        table, rows, [])
    if notes:
        warnings.warn(
            f"{name}: {len(notes)} note row(s) below the table passed over, not "
            "samples: " + "; ".join(f"row {r}: '{_shortened(t)}'" for r, t in notes),
            DataWarning, stacklevel=3,
        )
    return table, rows, notes


def _trailing_notes(
    table: pd.DataFrame, rows: np.ndarray, id_header: str,
) -> tuple[pd.DataFrame, np.ndarray, list[tuple[int, str]]]:
    """:func:`_footnotes` without the warning."""
    if len(table) < 2:
        return table, rows, []
    filled = _filled(table).to_numpy()
    counts = filled.sum(axis=1)
    cut = len(table)
    while cut > 1 and counts[cut - 1] == 1:
        cut -= 1
    if cut == len(table):
        return table, rows, []
    columns = list(table.columns)
    ids = [str(v).strip() for v in table[id_header].iloc[:cut]] if id_header in columns else []
    longest = max((len(t) for t in ids), default=0)
    notes: list[tuple[int, str]] = []
    for i in range(cut, len(table)):
        j = int(np.flatnonzero(filled[i])[0])
        text = str(table.iat[i, j]).strip()
        if _is_number(text) or not any(c.isalpha() for c in text) or (
                columns[j] == id_header and len(text) <= longest and ":" not in text):
            notes = []  # a row of its own: this and the rows above it stay rows
            cut = i + 1
            continue
        notes.append((int(rows[i]), text))
    return table.iloc[:cut], rows[:cut], notes


def _shortened(text: str, most: int = 60) -> str:
    return text if len(text) <= most else text[: most - 3].rstrip() + "..."


def _id_text(value: Any) -> str:
    if _missing(value):
        return ""
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value).strip()


def _id_texts(values: pd.Series) -> list[str]:
    """:func:`_id_text` of every cell; a column of text (most IDs) stripped at once."""
    arr = values.to_numpy(dtype=object)
    if pd.api.types.infer_dtype(arr, skipna=False) == "string":
        return _stripped(arr).astype(object).tolist()
    return [_id_text(v) for v in arr.tolist()]


def _present(
    header: str, key: str, headers: list[str], name: str, header_row: int | None
) -> str:
    """``header``, which the setting ``key`` names, when the file has it; else a named error."""
    if header not in headers:
        raise InputError(
            f"the column named in [samples] {key} is not in the file", file=name,
            row=header_row, column=header, fix=_nearest(header, headers),
        )
    return header


# --------------------------------------------------------------------------- depths


def _depth_headers(
    headers: list[str], taken: set[str], settings: SampleSettings, name: str,
    header_row: int | None,
) -> tuple[str | None, str | None, str | None]:
    """(range header, top header, bottom header) of the samples' depth, each or None."""

    def present(header: str, key: str) -> str:
        return _present(header, key, headers, name, header_row)

    if settings.depths == "ignore":
        return None, None, None
    given = (settings.depth_column, settings.depth_top_column, settings.depth_bottom_column)
    if any(given):
        rng, top, bottom = (
            present(h, k) if h else None
            for h, k in zip(given, ("depth_column", "depth_top_column", "depth_bottom_column"),
                            strict=True)
        )
        if (top is None) != (bottom is None):
            key = "depth_bottom_column" if bottom is None else "depth_top_column"
            raise SettingsError("give both the top and the bottom column of the depth (or "
                                "depth_column for a range such as '0-10')", key=key)
        return (None, top, bottom) if top else (rng, None, None)
    found: dict[str, list[str]] = {"range": [], "top": [], "bottom": []}
    for h in headers:
        role = depth_role(h) if h not in taken else None
        if role:
            found[role].append(h)
    if len(found["top"]) == 1 and len(found["bottom"]) == 1:
        return None, found["top"][0], found["bottom"][0]
    if len(found["range"]) == 1:
        return found["range"][0], None, None
    if len(found["range"]) > 1:
        raise InputError(
            f"{' and '.join(repr(h) for h in found['range'])} all look like the samples' "
            "depth", file=name, row=header_row, column=found["range"][0],
            fix="name one in [samples] depth_column (or set [samples] depths = 'ignore')",
        )
    return None, None, None


def _read_depths(
    table: pd.DataFrame, rows: np.ndarray, headers: tuple[str | None, str | None, str | None],
    settings: SampleSettings, decimal_comma: bool, issues: list[_Issue],
) -> tuple[np.ndarray, np.ndarray] | None:
    """Top and bottom (cm) of every sample, or None without a depth column; a cell that
    cannot be read is an issue naming its row and column."""
    rng, top_h, bottom_h = headers
    if rng is None and top_h is None:
        return None
    n = len(table)
    top = np.full(n, np.nan)
    bottom = np.full(n, np.nan)
    fix = ("write the depth as a range such as '0-10' or '10-30 cm' (set [samples] "
           "depth_unit when the numbers are not in cm), or set [samples] depths = 'ignore'")
    if rng is not None:
        unit = depth_unit_of(rng) or settings.depth_unit
        # a file has a few distinct depths however many rows: each text is parsed once
        parsed: dict[str, tuple[float, float] | str] = {}
        for i, value in enumerate(table[rng].tolist()):
            if hasattr(value, "isoformat"):
                issues.append(_Issue(int(rows[i]), rng, f"the depth is a date ({value}): a "
                                     "spreadsheet read a range such as '10-30' as a date",
                                     "format the depth column as text and write the ranges "
                                     "again, or give top and bottom in two columns"))
                continue
            text = "" if _missing(value) else str(value)
            if text not in parsed:
                try:
                    parsed[text] = parse_depth(text, unit=unit)
                except ValueError as exc:
                    parsed[text] = str(exc)
            got = parsed[text]
            if isinstance(got, str):
                issues.append(_Issue(int(rows[i]), rng, got, fix))
            else:
                top[i], bottom[i] = got
        return top, bottom
    assert top_h is not None and bottom_h is not None
    for header, out in ((top_h, top), (bottom_h, bottom)):
        unit = depth_unit_of(header) or settings.depth_unit
        numbers, status, texts = _cells(table[header], decimal_comma=decimal_comma)
        for k in np.flatnonzero(status != "ok"):
            issues.append(_Issue(int(rows[k]), header,
                                 f"'{texts[k]}' is not a depth" if texts[k] else
                                 "the depth is empty",
                                 "give every sample's top and bottom depth as numbers"))
        ok = status == "ok"
        out[ok] = numbers[ok] * DEPTH_UNITS[unit]
    # each distinct (top, bottom) checked once
    both = np.flatnonzero(np.isfinite(top) & np.isfinite(bottom))
    distinct, which = np.unique(np.column_stack([top[both], bottom[both]]), axis=0,
                                return_inverse=True)
    which = which.reshape(-1)
    for j, (t, b) in enumerate(distinct.tolist()):
        at = both[which == j]
        try:
            top[at], bottom[at] = check_depths(round(t, 6), round(b, 6))
        except ValueError as exc:
            issues.extend(_Issue(int(rows[i]), bottom_h, str(exc),
                                 "check the sample's top and bottom depth") for i in at)
    return top, bottom


def _solution_unit(header: str) -> str | None:
    """The solution unit a header names (mmolc/L, mmol/L or mg/L), or None."""
    m = _SOLUTION_UNIT_TEXT.search(header)
    if not m:
        return None
    word = re.sub(r"\s", "", m.group(1).lower())
    return "mg/L" if word == "mg" else ("mmol/L" if word == "mmol" else "mmolc/L")


def _solution_ion(header: str) -> str | None:
    """The cation a solution-concentration header names ('Soluble Na (meq/L)' -> 'na')."""
    if _solution_unit(header) is None:
        return None
    text = _SOLUTION_UNIT_TEXT.sub(" ", header.lower())
    text = re.sub(r"1\s*:\s*\d+", " ", text)
    words = [w for w in re.findall(r"[a-z]+", text) if w not in _SOLUTION_WORDS]
    return _ION_WORDS.get(words[0]) if len(words) == 1 else None


def _read_solution(
    table: pd.DataFrame, rows: np.ndarray, headers: list[str], taken: set[str],
    settings: SampleSettings, name: str, header_row: int | None, decimal_comma: bool,
    issues: list[_Issue],
) -> tuple[dict[str, np.ndarray], dict[str, str]]:
    """Soluble Na, K, Ca and Mg (mmol(+)/L) by column name, and the header each came from."""
    chosen: dict[str, str] = {}
    for ion, header in settings.solution_columns.items():
        if header not in headers:
            raise InputError("the column named in [samples] solution_columns." + ion
                             + " is not in the file", file=name, row=header_row, column=header,
                             fix=_nearest(header, headers))
        chosen[ion] = header
    for header in headers:
        found = _solution_ion(header) if header not in taken else None
        if found is not None and found not in chosen and header not in chosen.values():
            chosen[found] = header
    out: dict[str, np.ndarray] = {}
    factor = {"mmolc/L": {"na": 1.0, "k": 1.0, "ca": 1.0, "mg": 1.0},
              "mmol/L": {"na": 1.0, "k": 1.0, "ca": 2.0, "mg": 2.0},
              "mg/L": {ion: 1.0 / (mg_per_cmol(ion) / 10.0) for ion in SOLUTION_COLUMNS}}
    below = {"half": 0.5, "limit": 1.0, "zero": 0.0, "stop": 1.0}[settings.below_detection]
    for ion, header in chosen.items():
        unit: str = _solution_unit(header) or settings.solution_unit
        numbers, status, texts = _cells(table[header], decimal_comma=decimal_comma)
        for i in np.flatnonzero((status == "bad") | (numbers < 0)):
            issues.append(_Issue(int(rows[i]), header,
                                 f"'{texts[i]}' is not a concentration",
                                 "correct the cell or set [samples] on_bad_row = 'skip'"))
        numbers, _ = _below_limits(numbers, status)
        numbers = np.where(status == "below", numbers * below, numbers)
        numbers = np.where(numbers < 0, np.nan, numbers)
        out[SOLUTION_COLUMNS[ion]] = numbers * factor[unit][ion]
    return out, chosen


# --------------------------------------------------------------------------- mapping


def _nearest(header: str, headers: Sequence[str]) -> str:
    near = difflib.get_close_matches(header, headers, n=1, cutoff=0.5)
    shown = ", ".join(f"'{h}'" for h in headers)
    return (f"did you mean '{near[0]}'? " if near else "") + f"The headers are: {shown}"


def _map_columns(
    headers: list[str], settings: SampleSettings, name: str, header_row: int | None,
    *, need_xy: bool, described: Mapping[str, str] | None = None, lenient: bool = False,
) -> tuple[dict[str, str], str, tuple[str, str] | None, bool | None, dict[str, str | None],
           dict[str, str], dict[str, str]]:
    """Analyte -> header, ID header, coordinate headers, lon/lat or not, methods,
    readings and undecided headers (see :class:`SampleRead`).

    ``described`` gives a header with the unit from the units row under it
    ("Exch Ca" -> "Exch Ca (meq/100g)"): detection reads that; the header is returned.
    """
    described = described or {}
    back = {described.get(h, h): h for h in headers}

    def orig(text: str | None) -> str | None:
        return None if text is None else back.get(text, text)

    def info(header: str) -> Any:
        return parse_header(described.get(header, header))

    raw_guess = detect_columns([described.get(h, h) for h in headers])
    guess = dataclasses.replace(
        raw_guess,
        analytes={a: back.get(h, h) for a, h in raw_guess.analytes.items()},
        ambiguous={a: tuple(back.get(h, h) for h in t) for a, t in raw_guess.ambiguous.items()},
        id=orig(raw_guess.id), x=orig(raw_guess.x), y=orig(raw_guess.y),
    )

    def present(header: str, key: str) -> str:
        return _present(header, key, headers, name, header_row)

    columns: dict[str, str] = {}
    for analyte, header in settings.columns.items():
        columns[analyte] = present(header, f"columns.{analyte}")
    taken = set(columns.values())
    methods: dict[str, str | None] = {a: info(h).method for a, h in columns.items()}
    for analyte in CANONICAL:
        if analyte in columns:
            continue
        tied = [h for h in guess.ambiguous.get(analyte, ()) if h not in taken]
        if len(tied) > 1:
            raise InputError(
                f"{' and '.join(repr(h) for h in tied)} both look like {analyte}", file=name,
                row=header_row, column=tied[0],
                fix=f"choose one in [samples.columns], e.g. {analyte} = '{tied[0]}'",
            )
        found = tied[0] if tied else guess.analytes.get(analyte)
        if found is not None and found not in taken:
            columns[analyte] = found
            methods[analyte] = info(found).method if tied else guess.methods[analyte]
            taken.add(found)
    if not columns:
        hint = "; ".join(f"'{h}': {why}" for h, why in guess.notes.items())
        raise InputError(
            "no analyte column was recognised" + (f" (passed over: {hint})" if hint else ""),
            file=name, row=header_row,
            fix="name them in [samples.columns], e.g. ca = 'Exch Ca'. " + _nearest("", headers),
        )
    id_header = present(settings.id_column, "id_column") if settings.id_column else guess.id
    xy = None
    geographic = None
    x = y = None
    if need_xy:
        x = present(settings.x_column, "x_column") if settings.x_column else guess.x
        y = present(settings.y_column, "y_column") if settings.y_column else guess.y
        if x is not None and y is not None:
            roles = (info(x).role, info(y).role)
            geographic = True if roles == ("lon", "lat") else (
                False if roles == ("east", "north") else None)
            xy = (x, y)
    if not lenient:
        _undecided_id_or_xy(id_header, (x, y) if need_xy else None, name, header_row, headers)
    id_header = id_header or ""
    _check_roles(columns, id_header, xy, name, header_row)
    chosen = set(columns.values()) - set(settings.columns.values())
    readings = {back.get(h, h): r for h, r in raw_guess.readings.items()
                if back.get(h, h) in chosen}
    undecided = {back.get(h, h): why for h, why in raw_guess.undecided.items()
                 if back.get(h, h) not in taken}
    return columns, id_header, xy, geographic, methods, readings, undecided


#: The ID and coordinate settings: key -> what the column holds.
_PLACE_KEYS = {"id_column": "the sample ID", "x_column": "x (longitude or easting)",
               "y_column": "y (latitude or northing)"}


def _undecided_id_or_xy(
    id_header: str | None, xy: tuple[str | None, str | None] | None, name: str,
    header_row: int | None, headers: Sequence[str],
) -> None:
    """One :class:`SettingNeededError` naming every one of the sample ID, x and y columns
    that was not recognised (``xy`` None: the file's geometry gives the places)."""
    found = {"id_column": id_header, **({} if xy is None else
                                        {"x_column": xy[0], "y_column": xy[1]})}
    missing = [k for k, v in found.items() if v is None]
    if not missing:
        return
    what = [_PLACE_KEYS[k] for k in missing]
    listed = what[0] if len(what) == 1 else ", ".join(what[:-1]) + " or " + what[-1]
    known = [f"{_PLACE_KEYS[k].split(' (')[0]} '{v}'" for k, v in found.items() if v]
    keys = [f"[samples] {k}" for k in missing]
    problem = f"no column was recognised for {listed}" + (
        f" (recognised: {', '.join(known)})" if known else "")
    if "x_column" in missing or "y_column" in missing:
        problem += "; coordinates are longitude/latitude, easting/northing or X/Y"
    fix = ("set " + (keys[0] if len(keys) == 1 else ", ".join(keys[:-1]) + " and " + keys[-1])
           + " to the header" + ("s" if len(keys) > 1 else "") + " of "
           + ("that column" if len(keys) == 1 else "those columns")
           + (" (and crs when x and y are projected)"
              if "x_column" in missing or "y_column" in missing else "")
           + ". " + _nearest("", headers))
    err = SettingNeededError(problem, file=name, row=header_row, fix=fix)
    err.keys = tuple(missing)
    raise err


def _check_roles(
    columns: Mapping[str, str], id_header: str, xy: tuple[str, str] | None, name: str,
    header_row: int | None,
) -> None:
    """One column, one role: settings that read a column twice are an error."""
    roles: dict[str, list[str]] = {}
    for analyte, header in columns.items():
        roles.setdefault(header, []).append(f"columns.{analyte}")
    roles.setdefault(id_header, []).append("id_column")
    if xy is not None:
        roles.setdefault(xy[0], []).append("x_column")
        roles.setdefault(xy[1], []).append("y_column")
    for header, keys in roles.items():
        if len(keys) > 1:
            shown = " and ".join(f"[samples] {k}" for k in keys)
            raise InputError(
                f"the column is read as {len(keys)} things ({shown})", file=name,
                row=header_row, column=header,
                fix="give each of them its own column in the [samples] settings",
            )


def _units(
    columns: Mapping[str, str], settings: SampleSettings, name: str, header_row: int | None,
    *, unit_cells: Mapping[str, str] | None = None, units_row: int | None = None,
) -> dict[str, str | None]:
    units: dict[str, str | None] = {}
    for analyte, header in columns.items():
        if analyte in UNITLESS:
            units[analyte] = None
            continue
        cell = (unit_cells or {}).get(header)
        if analyte in PROPERTIES:
            # a property's unit: the setting, else the header, else the units row under it
            # ("Organic carbon" over "g/kg"), else its usual unit
            below_p = parse_header(f"{header} ({cell})").unit if cell is not None else None
            units[analyte] = (settings.units.get(analyte) or parse_header(header).unit
                              or below_p or PROPERTIES[analyte][0])
            continue
        said = parse_header(header).unit
        below = None
        if cell is not None and "%" not in cell:
            below = _cation_unit(cell)
        if analyte in settings.units:
            unit = normalise_unit(settings.units[analyte])
            if (said or below) not in (None, unit):
                logger.info("%s: [samples.units] %s = %s overrides '%s'", name, analyte, unit,
                            header)
        elif said is not None and below is not None and said != below:
            raise InputError(
                f"the header says {said} but the units row says '{cell}'", file=name,
                row=units_row, column=header,
                fix=f"correct one of them, or state the unit: [samples.units] {analyte} = "
                f"'...' ({', '.join(LAB_UNITS)})",
            )
        else:
            unit = said or below or normalise_unit(settings.default_unit)
        if unit in ELEMENT_MASS_UNITS and analyte in (
                "acidity", "acidity_potential", "cec", "cec_ph7"):
            raise InputError(
                f"{analyte} has no {unit} form (default_unit is {settings.default_unit})",
                file=name, row=header_row, column=header,
                fix=f"state its unit: [samples.units] {analyte} = 'cmol/kg'",
            )
        units[analyte] = unit
    return units


# --------------------------------------------------------------------------- checks


def _analyte_values(
    analyte: str, header: str, unit: str | None, values: pd.Series, rows: np.ndarray,
    settings: SampleSettings, name: str, decimal_comma: bool, issues: list[_Issue],
    *, plausible: bool = True,
) -> np.ndarray:
    numbers, texts = _checked_numbers(analyte, header, values, rows, settings, name,
                                      decimal_comma, issues)
    if analyte in PROPERTIES:
        assert unit is not None
        return _property_values(analyte, header, unit, numbers, texts, rows, issues)
    if analyte in UNITLESS:
        return _unitless_values(analyte, header, numbers, texts, rows, issues)
    assert unit is not None
    return _exchangeable_values(analyte, header, unit, numbers, texts, rows, settings, name,
                                issues, plausible=plausible)


_SKIP_FIX = " or set [samples] on_bad_row = 'skip'"


def _checked_numbers(
    analyte: str, header: str, values: pd.Series, rows: np.ndarray, settings: SampleSettings,
    name: str, decimal_comma: bool, issues: list[_Issue],
) -> tuple[np.ndarray, list[str]]:
    """The column's numbers and texts: a problem for each cell that is not a number, empty
    (unless allowed), below detection (unless a substitute is set) or negative (then NaN)."""
    numbers, status, texts = _cells(values, decimal_comma=decimal_comma)
    for i in np.flatnonzero(status == "bad"):
        issues.append(_Issue(int(rows[i]), header, f"'{texts[i]}' is not a number",
                             "correct the cell" + _SKIP_FIX))
    if analyte not in settings.empty_allowed:
        for i in np.flatnonzero(status == "empty"):
            issues.append(_Issue(
                int(rows[i]), header, "the value is empty",
                f"fill it in, add '{analyte}' to [samples] empty_allowed" + _SKIP_FIX,
            ))
    if analyte in UNITLESS:  # a pH or SAR has no detection limit: 'n.d.' is not a number
        for i in np.flatnonzero((status == "below") & np.isnan(numbers)):
            issues.append(_Issue(int(rows[i]), header, f"'{texts[i]}' is not a number",
                                 "correct the cell" + _SKIP_FIX))
            status[i] = "bad"
    below = np.flatnonzero(status == "below")
    if below.size and settings.below_detection == "stop":
        for i in below:
            issues.append(_Issue(
                int(rows[i]), header, f"'{texts[i]}' is below the detection limit",
                "set [samples] below_detection = 'half' (or 'limit', 'zero')" + _SKIP_FIX,
            ))
    elif below.size:
        factor = {"half": 0.5, "limit": 1.0, "zero": 0.0}[settings.below_detection]
        textless = np.flatnonzero((status == "below") & np.isnan(numbers))
        numbers, limit = _below_limits(numbers, status)
        numbers[below] *= factor
        said = ""
        if textless.size:
            shown = ", ".join(sorted({f"'{texts[i]}'" for i in textless}))
            said = (f"; {textless.size} of them ({shown}) give no limit: " + (
                f"the column's smallest stated limit, {limit:g}, is used for them"
                if limit is not None else
                "no limit is stated anywhere in the column, so they are taken as 0 (the "
                "least they can be; state the lab's limit as '<0.1' to have it used)"))
        warnings.warn(
            f"{name}, column '{header}': {below.size} value(s) below the detection limit "
            f"(rows {_row_list(rows[below])}) taken as "
            + {"half": "half the limit", "limit": "the limit", "zero": "0"}[
                settings.below_detection] + said,
            DataWarning, stacklevel=5,
        )
    negative = np.flatnonzero(numbers < 0)
    for i in negative:
        issues.append(_Issue(int(rows[i]), header, f"negative value {texts[i]}",
                             "correct the cell" + _SKIP_FIX))
    numbers[negative] = np.nan
    return numbers, texts


def _below_limits(numbers: np.ndarray, status: np.ndarray) -> tuple[np.ndarray, float | None]:
    """``numbers`` with each below-detection cell that gives no limit ('n.d.', '<LOD')
    set to the smallest limit stated in the column ('<0.1'), or to 0 when none is; and
    that limit (None when none is stated)."""
    below = status == "below"
    textless = below & np.isnan(numbers)
    stated = numbers[below & ~textless]
    limit = float(stated.min()) if stated.size else None
    out = numbers.copy()
    out[textless] = 0.0 if limit is None else limit
    return out, limit


def _property_values(
    analyte: str, header: str, unit: str, numbers: np.ndarray, texts: list[str],
    rows: np.ndarray, issues: list[_Issue],
) -> np.ndarray:
    """A soil property in its canonical unit (EC in dS/m), implausibly large values named."""
    if analyte in ("ec_1_5", "ece"):
        values_c = to_ds_m(numbers, unit)
    else:
        # g/kg -> %, mmol/kg/pH -> cmol/kg/pH: both divide by 10
        values_c = numbers / 10.0 if unit != PROPERTIES[analyte][0] else numbers
    top = PLAUSIBLE_MAX_PROPERTY[analyte]
    for i in np.flatnonzero(values_c > top):
        issues.append(_Issue(
            int(rows[i]), header,
            f"{analyte} = {texts[i]} {unit} is implausibly large (plausible up to {top:g} "
            f"{PROPERTIES[analyte][0]}, common practice)",
            f"check the value and the unit ([samples.units] {analyte} = "
            f"'{' or '.join(PROPERTIES[analyte])}')" + _SKIP_FIX,
        ))
    return values_c


def _unitless_values(
    analyte: str, header: str, numbers: np.ndarray, texts: list[str], rows: np.ndarray,
    issues: list[_Issue],
) -> np.ndarray:
    """A pH, buffer pH or SAR, values outside its plausible range named."""
    low, high = (PLAUSIBLE_PH if analyte in PH_METHODS else PLAUSIBLE_BUFFER_PH
                 if analyte in BUFFER_PH else (0.0, PLAUSIBLE_MAX_SAR))
    for i in np.flatnonzero((numbers < low) | (numbers > high)):
        issues.append(_Issue(
            int(rows[i]), header,
            f"{analyte} = {texts[i]} is outside the plausible {low:g}-{high:g}",
            "check the value and that the column holds " + analyte + _SKIP_FIX,
        ))
    return numbers


def _exchangeable_values(
    analyte: str, header: str, unit: str, numbers: np.ndarray, texts: list[str],
    rows: np.ndarray, settings: SampleSettings, name: str, issues: list[_Issue],
    *, plausible: bool = True,
) -> np.ndarray:
    """An exchangeable cation or acidity in cmol(+)/kg; implausibly large values named, and
    refused as a wrong unit when they are most of the column (not with ``plausible`` false:
    a unit already suspected for the whole farm)."""
    rho = settings.scoop_density_g_cm3
    cmol = to_cmol_kg(numbers, analyte, unit, density_g_cm3=rho)
    if not plausible:
        return cmol
    limit = PLAUSIBLE_MAX_CMOL[analyte]
    too_big = np.flatnonzero(cmol > limit)
    if too_big.size:
        shown = float(from_cmol_kg(limit, analyte, unit, density_g_cm3=rho))

        def problem(i: int) -> str:
            return (f"{texts[i]} {unit} is implausibly large for exchangeable {analyte} "
                    f"(plausible up to {shown:g} {unit}, common practice)")

        unit_fix = (f"check the unit: the lab's unit goes in [samples.units] {analyte} = "
                    f"'...' ({', '.join(LAB_UNITS)})")
        if too_big.size * 2 > np.isfinite(cmol).sum():
            raise SettingNeededError(
                f"most values look wrong for the unit: {problem(int(too_big[0]))}",
                             file=name, row=int(rows[too_big[0]]), column=header, fix=unit_fix)
        for i in too_big:
            issues.append(_Issue(int(rows[i]), header, problem(int(i)),
                                 "correct the cell, or " + unit_fix + _SKIP_FIX))
    return cmol


#: Exchangeable amounts whose sum per sample is its ECEC (acidity stands for Al + H).
_ECEC_PARTS = ("ca", "mg", "k", "na", "al", "h", "acidity")


def _assumed_units(
    columns: Mapping[str, str], settings: SampleSettings, unit_cells: Mapping[str, str],
) -> tuple[str, ...]:
    """The exchangeable analytes whose unit nothing states: no setting, no unit in the
    header, none in the units row (they are read in ``default_unit``)."""
    out = []
    for analyte, header in columns.items():
        if analyte in UNITLESS or analyte in PROPERTIES or analyte in settings.units:
            continue
        cell = unit_cells.get(header)
        if parse_header(header).unit is None and (
                cell is None or "%" in cell or _cation_unit(cell) is None):
            out.append(analyte)
    return tuple(out)


def _unit_suspicion(
    table: pd.DataFrame, columns: Mapping[str, str], assumed: Sequence[str],
    settings: SampleSettings, decimal_comma: bool, *, name: str, header_row: int | None,
    stop: str,
) -> str | None:
    """Raise (``stop`` "stop") or return the problem when the columns whose unit nothing
    states hold, read in ``default_unit``, a farm of implausible soils: the median ECEC of
    the samples (sum of the cations; the CEC alone when only it is assumed) above
    :data:`TYPICAL_MAX_ECEC_CMOL`. The units that would bring it into the usual range are
    named, most likely first. None when the values fit the unit."""
    found = _suspected_unit(table, columns, assumed, settings, decimal_comma)
    if found is None:
        return None
    error = InputError(found[0], file=name, row=header_row, column=found[2], fix=found[1])
    if stop == "stop":
        raise error
    return str(error)


def _suspected_unit(
    table: pd.DataFrame, columns: Mapping[str, str], assumed: Sequence[str],
    settings: SampleSettings, decimal_comma: bool,
) -> tuple[str, str, str] | None:
    """(problem, fix, first header) for :func:`_unit_suspicion`, or None."""
    parts = [a for a in _ECEC_PARTS if a in assumed]
    if "acidity" in parts:
        parts = [a for a in parts if a not in ("al", "h")]
    what = "ECEC (the sum of " + ", ".join(columns[a] for a in parts) + ")"
    if not parts:
        parts = [a for a in ("cec", "cec_ph7") if a in assumed][:1]
        what = "CEC"
    if not parts:
        return None
    unit = normalise_unit(settings.default_unit)
    rho = settings.scoop_density_g_cm3
    numbers = {}
    for a in parts:
        v, status, _ = _cells(table[columns[a]], decimal_comma=decimal_comma)
        numbers[a] = np.where((status == "ok") & (v >= 0), v, np.nan)

    def ecec(u: str) -> np.ndarray | None:
        try:
            stack = np.vstack([to_cmol_kg(numbers[a], a, u, density_g_cm3=rho) for a in parts])
        except SettingsError:  # no mass form (acidity in mg/kg)
            return None
        seen = np.isfinite(stack).any(axis=0)
        return np.nansum(stack, axis=0)[seen]

    found = ecec(unit)
    if found is None or not found.size or np.median(found) <= TYPICAL_MAX_ECEC_CMOL:
        return None
    likely: list[tuple[float, str, float]] = []
    for u in CATION_UNITS:
        if u in (unit, "meq/100g") or (u == "cmol/kg" and unit == "meq/100g"):
            continue
        other = ecec(u)
        if other is not None and other.size:
            median = float(np.median(other))
            if TYPICAL_MIN_ECEC_CMOL <= median <= TYPICAL_MAX_ECEC_CMOL:
                likely.append((abs(math.log(median / 10.0)), u, median))
    likely.sort()
    names = ", ".join(f"'{columns[a]}'" for a in assumed)
    problem = (
        f"the unit looks wrong for the farm as a whole: {names} state no unit and were read "
        f"in {unit} ([samples] default_unit), which makes the samples' {what} "
        f"{found.min():.0f}-{found.max():.0f} cmol(+)/kg (median {np.median(found):.0f}); "
        f"soils seldom reach a median of {TYPICAL_MAX_ECEC_CMOL:g} (common practice)"
    )
    if likely:
        problem += "; the lab's unit is probably " + " or ".join(
            f"{u} (median {m:.1f} cmol(+)/kg)" for _, u, m in likely)
    else:
        problem += "; no unit geosoil reads brings them into the usual range: check that "\
            "the columns hold exchangeable amounts"
    best = likely[0][1] if likely else "..."
    fix = (
        "state the lab's unit for these columns: [samples.units] "
        + ", ".join(f"{a} = '{best}'" for a in assumed)
        + f" (units: {', '.join(LAB_UNITS)}), or a row of units under the header; if they "
        f"really are {unit} (an organic soil), state that: [samples.units] {assumed[0]} = "
        f"'{unit}' and the others alike"
    )
    return problem, fix, columns[assumed[0]]


def _unused_columns(
    headers: Sequence[str], used: set[str], described: Mapping[str, str], *, name: str,
) -> dict[str, str]:
    """Header -> why it is not read, for each column not used (kept as the lab's own). One
    warning names those that may hold an analyte, so that check, run, run.json and the report
    all say it; the record-keeping ones (comments, dates, lab numbers) are one info line
    (``-v``; ``new`` and ``check`` say it as a note), and every one stays in the returned
    mapping (``run.json`` ``samples.columns_not_read``)."""
    out = _why_unused(headers, used, described)
    kept = record_keeping(out)
    if len(kept) < len(out):
        warnings.warn(unused_message(name, {h: w for h, w in out.items() if h not in kept}),
                      DataWarning, stacklevel=4)
    if kept:
        logger.info("%s", record_keeping_message(name, out))
    return out


#: Why a record-keeping column (a comment, a date, a lab number) is not read.
RECORD_KEEPING = "record keeping, not an analyte"


def _why_unused(
    headers: Sequence[str], used: set[str], described: Mapping[str, str],
) -> dict[str, str]:
    """Header -> why it is not read, for each column not used."""
    out: dict[str, str] = {}
    for header in headers:
        if header in used:
            continue
        info = parse_header(described.get(header, header))
        if info.undecided is not None:
            continue  # named on its own, with the settings that decide it
        if info.note is not None:
            out[header] = info.note
        elif info.role == "id":
            out[header] = f"a second {info.role} column ({RECORD_KEEPING})"
        elif info.role in CANONICAL:
            out[header] = f"read as {info.role} from another column"
        elif info.role is not None:
            out[header] = f"a second {info.role} column"
        elif header.startswith("column ") and header[7:].replace(" ", "").isalnum():
            out[header] = "no header"
        elif header not in described and is_bookkeeping(header):
            out[header] = RECORD_KEEPING
        elif depth_role(header) is not None:  # [samples] depths = "ignore", or a second one
            out[header] = f"a depth column not read as the samples' depth ({RECORD_KEEPING})"
        else:
            out[header] = "name not recognised"
    return out


def record_keeping(unused: Mapping[str, str]) -> dict[str, str]:
    """The record-keeping columns among the columns not read (a comment, a date, a lab or
    job number, a second ID column): no analyte is left out by not reading them."""
    return {h: why for h, why in unused.items() if RECORD_KEEPING in why}


def record_keeping_message(name: str, unused: Mapping[str, str]) -> str:
    """One short line naming the record-keeping columns not read (``-v``, ``new``, ``check``)."""
    kept = record_keeping(unused)
    return (f"{name}: {len(kept)} record-keeping column(s) not read, kept as the lab's own "
            "columns: " + ", ".join(f"'{h}'" for h in kept))


def unused_message(name: str, unused: Mapping[str, str]) -> str:
    """One line naming every column given and why it is not read (the reading's warning
    names those that may hold an analyte)."""
    if not unused:
        return f"{name}: every column is read"
    shown = "; ".join(f"'{h}' ({why})" for h, why in unused.items())
    # the hint fits the kinds of column listed: a conductivity is mapped as an EC with
    # the EC units, anything else as an exchangeable amount with the cation units
    ec = [h for h, why in unused.items() if "conductivity" in why or why.startswith("an EC")]
    hints = []
    if ec:
        hints.append("an EC as ec_1_5 (1:5 water) or ece (saturation extract), e.g. ec_1_5 = "
                     f"'{ec[0]}', in " + ", ".join(PROPERTIES["ec_1_5"]))
    if len(ec) < len(unused):
        hints.append("an exchangeable amount as e.g. ca = 'Calcium exchangeable', with its "
                     "unit in [samples.units] (" + ", ".join(LAB_UNITS) + ")")
    return (
        f"{name}: {len(unused)} column(s) not read, kept as the lab's own columns: {shown}. "
        "To read one, name it in [samples.columns]: " + "; or ".join(hints)
    )


def _row_list(rows: Iterable[int], most: int = 10) -> str:
    numbers = [int(r) for r in rows]
    text = ", ".join(str(r) for r in numbers[:most])
    return text + (f" and {len(numbers) - most} more" if len(numbers) > most else "")


def _share_lonlat(x: np.ndarray, y: np.ndarray) -> float:
    """Share of the located points whose x, y fit longitude/latitude (0 when none are located)."""
    ok = np.isfinite(x) & np.isfinite(y)
    if not ok.any():
        return 0.0
    return float(np.mean((np.abs(x[ok]) <= 180) & (np.abs(y[ok]) <= 90)))


def _decide_crs(
    settings: SampleSettings, file_crs: pyproj.CRS | None, x: np.ndarray, y: np.ndarray,
    geographic: bool | None, name: str, column: str, first_row: int | None,
) -> pyproj.CRS:
    declared = None if settings.crs is None else parse_crs(settings.crs, key="samples.crs")
    if file_crs is not None and declared is not None and not file_crs.equals(
        declared, ignore_axis_order=True
    ):
        raise CRSInputError(
            f"the file's CRS is {describe_crs(file_crs)} but [samples] crs says "
            f"{describe_crs(declared)}", file=name,
            fix="remove [samples] crs to use the file's own, or correct the file's CRS",
        )
    crs = file_crs or declared
    if crs is None:
        # Named longitude/latitude: take them so (rows out of range are reported one by one);
        # X/Y: when most fit.
        if geographic is False or (geographic is None and _share_lonlat(x, y) < 0.5):
            raise CRSInputError(
                "the coordinates are not longitude/latitude and no CRS is given", file=name,
                row=first_row, column=column,
                fix="set [samples] crs, e.g. crs = 'EPSG:28355'",
            )
        if geographic is None:
            warnings.warn(
                f"{name}: no CRS given; the coordinates in '{column}' look like longitude/"
                "latitude, so WGS 84 (EPSG:4326) is assumed. Set [samples] crs to be sure",
                DataWarning, stacklevel=4,
            )
        return pyproj.CRS.from_epsg(4326)
    if crs.is_projected and _share_lonlat(x, y) == 1.0:
        raise CRSInputError(
            f"the coordinates look like longitude/latitude in degrees, but the CRS is "
            f"{describe_crs(crs)}", file=name, row=first_row, column=column,
            fix="set [samples] crs = 'EPSG:4326' (or correct the coordinates)",
        )
    return crs


_NUM = r"\d+(?:[.,]\d+)?"
_DEGREES = re.compile(
    rf"^(?P<h1>[NSEWOL])?\s*(?P<sign>[-+\u2212])?\s*(?P<d>{_NUM})\s*(?:°|º|˚)\s*"
    rf"(?:(?P<m>{_NUM})\s*(?:'|′|’)\s*"
    rf"(?:(?P<s>{_NUM})\s*(?:\"|″|”|''|’’)?\s*)?)?(?P<h2>[NSEWOL])?$",
    re.IGNORECASE,
)
#: Degrees, minutes and seconds separated by spaces or colons ("34 41 10 S", "-34:41:10",
#: "147 27.2 E"), or decimal degrees with a hemisphere letter ("34.6861 S").
_SEPARATED = [re.compile(
    rf"^(?P<h1>[NSEWOL])?\s*(?P<sign>[-+\u2212])?\s*(?P<d>{_NUM}){parts}\s*(?P<h2>[NSEWOL])?$",
    re.IGNORECASE) for parts in (
        rf"\s*:\s*(?P<m>{_NUM})(?:\s*:\s*(?P<s>{_NUM}))?",
        rf"\s+(?P<m>{_NUM})(?:\s+(?P<s>{_NUM}))?",
        "",
)]
#: Hemisphere letters besides N, S, E, W: L (leste, Portuguese) is east; O is west in
#: Spanish, Portuguese and French (oeste, ouest) but east in German (Ost), so the caller
#: says which (``letter_o``).
_LETTERS = {"N": "N", "S": "S", "E": "E", "W": "W", "L": "E"}


def parse_degrees(text: str, *, letter_o: str | None = None) -> tuple[float, str | None] | None:
    """Decimal degrees of a coordinate written in degrees, minutes and seconds, or None.

    Degrees with a degree sign, then (optionally) minutes with ``'`` and seconds with
    ``"``; or degrees, minutes and seconds separated by spaces or colons (``34 41 10 S``,
    ``-34:41:10``); or decimal degrees with a hemisphere letter (``34.6861 S``); the last
    part may have decimals. The hemisphere letter before or after, or a sign: N, S, E,
    W, L (leste: east) and O, which is ``letter_o`` ("W" or "E"). S and W are negative.
    Returns the degrees and the hemisphere letter read (N, S, E or W; "O" when
    ``letter_o`` is None, with the degrees unsigned; None when a sign or nothing was
    written). None when the text is not such a coordinate, or is
    one that cannot be read (:func:`degrees_problem` says why).

    Examples
    --------
    >>> parse_degrees("34°41.1760'S")
    (-34.68626666666667, 'S')
    >>> parse_degrees("147°27'12.5''E")
    (147.45347222222222, 'E')
    >>> parse_degrees("34 41 10 S"), parse_degrees("-34:41:10")
    ((-34.68611111111111, 'S'), (-34.68611111111111, None))
    >>> parse_degrees("59°10.393'O", letter_o="W"), parse_degrees("59°10.393'O")
    ((-59.17321666666667, 'W'), (59.17321666666667, 'O'))
    >>> parse_degrees("-34.5°"), parse_degrees("34°75'S")
    ((-34.5, None), None)
    """
    found = _read_degrees(text, letter_o=letter_o)
    return found if isinstance(found, tuple) else None


def degrees_problem(text: str) -> str | None:
    """Why a text written as degrees, minutes and seconds cannot be read as one coordinate
    (minutes or seconds not below 60, a sign and a hemisphere letter both, a group of
    three digits that may be a thousands group); None when it is read or is no such text.

    Examples
    --------
    >>> degrees_problem("-34 41 10 S")
    'it gives both a sign and a hemisphere letter, which disagree or repeat each other'
    >>> "thousands spaced (6123456)" in degrees_problem("6 123 456")
    True
    >>> degrees_problem("34 41 10 S") is None
    True
    """
    found = _read_degrees(text)
    return found if isinstance(found, str) else None


def _read_degrees(text: str, *, letter_o: str | None = None,
                  ) -> tuple[float, str | None] | str | None:
    """The degrees and hemisphere of ``text``, why it cannot be read (str), or None when
    it is not written as degrees at all."""
    t = text.strip()
    found = _DEGREES.match(t)
    separated = found is None
    if found is None:
        found = next((f for f in (r.match(t) for r in _SEPARATED) if f), None)
        if found is None:
            return None
    m = {k: found.groupdict().get(k) for k in ("h1", "h2", "sign", "d", "m", "s")}
    if separated and not m["m"] and not (m["h1"] or m["h2"]):
        return None  # a plain number is no degrees text
    if m["h1"] and m["h2"]:
        return "it gives a hemisphere letter at both ends"
    if (m["h1"] or m["h2"]) and m["sign"]:
        return "it gives both a sign and a hemisphere letter, which disagree or repeat each other"
    if separated and found.re is _SEPARATED[1] and any(
            v and len(re.split(r"[.,]", v)[0]) > 2 for v in (m["m"], m["s"])):
        number = "".join(v for v in (m["d"], m["m"], m["s"]) if v)
        return (f"its groups of three digits may be one number with its thousands spaced "
                f"({number}), or degrees, minutes and seconds")
    written = (m["h1"] or m["h2"] or "").upper()
    hemisphere = (letter_o or "O") if written == "O" else _LETTERS.get(written)
    deg, minutes, seconds = (float(v.replace(",", ".")) if v else 0.0
                             for v in (m["d"], m["m"], m["s"]))
    for part, value in (("minutes", minutes), ("seconds", seconds)):
        if value >= 60:
            return f"its {part} ({value:g}) are not below 60"
    if (m["s"] and not minutes.is_integer()) or (m["m"] and not deg.is_integer()):
        return "only its last part (degrees, minutes or seconds) may have decimals"
    value = deg + minutes / 60 + seconds / 3600
    negative = hemisphere in ("S", "W") or m["sign"] in ("-", "\u2212")
    return (-value if negative else value), hemisphere


def _coordinate_cells(
    table: pd.DataFrame, column: str, rows: np.ndarray, decimal_comma: bool,
    issues: list[_Issue], *, axis: str = "x", letter_o: str | None = None,
    undecided_o: list[tuple[int, str]] | None = None,
) -> np.ndarray:
    """Coordinates of one table column (decimal, or degrees, minutes and seconds as
    :func:`parse_degrees` reads them); empty or non-numeric cells become issues (and NaN).
    ``axis`` "x" (longitude: E or W) or "y" (latitude: N or S); ``letter_o`` what a
    longitude's O means ("W" or "E"; None: not known, each cell with O is appended to
    ``undecided_o`` as (row, text), and is NaN)."""
    undecided_o = [] if undecided_o is None else undecided_o
    values, status, texts = _cells(table[column], decimal_comma=decimal_comma)
    for i in np.flatnonzero(status == "bad"):
        found = _read_degrees(texts[i], letter_o=letter_o if axis == "x" else "W")
        if found is None:
            continue
        if isinstance(found, str):
            issues.append(_Issue(int(rows[i]), column, f"the coordinate '{texts[i]}' cannot "
                                 f"be read as degrees: {found}",
                                 "write it in decimal degrees (-34.6861) or as degrees, "
                                 "minutes and seconds with a hemisphere letter (34 41 10 S, "
                                 "34°41'10\"S)"))
            values[i], status[i] = np.nan, "done"
            continue
        value, hemisphere = found
        wrong = {"x": ("N", "S"), "y": ("E", "W")}[axis]
        if hemisphere in wrong:
            what, where = ("latitude", "longitude") if axis == "x" else ("longitude", "latitude")
            letter = texts[i].strip().strip("-+\u2212")
            letter = (letter[0] if letter[:1].isalpha() else letter[-1]).upper()
            issues.append(_Issue(int(rows[i]), column, f"'{texts[i]}' is a {what} "
                                 f"({letter}) in the {where} column",
                                 "swap the columns (set [samples] x_column and y_column) or "
                                 "correct the cell"))
            values[i], status[i] = np.nan, "done"
            continue
        if hemisphere == "O":
            undecided_o.append((int(rows[i]), texts[i]))
            values[i], status[i] = np.nan, "done"
            continue
        values[i], status[i] = value, "ok"
    for i in np.flatnonzero((status != "ok") & (status != "done")):
        what = "empty" if status[i] == "empty" else f"'{texts[i]}', not a number"
        issues.append(_Issue(int(rows[i]), column, f"the coordinate is {what}",
                             "give the sample's location in decimal degrees (-34.6863) or "
                             "degrees, minutes and seconds (34°41'10.7\"S), or set [samples] "
                             "on_bad_row = 'skip'"))
        values[i] = np.nan
    return values


def _table_coordinates(
    table: pd.DataFrame, xy: tuple[str, str], rows: np.ndarray, decimal_comma: bool,
    issues: list[_Issue], *, headers: Sequence[str], settings: SampleSettings, name: str,
) -> tuple[np.ndarray, np.ndarray]:
    """x and y of a table's rows (:func:`_coordinate_cells`). A longitude's letter O that
    neither ``[samples] letter_o`` nor the headers' language decides stops the reading
    with a :class:`SettingNeededError` naming the first such cell (``geosoil new`` then
    writes the project with the setting left to the user)."""
    xcol, ycol = xy
    letter_o = {"west": "W", "east": "E"}.get(settings.letter_o) or letter_o_reading(
        headers, xcol)
    undecided: list[tuple[int, str]] = []
    x = _coordinate_cells(table, xcol, rows, decimal_comma, issues, letter_o=letter_o,
                          undecided_o=undecided)
    y = _coordinate_cells(table, ycol, rows, decimal_comma, issues, axis="y")
    if undecided:
        row, text = undecided[0]
        n = len(undecided) - 1
        more = f" (and {n} more cell{'s' if n > 1 else ''})" if n else ""
        raise SettingNeededError(
            f"'{text}'{more}: the letter O of a longitude is west in Spanish, Portuguese and "
            "French (oeste, ouest) but east in German (Ost), and the headers do not say "
            "which language the file is in", file=name, row=row, column=xcol,
            fix="set [samples] letter_o = 'west' or 'east'",
        )
    return x, y


def _range_issues(
    x: np.ndarray, y: np.ndarray, rows: np.ndarray, crs: pyproj.CRS, xcol: str, ycol: str,
    issues: list[_Issue],
) -> None:
    """Longitude/latitude out of range, apparently swapped, or 0, 0."""
    if not crs.is_geographic:
        return
    skip_fix = " or set [samples] on_bad_row = 'skip'"
    located = np.isfinite(x) & np.isfinite(y)
    in_range = (np.abs(x) <= 180) & (np.abs(y) <= 90)
    for i in np.flatnonzero(located & (~in_range | ((x == 0) & (y == 0)))):
        lon, lat = x[i], y[i]
        if abs(lon) <= 180 and abs(lat) <= 90:
            if lon == 0 and lat == 0:
                issues.append(_Issue(int(rows[i]), xcol, "the location is 0, 0: a missing "
                                     "coordinate?", "give the sample's location" + skip_fix))
            continue
        if abs(lon) <= 90 < abs(lat) <= 180:
            issues.append(_Issue(
                int(rows[i]), ycol,
                f"latitude {lat:g} is out of range and longitude {lon:g} would fit it: "
                "longitude and latitude look swapped",
                f"swap the columns (set [samples] x_column = '{ycol}', y_column = '{xcol}')"
                + skip_fix,
            ))
        else:
            col, v, lim = (xcol, lon, 180) if abs(lon) > 180 else (ycol, lat, 90)
            issues.append(_Issue(int(rows[i]), col, f"{v:g} is outside -{lim} to {lim} degrees",
                                 "correct the coordinate, or set [samples] crs if the "
                                 "coordinates are projected" + skip_fix))


def _vector_points(
    geometry: gpd.GeoSeries, rows: np.ndarray, issues: list[_Issue]
) -> tuple[np.ndarray, np.ndarray]:
    """x, y of each feature's point; features without one become issues (and NaN)."""
    geoms = geometry.to_numpy()
    x = np.full(len(geoms), np.nan)
    y = np.full(len(geoms), np.nan)
    for i, g in enumerate(geoms):
        if g is None or g.is_empty:
            issues.append(_Issue(int(rows[i]), "geometry", "the feature has no location",
                                 "give it a point, or set [samples] on_bad_row = 'skip'"))
            continue
        if g.geom_type == "MultiPoint" and len(g.geoms) == 1:
            g = g.geoms[0]
        if g.geom_type != "Point":
            issues.append(_Issue(int(rows[i]), "geometry", f"the feature is a {g.geom_type}, "
                                 "not a point", "give each sample as a point"))
            continue
        x[i], y[i] = g.x, g.y
    return x, y


# --------------------------------------------------------------------------- public


def _refuse_undecided(unsure: dict[str, str], name: str, header_row: int | None) -> NoReturn:
    """Stop on the first column whose meaning its header leaves open, naming the others."""
    header, why = next(iter(unsure.items()))
    more = len(unsure) - 1
    raise InputError(
        why.split("; set ")[0] + (f" ({more} more such column(s): "
                                 + ", ".join(repr(h) for h in list(unsure)[1:]) + ")"
                                 if more else ""),
        file=name, row=header_row, column=header, fix="set " + why.split("; set ")[1],
    )


def _id_issues(ids: list[str], rows: np.ndarray, id_header: str,
               depths: tuple[np.ndarray, np.ndarray] | None, issues: list[_Issue]) -> None:
    """A problem for each empty sample ID and each ID seen before (at the same depth: one ID
    may name a place sampled at several depths)."""
    n = len(ids)
    frame = pd.DataFrame({
        "id": pd.Series(ids, dtype=object),
        "top": depths[0] if depths is not None else np.zeros(n),
        "bottom": depths[1] if depths is not None else np.zeros(n),
        "row": np.asarray(rows, dtype=np.int64),
    })
    empty = (frame["id"] == "").to_numpy()
    # a depth that could not be read (NaN, a problem of its own) matches no other
    compared = ~empty & np.isfinite(frame["top"].to_numpy()) & np.isfinite(
        frame["bottom"].to_numpy())
    named = frame[compared]
    first_row = named.groupby(["id", "top", "bottom"], sort=False)["row"].transform("first")
    again = np.zeros(n, dtype=bool)
    again[np.flatnonzero(compared)[(first_row != named["row"]).to_numpy()]] = True
    first = np.zeros(n, dtype=np.int64)
    first[compared] = first_row.to_numpy()
    for i in np.flatnonzero(empty | again):
        if empty[i]:
            issues.append(_Issue(int(rows[i]), id_header, "the sample ID is empty",
                                 "give every sample an ID, or set [samples] on_bad_row = 'skip'"))
        else:
            issues.append(_Issue(
                int(rows[i]), id_header, f"sample ID '{ids[i]}' is also on row {first[i]}"
                + (" at the same depth" if depths is not None else ""),
                "give each sample its own ID, or set [samples] on_bad_row = 'skip' to keep "
                "the first",
            ))


def read_samples(settings: SampleSettings, *, undecided: str = "stop",
                 warn_skipped: bool = True, suspect_units: str = "stop") -> SampleRead:
    """Read and check the lab results named in ``settings``.

    Parameters
    ----------
    settings
        Where the file is and how to read it.
    undecided
        A column whose meaning cannot be read from its header (an acidity that
        names neither the exchangeable nor the potential method): "stop" raises
        :class:`InputError` naming it and the settings that decide it; "keep"
        reads the rest and lists it in :attr:`SampleRead.undecided`.
    warn_skipped
        With ``on_bad_row = "skip"``: say which rows were passed over in a
        :class:`~geosoil.errors.DataWarning` (the default), or leave that to the
        caller, which has them in :attr:`SampleRead.skipped` (``geosoil new``
        lists them in a note, as the project it writes stops at them).
    suspect_units
        Columns that state no unit and whose values, read in ``default_unit``,
        make a farm of implausible soils (median ECEC above
        :data:`TYPICAL_MAX_ECEC_CMOL`): "stop" raises :class:`InputError`
        naming them, the range seen and the likely unit; "keep" reads them as
        they are and puts that in :attr:`SampleRead.unit_problem`.

    Returns
    -------
    SampleRead
        The samples GeoDataFrame (in the file's or declared CRS), the columns
        and units used, the rows passed over.

    Raises
    ------
    InputError
        The file is missing or unreadable; a needed column is absent; a row is
        bad (empty or non-numeric value, negative or implausible amount,
        duplicate sample ID, location out of range or swapped) unless
        ``on_bad_row = "skip"``. The message names file, row, column and the fix.
    SettingsError
        A setting does not fit the file.
    """
    name = str(settings.file)
    raw = _read_raw(settings, name)
    table, rows = raw.table, raw.rows
    if table.empty:
        raise InputError("the file has no data rows", file=name,
                         fix="export the lab results again, with one row per sample")
    headers = list(table.columns)
    described = {h: f"{h} ({raw.unit_cells[h]})" for h in headers
                 if h in raw.unit_cells and parse_header(h).unit is None}
    columns, id_header, xy, geographic, methods, readings, unsure = _map_columns(
        headers, settings, name, raw.header_row, need_xy=raw.geometry is None,
        described=described,
    )
    if unsure and undecided == "stop":
        _refuse_undecided(unsure, name, raw.header_row)
    table, rows, footnotes = _footnotes(table, rows, id_header, name=name,
                                        table_file=raw.geometry is None)
    units = _units(columns, settings, name, raw.header_row, unit_cells=raw.unit_cells,
                   units_row=raw.units_row)
    per_volume = sorted(a for a, u in units.items() if u in VOLUMETRIC_UNITS)
    if per_volume:
        warnings.warn(
            f"{name}: {', '.join(f'{a} ({units[a]})' for a in per_volume)} are per volume of "
            f"soil; read as cmol(+)/kg with a scoop density of {settings.scoop_density_g_cm3:g} "
            "g/cm3 (set [samples] scoop_density_g_cm3 to the lab's figure)",
            DataWarning, stacklevel=2,
        )
    issues: list[_Issue] = []
    taken = set(columns.values()) | {id_header} | (set(xy) if xy else set())
    depth_headers = _depth_headers(headers, taken, settings, name, raw.header_row)
    depths = _read_depths(table, rows, depth_headers, settings, raw.decimal_comma, issues)
    solution, solution_headers = _read_solution(
        table, rows, headers, taken | {h for h in depth_headers if h}, settings, name,
        raw.header_row, raw.decimal_comma, issues)

    ids = _id_texts(table[id_header])
    _id_issues(ids, rows, id_header, depths, issues)

    assumed = _assumed_units(columns, settings, raw.unit_cells)
    suspicion = _unit_suspicion(table, columns, assumed, settings, raw.decimal_comma,
                                name=name, header_row=raw.header_row, stop=suspect_units)
    values = {
        a: _analyte_values(a, columns[a], units[a], table[columns[a]], rows, settings, name,
                           raw.decimal_comma, issues,
                           plausible=not suspicion or a not in assumed)
        for a in CANONICAL if a in columns
    }

    if raw.geometry is not None:
        x, y = _vector_points(raw.geometry, rows, issues)
        xcol = ycol = location_column = "geometry"
        crs = _decide_crs(settings, raw.crs, x, y, None, name, "geometry", None)
    else:
        assert xy is not None
        xcol, ycol = xy
        x, y = _table_coordinates(table, xy, rows, raw.decimal_comma, issues, headers=headers,
                                  settings=settings, name=name)
        location_column = f"{xcol}/{ycol}"
        crs = _decide_crs(settings, None, x, y, geographic, name, xcol, int(rows[0]))
    _range_issues(x, y, rows, crs, xcol, ycol, issues)

    bad_rows = sorted({i.row for i in issues})
    skipped: list[tuple[int, str]] = []
    if issues:
        if settings.on_bad_row == "stop":
            order = {h: n for n, h in enumerate(headers)}
            first = min(issues, key=lambda i: (i.row, order.get(i.column or "", -1)))
            raise InputError(first.problem, file=name, row=first.row, column=first.column,
                             fix=first.fix)
        reasons: dict[int, list[str]] = {}
        for i in issues:
            reasons.setdefault(i.row, []).append(f"column '{i.column}': {i.problem}")
        skipped.extend((r, "; ".join(reasons[r])) for r in bad_rows)
        if len(bad_rows) == len(rows):
            r, reason = skipped[0]
            example = next(i for i in issues if i.row == r)
            raise InputError(f"every row is bad, e.g. {reason}", file=name, row=r,
                             fix=f"{example.fix}; else check the file and the [samples] "
                             "settings")
        if warn_skipped:
            warnings.warn(
                f"{name}: {len(skipped)} bad row(s) skipped: "
                + "; ".join(f"row {r}: {why}" for r, why in skipped[:20])
                + (f"; and {len(skipped) - 20} more" if len(skipped) > 20 else ""),
                DataWarning, stacklevel=2,
            )
    keep = ~np.isin(rows, bad_rows)

    used = set(columns.values()) | {id_header} | (set(xy) if xy else set())
    data: dict[str, Any] = {
        "sample_id": np.array(ids, dtype=object)[keep],
        "source_row": rows[keep].astype(int),
    }
    for analyte, v in values.items():
        data[analyte] = v[keep]
    if depths is not None:
        data[DEPTH_COLUMNS[0]] = depths[0][keep]
        data[DEPTH_COLUMNS[1]] = depths[1][keep]
    for column, v in solution.items():
        data[column] = v[keep]
    for header in headers:
        if header in used:
            continue
        out_name = f"{header}_lab" if header in _RESERVED else header
        data[out_name] = table[header].to_numpy()[keep]
    points = gpd.points_from_xy(x[keep], y[keep], crs=crs)
    samples = gpd.GeoDataFrame(data, geometry=points, crs=crs)
    samples.attrs["location_column"] = location_column
    samples.attrs["depth_columns"] = [h for h in depth_headers if h]
    samples.attrs["solution_columns"] = dict(solution_headers)
    logger.info(
        "%s: %d samples, analytes %s, CRS %s", name, len(samples),
        ", ".join(f"{a} <- '{h}' ({units[a] or 'no unit'})" for a, h in columns.items()),
        describe_crs(crs),
    )
    unused = _unused_columns(headers, used | {h for h in depth_headers if h}
                             | set(solution_headers.values()), described, name=name)
    return SampleRead(
        samples=samples, columns=columns, units=units, methods=methods, skipped=skipped,
        crs=crs, file=Path(settings.file), readings=readings, undecided=unsure,
        assumed_units=assumed, unit_problem=suspicion, unused=unused, sheet=raw.sheet,
        sheets=raw.sheets, footnotes=footnotes,
    )


def read_columns(settings: SampleSettings) -> SampleRead:
    """What the header row (and a units row) of the samples file say, without its rows.

    For ``geosoil new`` when :func:`read_samples` raised :class:`SettingNeededError`:
    the columns, units and methods detected, with no samples (``samples`` is empty, and
    ``crs`` is the file's own or None), and the ID or coordinates missing where they were
    not recognised.

    Parameters
    ----------
    settings
        Where the file is and how to read it.

    Returns
    -------
    SampleRead
    """
    name = str(settings.file)
    raw = _read_raw(settings, name)
    headers = list(raw.table.columns)
    described = {h: f"{h} ({raw.unit_cells[h]})" for h in headers
                 if h in raw.unit_cells and parse_header(h).unit is None}
    columns, _id, _xy, _geo, methods, readings, unsure = _map_columns(
        headers, settings, name, raw.header_row, need_xy=raw.geometry is None,
        described=described, lenient=True,
    )
    units = _units(columns, settings, name, raw.header_row, unit_cells=raw.unit_cells,
                   units_row=raw.units_row)
    empty = gpd.GeoDataFrame({"sample_id": [], "source_row": []}, geometry=[], crs=raw.crs)
    return SampleRead(
        samples=empty, columns=columns, units=units, methods=methods, skipped=[],
        crs=cast(pyproj.CRS, raw.crs), file=Path(settings.file), readings=readings,
        undecided=unsure, assumed_units=_assumed_units(columns, settings, raw.unit_cells),
        sheet=raw.sheet, sheets=raw.sheets,
    )


def prepare_samples(
    samples: gpd.GeoDataFrame,
    *,
    paddocks: gpd.GeoDataFrame,
    working_crs: pyproj.CRS,
    settings: SampleSettings,
    file: str,
    duplicates_found: list[str] | None = None,
) -> gpd.GeoDataFrame:
    """Reproject samples, name each one's paddock and merge (or refuse) near-duplicates.

    Parameters
    ----------
    samples
        As :func:`read_samples` returns them.
    paddocks
        GeoDataFrame with a ``paddock`` column and polygons, with a CRS.
    working_crs
        The run's metric CRS (see :func:`geosoil.crs.choose_working_crs`).
    settings
        ``on_bad_row``, ``duplicates`` and ``duplicate_distance_m`` are used.
    file
        The samples file, named in messages.
    duplicates_found
        With ``duplicates = "stop"``: None raises at the first pair of samples
        closer than ``duplicate_distance_m``; a list gets one problem per pair
        (and the later sample of each pair is left out), so that ``check`` can
        name them all beside every other problem.

    Returns
    -------
    GeoDataFrame
        In ``working_crs``, with a ``paddock`` column; samples outside every
        paddock dropped (``on_bad_row = "skip"``) and near-duplicates merged
        (``duplicates = "average"``: analytes averaged, location the mean, IDs
        joined as "A1+A2", ``source_row`` of the first), each with a DataWarning.
        ``attrs["outside"]`` lists the (row, problem) of the samples dropped for
        lying outside every paddock.

    Raises
    ------
    InputError
        A sample lies outside every paddock (or none lies inside any), or two
        samples are closer than ``duplicate_distance_m`` with ``duplicates = "stop"``.
    CRSError
        The samples or the paddocks have no CRS.
    """
    location = samples.attrs.get("location_column")
    if samples.crs is None or paddocks.crs is None:
        raise CRSError("the samples and the paddocks must both have a CRS")
    source_geographic = samples.crs.is_geographic
    pts = samples.to_crs(working_crs).reset_index(drop=True)
    pads = paddocks[["paddock", paddocks.geometry.name]].to_crs(working_crs)
    outside: list[tuple[int, str]] = []
    pts = _assign_paddocks(pts, pads, samples, source_geographic, settings, file, location,
                           outside)
    pts = _near_duplicates(pts, settings, file, location, duplicates_found)
    pts.attrs["location_column"] = location
    pts.attrs["outside"] = outside
    return pts


def _assign_paddocks(
    pts: gpd.GeoDataFrame, pads: gpd.GeoDataFrame, original: gpd.GeoDataFrame,
    source_geographic: bool, settings: SampleSettings, file: str, location: str | None,
    outside_rows: list[tuple[int, str]],
) -> gpd.GeoDataFrame:
    """Name each sample's paddock; samples outside every one raise, or are dropped and
    appended to ``outside_rows`` as (row, problem)."""
    tree = pads.sindex
    hit_pt, hit_pad = tree.query(pts.geometry.to_numpy(), predicate="intersects")
    order = np.lexsort((hit_pad, hit_pt))
    hit_pt, hit_pad = hit_pt[order], hit_pad[order]
    first = np.unique(hit_pt, return_index=True)
    paddock = np.full(len(pts), None, dtype=object)
    paddock[first[0]] = pads["paddock"].to_numpy()[hit_pad[first[1]]]
    several = np.unique(hit_pt[1:][hit_pt[1:] == hit_pt[:-1]])
    if several.size:
        warnings.warn(
            f"{file}: samples on rows {_row_list(pts['source_row'].to_numpy()[several])} lie in "
            "more than one paddock (overlapping boundaries); each was given the first",
            DataWarning, stacklevel=3,
        )
    outside = np.flatnonzero(pd.isna(paddock))
    pts = pts.assign(paddock=paddock)
    if outside.size == 0:
        return pts
    if outside.size == len(pts):
        raise InputError(
            f"none of the {len(pts)} samples lies in a paddock: the CRS of the samples or of "
            "the paddocks is probably wrong", file=file, row=int(pts["source_row"].iloc[0]),
            column=location,
            fix="check [samples] crs and the paddock file's CRS (or that the files belong "
            "together)",
        )
    pad_union = shapely.union_all(pads.geometry.to_numpy())
    problems = []
    for i in outside:
        g = pts.geometry.iloc[i]
        problem = f"sample '{pts['sample_id'].iloc[i]}' lies outside every paddock " \
                  f"({g.distance(pad_union):.0f} m from the nearest)"
        if source_geographic:
            o = original.geometry.iloc[i]
            swapped = gpd.GeoSeries(
                [shapely.Point(o.y, o.x)], crs=original.crs
            ).to_crs(pts.crs).iloc[0]
            if abs(o.y) <= 180 and abs(o.x) <= 90 and swapped.intersects(pad_union):
                problem += "; with longitude and latitude swapped it would lie inside one"
        problems.append((int(pts["source_row"].iloc[i]), problem))
    if settings.on_bad_row == "stop":
        row, problem = problems[0]
        raise InputError(
            problem, file=file, row=row, column=location,
            fix="check its coordinates and [samples] crs, or set [samples] on_bad_row = 'skip'",
        )
    outside_rows.extend(problems)
    warnings.warn(
        f"{file}: {len(problems)} sample(s) outside every paddock skipped: "
        + "; ".join(f"row {r}: {p}" for r, p in problems),
        DataWarning, stacklevel=3,
    )
    return pts.drop(index=pts.index[outside]).reset_index(drop=True)


_GROUPS_LISTED = 50  # merged groups named one by one in the warning


def close_pairs(xy: NDArray[np.float64], distance: float) -> NDArray[np.intp]:
    """Every pair ``(i, j)``, ``i < j``, of points at most ``distance`` apart, sorted.

    Shapely's STRtree (already loaded for the geometry) answers this without
    loading scipy's spatial package for every run; the tests hold it against
    :meth:`scipy.spatial.cKDTree.query_pairs`.

    Examples
    --------
    >>> close_pairs(np.array([[0.0, 0.0], [0.5, 0.0], [5.0, 5.0], [5.0, 5.9]]), 1.0).tolist()
    [[0, 1], [2, 3]]
    """
    points = shapely.points(np.asarray(xy, dtype=float))
    i, j = shapely.STRtree(points).query(points, predicate="dwithin", distance=distance)
    keep = i < j
    out = np.column_stack([i[keep], j[keep]]).astype(np.intp)
    return out[np.lexsort((out[:, 1], out[:, 0]))] if len(out) else out.reshape(0, 2)


def _near_duplicates(
    pts: gpd.GeoDataFrame, settings: SampleSettings, file: str, location: str | None,
    found: list[str] | None = None,
) -> gpd.GeoDataFrame:
    xy = np.column_stack([pts.geometry.x.to_numpy(), pts.geometry.y.to_numpy()])
    pairs = close_pairs(xy, settings.duplicate_distance_m)
    if len(pairs) and DEPTH_COLUMNS[0] in pts.columns:
        # one place sampled at several depths is not a duplicate: only the same depth is
        top = pts[DEPTH_COLUMNS[0]].to_numpy(float)
        bottom = pts[DEPTH_COLUMNS[1]].to_numpy(float)
        same = (top[pairs[:, 0]] == top[pairs[:, 1]]) & (bottom[pairs[:, 0]] == bottom[pairs[:, 1]])
        pairs = pairs[same]
    if len(pairs) == 0:
        return pts
    from scipy.sparse import coo_matrix  # only when there are near-duplicates to merge
    from scipy.sparse.csgraph import connected_components

    rows = pts["source_row"].to_numpy()
    ids = pts["sample_id"].astype(str).to_numpy()
    n = len(pts)
    graph = coo_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])), shape=(n, n))
    _count, label = connected_components(graph, directed=False)
    if settings.duplicates == "stop":
        errors = []
        for a, b in pairs[np.lexsort((pairs[:, 1], pairs[:, 0]))]:
            gap = float(np.hypot(*(xy[a] - xy[b])))
            errors.append(InputError(
                f"samples '{ids[a]}' (row {rows[a]}) and '{ids[b]}' (row {rows[b]}) are "
                f"{gap:.2f} m apart; kriging needs distinct points", file=file,
                row=int(rows[b]), column=location,
                fix="correct the location, or set [samples] duplicates = 'average' to merge "
                f"samples closer than duplicate_distance_m = {settings.duplicate_distance_m:g} m",
            ))
            if found is None:
                raise errors[0]
        assert found is not None
        found.extend(str(e) for e in errors)
        later = sorted({int(max(a, b)) for a, b in pairs})
        return pts.drop(index=pts.index[later]).reset_index(drop=True)
    # every group at once (one pass of groupby, not a loop over groups): the first sample of
    # a group keeps the group's mean values at its mean place; the others are dropped
    idx = np.flatnonzero(np.bincount(label)[label] > 1)
    members = pd.DataFrame({"g": label[idx], "i": idx, "x": xy[idx, 0], "y": xy[idx, 1],
                            "id": ids[idx], "row": rows[idx]})
    grouped = members.groupby("g", sort=True)
    keep = grouped["i"].min().to_numpy()
    analytes = [a for a in CANONICAL if a in pts.columns]
    if analytes:
        means = pts.iloc[idx][analytes].astype(float).groupby(label[idx], sort=True).mean()
        for a in analytes:
            pts.loc[pts.index[keep], a] = means[a].to_numpy()
    geoms = pts.geometry.to_numpy().copy()
    geoms[keep] = shapely.points(grouped["x"].mean().to_numpy(), grouped["y"].mean().to_numpy())
    pts.loc[pts.index[keep], "sample_id"] = grouped["id"].agg("+".join).to_numpy()
    labels = (members["id"] + " (row " + members["row"].astype(str) + ")").groupby(
        members["g"], sort=True).agg(" + ".join).tolist()
    shown = "; ".join(labels[:_GROUPS_LISTED]) + (
        f"; and {len(labels) - _GROUPS_LISTED} more group(s)"
        if len(labels) > _GROUPS_LISTED else "")
    pts = pts.set_geometry(gpd.GeoSeries(geoms, crs=pts.crs, index=pts.index))
    warnings.warn(
        f"{file}: samples closer than {settings.duplicate_distance_m:g} m merged by averaging: "
        + shown,
        DataWarning, stacklevel=3,
    )
    drop = np.setdiff1d(idx, keep)
    return pts.drop(index=pts.index[drop]).reset_index(drop=True)
