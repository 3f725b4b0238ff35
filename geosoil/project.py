"""The project file: one TOML file that holds every setting of a job.

A project file sits in a folder with (or pointing at) the samples file and the
boundary files; relative paths are resolved from the project file's folder.
Every key is validated on load (type, range, allowed values); an unknown key is
rejected with the nearest valid key suggested; every message names the dotted
key. :func:`template` writes a complete project file, every setting with its
default and a one-line comment, from the settings classes themselves, so the
template and the validation can never disagree.
"""

from __future__ import annotations

import dataclasses
import difflib
import math
import os
import tomllib
import typing
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import shapely
import tomli_w

from .boundaries import BoundarySettings
from .chemistry import ChemistrySettings
from .errors import GeosoilError, InputError, SettingsError
from .products import ProductSettings
from .rates import RateSettings
from .salinity import SalinitySettings
from .samples import SampleSettings, record_keeping, record_keeping_message
from .settings import describe, from_mapping, setting, to_mapping
from .spreader import COMMON_MAX_PER_PASS_KG_HA, SpreaderSettings
from .surfaces import InterpolationSettings
from .zones import ZoneSettings

__all__ = [
    "PROJECT_FILE_NAME",
    "NEW_MIN_RATE_KG_HA",
    "NEW_CELL_SIZES_M",
    "NEW_MAX_CELLS",
    "cell_size_for",
    "SoilSettings",
    "GridSettings",
    "TonnageSettings",
    "OutputSettings",
    "ProjectSettings",
    "Project",
    "load_project",
    "parse_project",
    "settings_problems",
    "load_project_problems",
    "template",
    "default_products",
    "new_project",
]

PROJECT_FILE_NAME = "geosoil.toml"

#: Smallest rate a new project's spreader meters, kg/ha: spinner spreaders rarely put out less
#: lime or gypsum (common practice). The library's own default is 0 (no limit).
NEW_MIN_RATE_KG_HA = 100.0

#: ``new`` picks the smallest of these cell sizes (metres) that keeps the farm within
#: NEW_MAX_CELLS cells.
NEW_CELL_SIZES_M = (10.0, 15.0, 20.0, 25.0, 30.0, 40.0, 50.0, 75.0, 100.0)
#: About this many cells keep a whole run of a farm within a minute on a small machine
#: (see benchmarks/bench_scale.py); finer grids cost time and memory in proportion.
NEW_MAX_CELLS = 250_000


def cell_size_for(area_ha: float) -> float:
    """The cell size ``new`` writes for a farm of ``area_ha``: the smallest of
    :data:`NEW_CELL_SIZES_M` that keeps it within :data:`NEW_MAX_CELLS` cells.

    Parameters
    ----------
    area_ha
        Area of all paddocks together, hectares.

    Returns
    -------
    float
        Cell side, metres.

    Examples
    --------
    >>> cell_size_for(250.0), cell_size_for(2000.0), cell_size_for(5000.0)
    (10.0, 10.0, 15.0)
    """
    for size in NEW_CELL_SIZES_M:
        if area_ha * 1e4 / (size * size) <= NEW_MAX_CELLS:
            return size
    return NEW_CELL_SIZES_M[-1]


@dataclass(frozen=True)
class SoilSettings:
    """The layer of soil an amendment must treat."""

    depth_m: float = setting(
        0.10, doc="depth of soil the amendment must treat", unit="m", minimum=0.01, maximum=1.0
    )
    bulk_density_g_cm3: float = setting(
        1.4,
        doc="dry bulk density of that layer (about 1.4 when unmeasured: common practice)",
        unit="g/cm3",
        minimum=0.5,
        maximum=2.0,
    )
    bulk_density_by_paddock: dict[str, float] = setting(
        default_factory=dict,
        doc="measured bulk density per paddock name, overriding bulk_density_g_cm3",
        unit="g/cm3",
    )

    bulk_density_by_layer: dict[str, float] = setting(
        default_factory=dict,
        doc="bulk density of a deeper sampled layer, by its depth as '10-30' (cm), for the "
        "gypsum requirement summed over layers (default: the paddock's bulk density)",
        unit="g/cm3",
    )

    bulk_density_raster: Path | None = setting(
        None,
        doc="raster of bulk density (GeoTIFF, g/cm3) used instead of the values above where it "
        "has data",
    )

    def __post_init__(self) -> None:
        for name, bd in self.bulk_density_by_paddock.items():
            if not (0.5 <= bd <= 2.0):
                raise SettingsError(
                    f"must be from 0.5 to 2.0 g/cm3 (got {bd:g})",
                    key=f"bulk_density_by_paddock.{name}",
                )
        for name, bd in self.bulk_density_by_layer.items():
            if not (0.5 <= bd <= 2.0):
                raise SettingsError(
                    f"must be from 0.5 to 2.0 g/cm3 (got {bd:g})",
                    key=f"bulk_density_by_layer.{name}",
                )

    def bulk_density_for(self, paddock: str) -> float:
        """Bulk density of ``paddock`` (its own value, else the farm value)."""
        return self.bulk_density_by_paddock.get(paddock, self.bulk_density_g_cm3)


@dataclass(frozen=True)
class GridSettings:
    """The raster grid every surface and rate is computed on."""

    cell_size_m: float = setting(
        10.0, doc="side of a grid cell", unit="m", minimum=1.0, maximum=200.0
    )


@dataclass(frozen=True)
class TonnageSettings:
    """Carting and cost figures for the tonnage table."""

    truck_capacity_t: float | None = setting(
        None, doc="load a truck or spreader carries, for truckloads", unit="t", minimum=0.1
    )
    price_per_t: dict[str, float] = setting(
        default_factory=dict, doc="price of each product per tonne, delivered", unit="per t"
    )
    currency: str = setting(
        "", doc="ISO 4217 code of the prices' currency (e.g. AUD), shown with every cost; "
        "empty: none named"
    )

    def __post_init__(self) -> None:
        if self.currency and not (len(self.currency) == 3 and self.currency.isascii()
                                  and self.currency.isalpha() and self.currency.isupper()):
            raise SettingsError(
                f"'{self.currency}' is not a currency code: write the three capital letters of "
                "ISO 4217 (AUD, NZD, USD, EUR, ...)", key="currency")
        for name, price in self.price_per_t.items():
            if not (price >= 0 and math.isfinite(price)):
                raise SettingsError(f"must be 0 or more (got {price:g})", key=f"price_per_t.{name}")


@dataclass(frozen=True)
class OutputSettings:
    """How results are written and shown."""

    rate_unit: str = setting(
        "kg/ha",
        doc="unit of rates in the map, report and summary",
        choices=("kg/ha", "t/ha", "lb/ac"),
    )
    background_tiles: bool = setting(
        False, doc="add an online background map layer (the map works offline without it)"
    )
    cache_dir: Path | None = setting(
        None,
        doc="folder for cached surfaces (default: the user's cache folder, ~/.cache/geosoil)",
    )
    machine_crs: str = setting(
        "wgs84",
        doc="CRS of the prescription shapefiles and zone GeoTIFFs: 'wgs84' (longitude/latitude, "
        "what most in-cab terminals take), 'working' (the run's UTM zone) or 'boundaries' (the "
        "paddock file's CRS); GeoJSON and task data are always WGS 84",
        choices=("wgs84", "working", "boundaries"),
    )
    name_clashes: str = setting(
        "refuse",
        doc="paddock or product names that make the same file name (case, spaces, signs) or "
            "none: refuse them, or suffix them (red-hill, red-hill-2)",
        choices=("refuse", "suffix"),
    )


def default_products() -> dict[str, ProductSettings]:
    """The products a new project lists: gypsum and agricultural lime.

    Returns
    -------
    dict of str to ProductSettings
        ``gypsum`` and ``lime`` with their default analyses.
    """
    return {"gypsum": ProductSettings(), "lime": ProductSettings()}


@dataclass(frozen=True)
class ProjectSettings:
    """Every setting of a job, one table per stage."""

    samples: SampleSettings = setting(doc="the lab results file and how to read it")
    boundaries: BoundarySettings = setting(doc="paddock boundaries, exclusions, creeks, zones")
    farm: str = setting("", doc="farm name shown on the map and the report")
    chemistry: ChemistrySettings = setting(
        default_factory=ChemistrySettings, doc="thresholds for sodicity and acidity classes"
    )
    salinity: SalinitySettings = setting(
        default_factory=SalinitySettings,
        doc="EC 1:5 -> ECe, salinity and dispersion classes, gypsum dissolving water",
    )
    soil: SoilSettings = setting(default_factory=SoilSettings, doc="the treated layer")
    grid: GridSettings = setting(default_factory=GridSettings, doc="the computation grid")
    interpolation: InterpolationSettings = setting(
        default_factory=InterpolationSettings, doc="variograms and kriging"
    )
    rates: RateSettings = setting(default_factory=RateSettings, doc="amendment rules")
    products: dict[str, ProductSettings] = setting(
        default_factory=default_products, doc="products bought, with their analysis"
    )
    spreader: SpreaderSettings = setting(
        default_factory=SpreaderSettings, doc="what the spreader can apply"
    )
    zones: ZoneSettings = setting(default_factory=ZoneSettings, doc="spreader zones")
    tonnage: TonnageSettings = setting(default_factory=TonnageSettings, doc="carting and cost")
    output: OutputSettings = setting(default_factory=OutputSettings, doc="outputs")

    def __post_init__(self) -> None:
        # A price for a product that is not defined (a typo) would leave the real one
        # without a price and the total cost short, without a word; a per-pass limit
        # for one would leave no limit.
        for table, named in (("tonnage.price_per_t", self.tonnage.price_per_t),
                             ("spreader.max_per_pass_by_product",
                              self.spreader.max_per_pass_by_product)):
            for name in named:
                if name not in self.products:
                    near = difflib.get_close_matches(name, list(self.products), n=1)
                    hint = f"did you mean '{near[0]}'? " if near else ""
                    raise SettingsError(
                        f"'{name}' is not a defined product; {hint}defined products: "
                        f"{', '.join(sorted(self.products)) or 'none'}",
                        key=f"{table}.{name}",
                    )


@dataclass(frozen=True)
class Project:
    """A loaded project: its settings, its file and the folder paths are resolved from."""

    settings: ProjectSettings
    path: Path | None
    text: str

    @property
    def folder(self) -> Path | None:
        """The folder of the project file (None for a project read from text)."""
        return None if self.path is None else self.path.parent

    def input_files(self) -> list[Path]:
        """Every input file the project names (samples, boundaries, zones...)."""
        files: list[Path] = [self.settings.samples.file]
        if self.settings.soil.bulk_density_raster is not None:
            files.append(self.settings.soil.bulk_density_raster)
        b = self.settings.boundaries
        for f in dataclasses.fields(b):
            v = getattr(b, f.name)
            if isinstance(v, Path):
                files.append(v)
        return files


def _read_toml(text: str, *, source: str) -> dict[str, Any]:
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(
            f"not valid TOML ({exc})", file=source, fix="correct the line the parser names"
        ) from None
    except RecursionError:
        raise InputError(
            "arrays or tables are nested too deeply to read (no setting nests more than a "
            "few levels)", file=source, fix="remove the extra brackets",
        ) from None


def _split_key(data: Mapping[str, Any], parts: list[str]) -> list[str] | None:
    """The path of mapping keys that ``parts`` (a dotted key split on dots) names in ``data``.

    Keys of user tables may hold dots themselves (a paddock called "Block 2.1"), so
    at each level the longest run of parts that is a key wins.
    """
    for n in range(len(parts), 0, -1):
        head = ".".join(parts[:n])
        if head not in data:
            continue
        if n == len(parts):
            return [head]
        sub = data[head]
        if isinstance(sub, Mapping):
            rest = _split_key(sub, parts[n:])
            if rest is not None:
                return [head, *rest]
    return None


def _set_aside(data: dict[str, Any], key: str) -> bool:
    """Remove dotted ``key`` from ``data`` (``key[i]``: the whole list). False if absent."""
    bare = key.split("[", 1)[0]
    path = _split_key(data, bare.split(".")) if bare else None
    if not path:
        return False
    table: Any = data
    for part in path[:-1]:
        table = table[part]
    del table[path[-1]]
    return True


def settings_problems(
    text: str, *, base_dir: Path, source: str = "project file"
) -> tuple[ProjectSettings | None, list[GeosoilError]]:
    """Validate project-file ``text`` and list every problem, not only the first.

    Each key found wrong is set aside (as if it were not written) and the
    rest is validated again, until it passes or a problem cannot be set aside
    (a required key is missing, or a check spans keys that were not written).

    Parameters
    ----------
    text : str
        The TOML text.
    base_dir : Path
        Folder that relative paths resolve from.
    source : str, optional
        Name of the text in messages.

    Returns
    -------
    settings, problems
        The settings when there is no problem (else None), and the problems
        in the order found, each naming its dotted key.

    Examples
    --------
    >>> text = '''farm = 1
    ... [samples]
    ... file = "lab.csv"
    ... [boundaries]
    ... paddocks = "paddocks.geojson"
    ... [grid]
    ... cell_sise_m = 5
    ... '''
    >>> settings, problems = settings_problems(text, base_dir=Path("."))
    >>> settings is None, [p.key for p in problems]
    (True, ['farm', 'grid.cell_sise_m'])
    """
    try:
        data = _read_toml(text, source=source)
    except InputError as exc:
        return None, [exc]
    problems: list[GeosoilError] = []
    seen: set[str | None] = set()
    while True:
        try:
            settings = from_mapping(ProjectSettings, data, section="", base_dir=base_dir)
        except SettingsError as exc:
            if exc.key in seen:  # setting it aside did not help: stop here
                return None, problems
            seen.add(exc.key)
            problems.append(exc)
            if exc.key is None or not _set_aside(data, exc.key):
                return None, problems
            continue
        return (None if problems else settings), problems


def parse_project(text: str, *, base_dir: Path, source: str = "project file") -> ProjectSettings:
    """Parse and validate project-file ``text``; relative paths resolve from ``base_dir``.

    Parameters
    ----------
    text : str
        The TOML text.
    base_dir : Path
        Folder that relative paths resolve from.
    source : str, optional
        Name of the text in messages.

    Returns
    -------
    ProjectSettings
        The validated settings.

    Raises
    ------
    InputError
        The text is not valid TOML (with the line and column).
    SettingsError
        A key is unknown, missing, of the wrong type or out of range. When
        several keys are wrong, one error lists them all (see
        :func:`settings_problems`).
    """
    settings, problems = settings_problems(text, base_dir=base_dir, source=source)
    if settings is not None:
        return settings
    if len(problems) == 1:
        only = problems[0]
        if type(only) is SettingsError and only.source is None:  # name the file it is in
            raise SettingsError(only.bare_message, key=only.key, source=source)
        raise only
    raise SettingsError(
        f"{len(problems)} problems in {source}:\n" + "\n".join(f"  {p}" for p in problems)
    )


def _project_path(path: Path | str) -> Path:
    p = Path(path)
    if p.is_dir():
        p = p / PROJECT_FILE_NAME
    if not p.is_file():
        raise InputError(
            "project file not found",
            file=p,
            fix=f"give a project folder holding {PROJECT_FILE_NAME}, or create one with "
            "'geosoil new'",
        )
    return p


def _read_text(p: Path) -> str:
    try:
        return p.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read the project file ({exc})", file=p) from None


def load_project(path: Path | str) -> Project:
    """Load a project from its TOML file or from the folder that holds ``geosoil.toml``.

    Parameters
    ----------
    path : Path or str
        The project file, or the folder that holds ``geosoil.toml``.

    Returns
    -------
    Project
        The validated settings, the file's path and its text.

    Raises
    ------
    InputError
        No project file there, it cannot be read, or it is not valid TOML.
    SettingsError
        A setting is wrong (one error lists every wrong key).
    """
    p = _project_path(path)
    text = _read_text(p)
    settings = parse_project(text, base_dir=p.parent.resolve(), source=str(p.resolve()))
    return Project(settings=settings, path=p.resolve(), text=text)


def load_project_problems(path: Path | str) -> tuple[Project | None, list[GeosoilError]]:
    """Like :func:`load_project`, but return every problem instead of raising the first.

    Parameters
    ----------
    path : Path or str
        The project file, or the folder that holds ``geosoil.toml``.

    Returns
    -------
    project, problems
        The project when its file reads and its settings are valid (else
        None), and the problems found.

    """
    try:
        p = _project_path(path)
        text = _read_text(p)
    except InputError as exc:
        return None, [exc]
    settings, problems = settings_problems(text, base_dir=p.parent.resolve(), source=str(p))
    if settings is None:
        return None, problems
    return Project(settings=settings, path=p.resolve(), text=text), []


# --------------------------------------------------------------------------- template


def _toml_value(value: Any) -> str:
    """One TOML value on one line (inline tables and arrays included)."""
    if isinstance(value, dict):
        items = ", ".join(f"{_toml_key(k)} = {_toml_value(v)}" for k, v in value.items())
        return "{ " + items + " }" if items else "{}"
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    return tomli_w.dumps({"v": value}).strip().split("=", 1)[1].strip()


def _toml_key(key: str) -> str:
    return tomli_w.dumps({key: 0}).strip().rsplit("=", 1)[0].strip()


def _comment(doc: Any) -> str:
    text = doc.doc
    if doc.unit:
        text += f" [{doc.unit}]"
    if doc.choices:
        text += "; one of: " + ", ".join(doc.choices)
    return "  # " + text


def _emit_table(
    lines: list[str], section: str, cls: type, values: Any, *, header: bool = False
) -> None:
    hints = typing.get_type_hints(cls)
    simple: list[str] = []
    nested: list[tuple[str, Any, Any, bool]] = []
    for doc in describe(cls):
        value = getattr(values, doc.key) if values is not None else doc.default
        tp = hints[doc.key]
        if dataclasses.is_dataclass(tp):
            nested.append((_toml_key(doc.key), tp, value, False))
            continue
        if typing.get_origin(tp) is dict:
            vtp = typing.get_args(tp)[1]
            if dataclasses.is_dataclass(vtp):
                where = f"{section}.{doc.key}" if section else doc.key
                simple.append(
                    f"# {doc.key}: {'none yet; ' if not value else ''}one table [{where}.NAME] "
                    f"each{_comment(doc)}"
                )
                for name, sub in (value or {}).items():
                    nested.append((f"{_toml_key(doc.key)}.{_toml_key(name)}", vtp, sub, True))
                continue
        if value is None or value is dataclasses.MISSING:
            simple.append(f"# {doc.key} = ...{_comment(doc)}")
        else:
            plain = to_mapping(_Box(value))["v"]
            if isinstance(plain, dict) and not plain:
                simple.append(f"# {doc.key} = {{}}{_comment(doc)}")
            else:
                simple.append(f"{_toml_key(doc.key)} = {_toml_value(plain)}{_comment(doc)}")
    if simple or header:
        if section:
            lines.append("")
            lines.append(f"[{section}]")
        lines.extend(simple)
    for key, tp, value, force in nested:
        _emit_table(lines, f"{section}.{key}" if section else key, tp, value, header=force)


@dataclass(frozen=True)
class _Box:
    v: Any


def template(settings: ProjectSettings, *, header: str = "") -> str:
    """A complete, commented project file for ``settings``.

    Every key is written with its value and a one-line comment (unit and allowed
    values); keys without a value are written commented out. The text parses
    back to the same settings.

    Parameters
    ----------
    settings : ProjectSettings
        The values to write.
    header : str, optional
        Comment lines put at the top of the file.

    Returns
    -------
    str
        The TOML text.
    """
    lines = ["# geosoil project file. Units are in the key names or the comments."]
    if header:
        lines.extend("# " + h for h in header.splitlines())
    lines.append(
        "# Rates are advisory: have them checked by a qualified agronomist; local codes prevail."
    )
    _emit_table(lines, "", ProjectSettings, settings)
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- new project


def _relative(path: Path, folder: Path) -> Path:
    """``path`` relative to ``folder`` when it is near (at most one level up), else absolute."""
    try:
        rel = Path(os.path.relpath(path.resolve(), folder.resolve()))
    except ValueError:  # another drive on Windows
        return path.resolve()
    return rel if rel.parts[:2] != ("..", "..") else path.resolve()


def _lime_for_columns(read: Any) -> tuple[RateSettings, list[str]]:
    """The lime method (and target pH method) a new project starts from, with notes."""
    from .chemistry import rule_ph
    from .rates import AL_METHODS, LimeRule, _lime_problem, choose_lime_method

    cols = set(read.columns)
    available = set(cols)
    if {"ca", "mg", "k", "na"} <= cols or "cec" in cols:
        available.add("ecec")
    if cols & {"al", "h"}:
        available.add("acidity")  # Al + H given apart make the exchangeable acidity
    method, _ = rule_ph({c: c for c in cols})
    if method is not None:
        available = (available - {"ph_cacl2"}) | {"ph"}
    ph_method = method or "water"
    lime = LimeRule(method="auto")
    target_source = ""
    if ph_method == "CaCl2":
        # the built-in default target is pH 6.0 in water; a lab reporting CaCl2 gets the
        # common-practice CaCl2 target, so that pH and target are in one method
        lime = dataclasses.replace(lime, target_ph=5.5, target_ph_method="CaCl2")
        target_source = ("common practice for most crops when pH is read in CaCl2 (about pH 6.0 "
                         "in water)")
    chosen, reasons = choose_lime_method(RateSettings(lime=lime), available, ph_method=ph_method)
    order = ", ".join(lime.method_order)
    notes: list[str] = []
    if chosen is None:
        from .rates import _ask_for

        ask = _ask_for(RateSettings(lime=lime), available, ph_method)
        notes.append(
            f"lime: no lime method can run on these columns ({'; '.join(reasons)}); acid cells "
            f"will be flagged 'lime requirement needs a test': ask the lab for {ask}"
        )
        return RateSettings(lime=lime), notes
    lime = dataclasses.replace(lime, method=chosen)
    why = "its inputs are in the lab file"
    if reasons:
        why += "; the methods before it cannot run: " + "; ".join(reasons[:3]) + (
            " ..." if len(reasons) > 3 else "")
    target = lime.target()
    notes.append(
        f"lime method '{chosen}' chosen, the first of [rates.lime] method_order ({order}) the "
        f"columns support ({why}); change rates.lime.method to choose another"
    )
    if chosen not in AL_METHODS:
        notes.append(
            f"lime target: pH {target.ph:g} in {target.ph_method} "
            f"({target_source or target.source}); set rates.lime.crop or target_ph for your crop"
        )
    assert _lime_problem(chosen, lime, available, ph_method) is None
    return RateSettings(lime=lime), notes


def _depth_notes(samples: Any) -> list[str]:
    """What ``new`` says about the samples' depths (nothing without a depth column)."""
    if "depth_top_cm" not in samples.columns:
        return []
    found = sorted(set(zip(samples["depth_top_cm"], samples["depth_bottom_cm"], strict=True)))
    depth_from = ", ".join(f"'{h}'" for h in samples.attrs.get("depth_columns", []))
    if len(found) > 1:
        return [
            f"samples at {len(found)} depths ({depth_from}: "
            + ", ".join(f"{t:g}-{b:g} cm" for t, b in found)
            + "): each depth is mapped as its own layer; gypsum treats [soil] depth_m "
            "unless [rates.gypsum] treat_depth_cm says deeper (the layers' requirements "
            "summed); give deeper layers' bulk density in [soil] bulk_density_by_layer"
        ]
    return [f"samples of one depth ({depth_from}: {found[0][0]:g}-{found[0][1]:g} cm): set "
            "[soil] depth_m to the depth the amendment must treat"] if found else []


def _sheet_read(read: Any, trial: SampleSettings, notes: list[str]) -> str | None:
    """The sheet a new project names: the one read, when the workbook has several (written
    down, so that every run reads the same sheet), with a note."""
    if len(read.sheets) <= 1:
        return trial.sheet_or_layer
    notes.append(f"sheet '{read.sheet}' of {len(read.sheets)} read (the first with a table of "
                 "samples; the others: " + ", ".join(
                     f"'{n}'" for n in read.sheets if n != read.sheet)
                 + "); set [samples] sheet_or_layer to read another")
    return str(read.sheet)


def _units_unchecked(read: Any, trial: SampleSettings) -> str | None:
    """What ``new`` leaves to settle of the units when the rows could not be read (no ID
    or coordinate columns): the columns whose unit nothing states, read in the default
    unit, whose values nothing has checked yet; None when every unit is stated."""
    if not read.assumed_units:
        return None
    return ("no unit stated for " + ", ".join(f"'{read.columns[a]}'" for a in read.assumed_units)
            + f": read as {trial.default_unit} ([samples] default_unit), not yet checked "
            "against their values (the rows are read once the columns above are set); state "
            f"the lab's unit in [samples.units] (e.g. {read.assumed_units[0]} = 'mmol/kg') if "
            "it is another")


def _unit_notes(read: Any, trial: SampleSettings, name: str, to_do: list[str]) -> list[str]:
    """What ``new`` says of the units (stated, assumed, suspected) and the columns not read;
    a suspected unit is also appended to ``to_do``."""
    notes = []
    stated = [f"{k} {v}" for k, v in read.units.items() if v and k not in read.assumed_units]
    if stated:
        notes.append("units: " + ", ".join(stated))
    if read.assumed_units:
        notes.append(
            "no unit stated in the file for "
            + ", ".join(f"'{read.columns[a]}'" for a in read.assumed_units)
            + f": read as {trial.default_unit} ([samples] default_unit); state the lab's unit "
            "in [samples.units] (e.g. " + f"{read.assumed_units[0]} = 'mmol/kg') if it is "
            "another"
        )
    if read.unit_problem is not None:
        notes.append(f"{read.unit_problem}; 'check' and 'run' stop until the unit is stated")
        to_do.append(read.unit_problem)
    if record_keeping(read.unused):  # the others are a warning of the reading, printed once
        notes.append(record_keeping_message(name, read.unused))
    return notes


def _inside_notes(read: Any, pads: Any, name: str) -> list[str]:
    """What ``new`` says when samples fall outside the boundaries (nothing when all are in)."""
    notes: list[str] = []
    if read.samples.crs is None or pads.crs is None or not len(read.samples):
        return notes
    pts = read.samples.geometry.to_crs(pads.crs)
    inside_each = shapely.intersects_xy(
        pads.geometry.union_all(), pts.x.to_numpy(), pts.y.to_numpy())
    share = float(np.mean(inside_each))
    if share < 0.5:
        notes.append(
            f"only {share:.0%} of the samples fall inside the boundaries with the CRS "
            f"{read.samples.crs.name}: check the samples' CRS (--crs) and the boundaries file"
        )
    elif share < 1:
        rows = read.samples["source_row"].to_numpy()[~inside_each]
        shown = ", ".join(str(int(r)) for r in rows[:10]) + (
            f" and {len(rows) - 10} more" if len(rows) > 10 else "")
        notes.append(
            f"{len(rows)} sample(s) lie outside every paddock ({name} row(s) "
            f"{shown}): 'check' and 'run' stop at them; correct their coordinates, or set "
            "[samples] on_bad_row = 'skip' to leave them out"
        )
    return notes


def new_project(
    folder: Path | str,
    *,
    samples: Path | str,
    paddocks: Path | str,
    crs: str | None = None,
    overwrite: bool = False,
) -> tuple[Path, list[str]]:
    """Write ``folder/geosoil.toml`` for a samples file and a boundaries file.

    The lab file's columns, units and coordinate CRS are detected and written
    out; every other setting is written at its default with a comment. The
    file runs as written.

    CRS of the sample coordinates, in order: the file's own (vector formats);
    ``crs`` when given; lon/lat when the coordinate columns are named or look
    like longitude and latitude; else the boundaries' CRS when the x/y fall
    inside the boundaries in that CRS (a note says so).

    Parameters
    ----------
    folder : Path or str
        The project folder (created when missing).
    samples : Path or str
        The lab results file.
    paddocks : Path or str
        The paddock boundaries file.
    crs : str, optional
        CRS of the sample coordinates when the file carries none.
    overwrite : bool, optional
        Replace an existing ``folder/geosoil.toml``.

    Returns
    -------
    path, notes
        The project file written and what was detected.

    Raises
    ------
    OutputExistsError
        The project file exists and ``overwrite`` is false.
    InputError, CRSError
        A file cannot be read, or the samples' CRS cannot be decided.
    """
    from .boundaries import read_paddocks
    from .errors import CRSError, OutputExistsError
    from .samples import SettingNeededError, read_columns, read_samples

    folder = Path(folder)
    target = folder / PROJECT_FILE_NAME
    if target.exists() and not overwrite:
        raise OutputExistsError(
            f"{target} exists; pass --overwrite to replace it (the old file is not kept)"
        )
    samples = Path(samples).resolve()
    paddocks_path = Path(paddocks).resolve()
    notes: list[str] = []
    to_do: list[str] = []  # what `check` will stop at, written at the top of the file
    boundaries = BoundarySettings(paddocks=paddocks_path)
    pads = read_paddocks(boundaries)
    # bad cells do not stop `new` (the project file is where on_bad_row is set): the rows are
    # read past here (read.skipped, with no warning), named in a note, and `check` and `run`
    # stop at them as usual
    trial = SampleSettings(file=samples, crs=crs, on_bad_row="skip")
    try:
        read = read_samples(trial, undecided="keep", warn_skipped=False,
                            suspect_units="keep")
    except SettingNeededError as exc:
        # the ID or coordinate columns, or a unit, need a setting of the file being written:
        # write it with what the header row says, and leave that setting to the user
        read = read_columns(trial)
        to_do.append(str(exc))
        units = _units_unchecked(read, trial) if exc.keys else None
        if units is not None:
            to_do.append(units)
        settle = "that" if len(exc.keys) < 2 and not units else "these"
        notes.append(f"{exc}; {units + '; ' if units else ''}the project is written with "
                     f"{settle} left for you: 'check' and 'run' stop until "
                     f"{'it is' if settle == 'that' else 'they are'} set")
    except CRSError:
        if crs is not None or pads.crs is None:
            raise
        ask = (
            f"{samples}: the sample coordinates carry no CRS and are not longitude/latitude; "
            "give their CRS with --crs (an EPSG code such as EPSG:28355, or WKT)"
        )
        if pads.crs.is_geographic:  # projected x/y cannot be in the boundaries' lon/lat
            raise CRSError(
                f"{ask}: the boundaries are in longitude/latitude ({pads.crs.name})"
            ) from None
        guess = pads.crs.to_string()
        read = read_samples(dataclasses.replace(trial, crs=guess), undecided="keep",
                            warn_skipped=False, suspect_units="keep")
        area = pads.geometry.union_all()
        pts = read.samples.geometry
        inside = float(np.mean(shapely.contains_xy(area, pts.x.to_numpy(), pts.y.to_numpy())))
        if inside < 0.5:
            raise CRSError(
                f"{ask}: in the boundaries' CRS ({pads.crs.name}) only {inside:.0%} of them "
                "fall inside the boundaries"
            ) from None
        notes.append(
            f"sample x/y carry no CRS; {inside:.0%} of them fall inside the boundaries in the "
            f"boundaries' CRS, so {pads.crs.name} ({guess}) is assumed: check it, or give "
            "--crs"
        )
        crs = guess
    else:
        table = samples.suffix.lower() in (".csv", ".txt", ".tsv", ".xlsx", ".xlsm", ".xls")
        if crs is None and read.crs is not None and read.crs.is_geographic and table:
            notes.append("sample coordinates read as longitude/latitude (WGS 84)")
            crs = read.crs.to_string()  # a table carries no CRS: write what was detected
        elif crs is None and read.crs is not None:
            notes.append(f"sample coordinates in the file's own CRS, {read.crs.name}")
    notes.extend(_inside_notes(read, pads, samples.name))
    if read.skipped:
        shown = "; ".join(f"row {r}: {why}" for r, why in read.skipped[:5]) + (
            f"; and {len(read.skipped) - 5} more" if len(read.skipped) > 5 else "")
        notes.append(
            f"{len(read.skipped)} bad row(s) in {samples.name} ({shown}): 'check' and 'run' "
            "stop at them; correct the cells, or set [samples] on_bad_row = 'skip' to leave "
            "them out"
        )
    notes.append(
        "columns: " + ", ".join(f"{k} <- '{v}'" for k, v in read.columns.items())
    )
    sheet = _sheet_read(read, trial, notes)
    notes.extend(_unit_notes(read, trial, samples.name, to_do))
    notes.extend(read.readings.values())
    notes.extend(_depth_notes(read.samples))
    for why in read.undecided.values():
        notes.append(f"{why}; 'check' and 'run' stop at this column until then")
    sample_settings = dataclasses.replace(
        trial,
        on_bad_row="stop",  # the project stops at bad rows until the user says otherwise
        file=_relative(samples, folder),
        sheet_or_layer=sheet,
        crs=crs if crs is not None else trial.crs,
        columns=dict(read.columns),
        units={k: v for k, v in read.units.items() if v and k not in read.assumed_units},
    )
    rates, rate_notes = _lime_for_columns(read)
    notes.extend(rate_notes)
    metric = pads if pads.crs is None or not pads.crs.is_geographic else pads.to_crs(
        pads.estimate_utm_crs())
    area_ha = float(metric.geometry.area.sum()) / 1e4
    cell = cell_size_for(area_ha)
    notes.append(
        f"grid cell size {cell:g} m: about {area_ha * 1e4 / cell**2:,.0f} cells over the "
        f"{area_ha:,.0f} ha of paddocks (new picks the finest of "
        f"{', '.join(f'{c:g}' for c in NEW_CELL_SIZES_M)} m that stays within "
        f"{NEW_MAX_CELLS:,} cells, so a run takes about a minute or less); set [grid] "
        "cell_size_m to change it"
    )
    settings = ProjectSettings(
        rates=rates,
        samples=sample_settings,
        grid=GridSettings(cell_size_m=cell),
        boundaries=dataclasses.replace(boundaries, paddocks=_relative(paddocks_path, folder)),
        farm=folder.resolve().name,
        # a new project starts from a spreader that meters no less than NEW_MIN_RATE_KG_HA:
        # tiny rates over whole paddocks are not what a spreader can put out
        # and that spreads at most COMMON_MAX_PER_PASS_KG_HA of each product in one pass
        spreader=SpreaderSettings(
            unit="kg/ha", min_rate=NEW_MIN_RATE_KG_HA,
            max_per_pass_by_product=dict.fromkeys(default_products(), COMMON_MAX_PER_PASS_KG_HA)),
    )
    notes.append(
        f"spreader minimum rate set to {NEW_MIN_RATE_KG_HA:g} kg/ha (common practice for "
        f"spinner spreaders), and at most {COMMON_MAX_PER_PASS_KG_HA:g} kg/ha of each product "
        "in one pass, larger rates split into equal passes (common practice); put your "
        "machine's figures in [spreader]"
    )
    header = f"written by 'geosoil new' for {samples.name}"
    if to_do:
        header += "\nTo settle before 'geosoil check' passes:\n" + "\n".join(
            f"- {t}" for t in to_do)
    text = template(settings, header=header)
    parse_project(text, base_dir=folder.resolve(), source=str(target))  # it must run as written
    folder.mkdir(parents=True, exist_ok=True)
    from .writers import atomic_write

    with atomic_write(target, mode="w") as fh:
        fh.write(text)
    return target, notes
