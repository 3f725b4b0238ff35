"""Lab header spellings: which column holds which analyte, in which unit.

Labs name their columns in many ways: ``Ca``, ``Exch Ca``, ``Exch. Ca (meq/100g)``,
``Calcium (mg/kg)``, ``Ca_cmolc_kg``, ``pH (CaCl2)``. :func:`parse_header` reads
one header into the analyte it holds, the unit written in it and the method in
brackets; :func:`detect_columns` does a whole header row and also finds the
sample ID and the coordinate columns. Pure: no files are read here.

A header is matched only when its name (after the qualifier "Exch" /
"Exchangeable", a charge such as "2+" and the unit are taken off) is exactly
one of the spellings below, so ``Ca:Mg``, ``Ca %`` (a saturation),
``Colwell K`` (not exchangeable) and ``Na (meq/L)`` (a solution concentration)
are left alone and kept as the lab's own columns.

Examples
--------
>>> guess = detect_columns(["Sample ID", "Easting", "Northing", "Exch. Ca (meq/100g)",
...                         "Mg_ppm", "pH (CaCl2)", "Ca %"])
>>> guess.analytes
{'ca': 'Exch. Ca (meq/100g)', 'mg': 'Mg_ppm', 'ph': 'pH (CaCl2)'}
>>> guess.units
{'ca': 'meq/100g', 'mg': 'mg/kg', 'ph': None}
>>> guess.methods["ph"], guess.id, guess.x, guess.y, guess.geographic
('CaCl2', 'Sample ID', 'Easting', 'Northing', False)
>>> guess.notes["Ca %"]
'a percentage (saturation), not an amount'
"""

from __future__ import annotations

import dataclasses
import re
from collections.abc import Sequence

from .errors import SettingsError
from .units import normalise_unit

__all__ = [
    "CANONICAL",
    "BUFFER_PH",
    "PROPERTIES",
    "EXCHANGEABLE",
    "UNITLESS",
    "ANALYTE_SPELLINGS",
    "ID_SPELLINGS",
    "HeaderInfo",
    "ColumnGuess",
    "parse_header",
    "detect_columns",
]

#: Buffer-pH analytes, one per buffer (a buffer pH means nothing without its buffer).
BUFFER_PH: tuple[str, ...] = ("bph_smp", "bph_sikora", "bph_mehlich", "bph_adams_evans")

#: Soil properties read for lime to a target pH, with the units each may be given in (the
#: first is the canonical one): organic carbon, organic matter and clay in %, CEC at pH 7
#: (exchangeable-style units), pH buffering capacity per pH unit.
PROPERTIES: dict[str, tuple[str, ...]] = {
    "oc": ("%", "g/kg"),
    "om": ("%", "g/kg"),
    "clay": ("%", "g/kg"),
    "phbc": ("cmol/kg/pH", "mmol/kg/pH"),
    "ec_1_5": ("dS/m", "mS/cm", "uS/cm", "mS/m"),
    "ece": ("dS/m", "mS/cm", "uS/cm", "mS/m"),
}

#: Canonical analytes, in the order they are reported.
CANONICAL: tuple[str, ...] = (
    "ca", "mg", "k", "na", "al", "h", "acidity", "cec", "ph", "sar",
    "cec_ph7", *BUFFER_PH, *PROPERTIES,
)

#: Analytes that are exchangeable amounts, carried in cmol(+)/kg.
EXCHANGEABLE: tuple[str, ...] = ("ca", "mg", "k", "na", "al", "h", "acidity", "cec", "cec_ph7")

#: Analytes without a unit.
UNITLESS: tuple[str, ...] = ("ph", "sar", *BUFFER_PH)

#: Names (lower case, qualifier, charge and unit removed) that mean each analyte.
#: The first spellings of ``cec`` name an effective CEC and are preferred over a plain CEC.
ANALYTE_SPELLINGS: dict[str, tuple[str, ...]] = {
    "ca": ("ca", "calcium"),
    "mg": ("mg", "magnesium"),
    "k": ("k", "potassium"),
    "na": ("na", "sodium"),
    "al": ("al", "aluminium", "aluminum"),
    "h": ("h", "hydrogen"),
    "acidity": ("acidity", "acid", "al+h", "h+al", "total acidity", "titratable acidity"),
    "cec": (
        "ecec",
        "effective cec",
        "effective cation exchange capacity",
        "cec",
        "cation exchange capacity",
    ),
    "ph": ("ph",),
    "sar": ("sar", "sodium adsorption ratio"),
    "cec_ph7": (
        "cec ph7", "cec ph 7", "cec at ph 7", "cec ph 7 0", "ctc", "ctc ph 7", "ctc ph7",
        "ctc a ph 7", "cec nh4oac ph 7", "potential cec",
    ),
    "bph_smp": ("smp buffer ph", "smp bph", "smp ph", "smp", "smp lime index", "bph smp",
                "buffer ph smp"),
    "bph_sikora": ("sikora buffer ph", "sikora bph", "sikora ph", "sikora", "bph sikora",
                   "buffer ph sikora", "sikora 2 buffer ph", "sikora ii buffer ph"),
    "bph_mehlich": ("mehlich buffer ph", "mehlich bph", "mehlich ph", "bph mehlich",
                    "buffer ph mehlich"),
    "bph_adams_evans": ("adams evans buffer ph", "adams evans bph", "adams evans ph",
                        "adams evans", "ae buffer ph", "a e buffer ph", "bph adams evans",
                        "buffer ph adams evans"),
    "oc": ("oc", "organic carbon", "org c", "org carbon", "organic c", "soc", "toc",
           "total organic carbon", "walkley black c", "walkley black organic carbon",
           "carbon organic", "c org"),
    "om": ("om", "organic matter", "org matter", "som", "soil organic matter",
           "organic matter loi", "om loi", "loi"),
    "clay": ("clay", "clay content", "clay fraction"),
    "phbc": ("phbc", "ph bc", "ph buffering capacity", "ph buffer capacity",
             "buffering capacity"),
    # "EC 1:5", "EC1:5", "EC (1:5 water)": the words once ":" and brackets are split off
    "ec_1_5": ("ec 1 5", "ec1 5", "ec 1 5 water", "ec 1 5 h2o", "ec1 5 water",
               "electrical conductivity 1 5", "conductivity 1 5", "ec 1 5 soil water"),
    "ece": ("ece", "ec e", "ecse", "ec se", "ec sat", "ec paste", "ec sat paste",
            "ec saturation extract", "ec saturated paste", "saturated paste ec",
            "electrical conductivity saturation extract", "ec saturation paste"),
}

#: Names of a sample ID column, most specific first.
ID_SPELLINGS: tuple[str, ...] = (
    "sample id",
    "sampleid",
    "sample",
    "sample no",
    "sample number",
    "sample name",
    "sample code",
    "sample ref",
    "site id",
    "site",
    "point id",
    "point",
    "id",
    "name",
    "lab id",
    "lab no",
    "lab number",
)

_LON = ("lon", "long", "longitude", "lng", "decimal longitude")
_LAT = ("lat", "latitude", "decimal latitude")
_EAST = ("easting", "eastings", "east", "mga easting", "utm easting")
_NORTH = ("northing", "northings", "north", "mga northing", "utm northing")
_X = ("x", "x coord", "x coordinate", "xcoord", "point x", "coord x")
_Y = ("y", "y coord", "y coordinate", "ycoord", "point y", "coord y")

#: Words in front of (or after) an analyte name that change nothing.
_QUALIFIERS = ("exch", "exchangeable", "ex", "exc", "extractable")
#: Words that mark an extract or measure other than the exchangeable amount.
_NOT_EXCHANGEABLE = (
    "colwell",
    "olsen",
    "bray",
    "dtpa",
    "edta",
    "total",
    "soluble",
    "sol",
    "available",
    "avail",
    "water",
    "h2o",
    "cacl2",
    "cacl",
)
_PERCENT_WORDS = ("%", "pct", "percent", "sat", "saturation", "ratio")

_BRACKETS = re.compile(r"[(\[{]([^)\]}]*)[)\]}]")
_CHARGE = re.compile(r"(?<=[a-z])(\d?\+{1,3}|\+\d)$")


@dataclasses.dataclass(frozen=True)
class HeaderInfo:
    """What one header says.

    Attributes
    ----------
    header
        The header as written.
    role
        A canonical analyte (``"ca"`` ... ``"sar"``), ``"id"``, ``"lon"``,
        ``"lat"``, ``"east"``, ``"north"``, ``"x"``, ``"y"``, or None.
    unit
        Canonical unit written in the header (one of
        :data:`geosoil.units.CATION_UNITS`), or None.
    method
        Method written in the header, e.g. ``"CaCl2"`` / ``"water"`` for pH,
        ``"NH4OAc"`` for a cation; None when there is none.
    note
        Why a header that names an analyte was not taken (a saturation, another
        extract, a unit that is not an exchangeable amount); None otherwise.
    """

    header: str
    role: str | None
    unit: str | None = None
    method: str | None = None
    note: str | None = None


@dataclasses.dataclass(frozen=True)
class ColumnGuess:
    """The columns recognised in a header row.

    Attributes
    ----------
    analytes
        Canonical analyte -> header.
    units
        Canonical analyte -> unit written in its header (canonical spelling), or None.
    methods
        Canonical analyte -> method written in its header, or None
        (``methods["ph"]`` is ``"water"``, ``"CaCl2"`` or None).
    ambiguous
        Analyte -> headers, for analytes that two or more headers match equally
        well; such analytes are left out of ``analytes``.
    id
        Header of the sample ID, or None.
    x, y
        Headers of the coordinates (longitude/latitude, easting/northing or X/Y), or None.
    geographic
        True when the coordinate headers say longitude/latitude, False when they
        say easting/northing, None for X/Y or when none were found.
    notes
        Header -> why it was not taken, for headers that name an analyte but
        hold something else.
    """

    analytes: dict[str, str]
    units: dict[str, str | None]
    methods: dict[str, str | None]
    ambiguous: dict[str, tuple[str, ...]]
    id: str | None
    x: str | None
    y: str | None
    geographic: bool | None
    notes: dict[str, str]


def _unit_of(text: str) -> str | None:
    try:
        return normalise_unit(text)
    except SettingsError:
        return None


def _ph_method(text: str) -> str | None:
    t = text.lower().replace(" ", "")
    if "cacl" in t or t in ("ca", "c"):
        return "CaCl2"
    if "kcl" in t:
        return "KCl"
    if "water" in t or "h2o" in t or "h20" in t or t in ("w",):
        return "water"
    return None


_ROLE_NAMES: dict[str, str] = {
    **{n: "lon" for n in _LON},
    **{n: "lat" for n in _LAT},
    **{n: "east" for n in _EAST},
    **{n: "north" for n in _NORTH},
    **{n: "x" for n in _X},
    **{n: "y" for n in _Y},
    **{n: "id" for n in ID_SPELLINGS},
}
_ANALYTE_OF: dict[str, str] = {n: a for a, names in ANALYTE_SPELLINGS.items() for n in names}


def parse_header(header: str) -> HeaderInfo:
    """Read one lab header: the analyte (or ID / coordinate) it holds, unit and method.

    Parameters
    ----------
    header
        A column header as the lab wrote it.

    Returns
    -------
    HeaderInfo

    Examples
    --------
    >>> info = parse_header("Exchangeable Calcium (cmol(+)/kg)")
    >>> info.role, info.unit, info.method, info.note
    ('ca', 'cmol/kg', None, None)
    >>> parse_header("pHw").method, parse_header("pH_CaCl2").method
    ('water', 'CaCl2')
    >>> parse_header("K (Colwell)").role is None
    True
    >>> parse_header("Na mg kg-1").unit
    'mg/kg'
    """
    given = str(header)  # returned as written, so it still finds its column
    text = given.replace("\ufeff", "").strip()
    plain = re.sub(r"\((\+|c)\)", r"\1", text)  # cmol(+)/kg -> cmol+/kg
    units: list[str] = []
    methods: list[str] = []
    note: str | None = None
    for inner in (i.strip() for i in _BRACKETS.findall(plain)):
        unit = _unit_of(inner) if inner else None
        if unit:
            units.append(unit)
        elif any(w in inner.lower() for w in ("%", "sat")):
            note = "a percentage (saturation), not an amount"
        elif "/" in inner:
            note = f"unit '{inner}' is not an exchangeable amount"
        elif inner:
            methods.append(inner)
    other = _lime_analyte(given, plain, methods, units)
    if other is not None:
        return other
    rest = _BRACKETS.sub(" ", plain).lower().replace("_", " ")
    tokens = rest.split()
    # A unit written after the name: "Ca ppm", "Ca meq/100 g", "Ca mg kg-1".
    for n in range(1, len(tokens)):
        unit = _unit_of(" ".join(tokens[n:]))
        if unit:
            units.append(unit)
            tokens = tokens[:n]
            break
    name = " ".join(tokens).replace(".", " ").replace("-", " ").replace("%", " % ")
    name = re.sub(r"\s*\+\s*", "+", name)
    words = [_CHARGE.sub("", w) for w in name.split()]
    while words and words[0] in _QUALIFIERS:
        words = words[1:]
    while words and words[-1] in _QUALIFIERS:
        words = words[:-1]
    if not words:
        return HeaderInfo(given, None)
    # pH, with its method in the name ("pHw", "pH CaCl2") or in brackets.
    if words[0].startswith("ph") and (words[0] == "ph" or _ph_method(words[0][2:])):
        method_text = " ".join([words[0][2:], *words[1:], *methods]).lower()
        method = _ph_method(method_text)
        if method == "KCl":
            return HeaderInfo(given, None, method="KCl", note="pH in KCl is not used; give pH in "
                              "water or CaCl2")
        extra_words = any(c.isalpha() for c in " ".join(words[1:]))
        if note is not None or (extra_words and method is None):
            return HeaderInfo(given, None, note=note)
        return HeaderInfo(given, "ph", method=method)
    joined = " ".join(words)
    role = _ROLE_NAMES.get(joined)
    if role is not None:
        return HeaderInfo(given, role)
    analyte = _ANALYTE_OF.get(joined)
    if analyte is None:
        # "Colwell K", "Total Ca", "Ca %", "Ca sat": name an analyte, hold something else.
        core = [w for w in words if w not in _NOT_EXCHANGEABLE and w not in _PERCENT_WORDS]
        named = _ANALYTE_OF.get(" ".join(core)) if core else None
        if named is not None and named not in UNITLESS:
            if any(w in _PERCENT_WORDS for w in words):
                note = "a percentage (saturation), not an amount"
            else:
                note = "another extract or measure, not the exchangeable amount"
        return HeaderInfo(given, None, note=note)
    method = " ".join(methods) or None
    if note is not None:
        return HeaderInfo(given, None, method=method, note=note)
    if analyte in EXCHANGEABLE and method is not None:
        if any(w in method.lower() for w in _NOT_EXCHANGEABLE):
            return HeaderInfo(given, None, method=method,
                              note=f"a {method} extract, not the exchangeable amount")
    if len(set(units)) > 1:
        return HeaderInfo(given, None, note=f"two units in one header: {', '.join(units)}")
    unit = units[0] if units else None
    if analyte in UNITLESS and unit is not None:
        return HeaderInfo(given, None, note=f"{analyte} has no unit, but the header says {unit}")
    if analyte in ("acidity", "cec") and unit == "mg/kg":
        return HeaderInfo(
            given, None, note=f"{analyte} in mg/kg is not defined; give it in cmol(+)/kg"
        )
    return HeaderInfo(given, analyte, unit=unit, method=method)


_BUFFER_NAMES: dict[str, str] = {
    "smp": "bph_smp", "sikora": "bph_sikora", "mehlich": "bph_mehlich",
    "adams evans": "bph_adams_evans", "ae": "bph_adams_evans", "a e": "bph_adams_evans",
}
_PROPERTY_UNIT_TEXT: dict[str, str] = {
    "%": "%", "pct": "%", "percent": "%", "g/100g": "%", "g/100 g": "%", "dag/kg": "%",
    "g/kg": "g/kg", "g kg-1": "g/kg",
    "cmol/kg/ph": "cmol/kg/pH", "cmol+/kg/ph": "cmol/kg/pH", "cmolc/kg/ph": "cmol/kg/pH",
    "meq/100g/ph": "cmol/kg/pH", "mmol/kg/ph": "mmol/kg/pH", "mmol+/kg/ph": "mmol/kg/pH",
    "mmolc/kg/ph": "mmol/kg/pH",
    "ds/m": "dS/m", "ms/cm": "mS/cm", "us/cm": "uS/cm", "\u00b5s/cm": "uS/cm",
    "\u03bcs/cm": "uS/cm", "ms/m": "mS/m",
}


def _words(text: str) -> list[str]:
    t = text.lower().replace("_", " ").replace("-", " ").replace(".", " ")
    return [w for w in re.split(r"[\s,:]+", t) if w]


def _lime_analyte(
    given: str, plain: str, methods: list[str], units: list[str]
) -> HeaderInfo | None:
    """Buffer pH (by buffer), organic carbon / matter, clay and pHBC headers; None otherwise."""
    inner = [i.strip() for i in _BRACKETS.findall(plain)]
    unit_texts = [i for i in inner if i.lower().replace(" ", "") in
                  {k.replace(" ", "") for k in _PROPERTY_UNIT_TEXT}]
    name_part = _BRACKETS.sub(" ", plain)
    words = _words(name_part)
    # a unit written after the name: "Clay %", "OC g/kg", "pHBC mmol/kg/pH"
    tail_unit = None
    for n in range(len(words) - 1, 0, -1):
        key = " ".join(words[n:]).replace(" ", "")
        if key in {k.replace(" ", "") for k in _PROPERTY_UNIT_TEXT}:
            tail_unit, words = key, words[:n]
            break
        if words[-1] == "%":
            tail_unit, words = "%", words[:-1]
            break
    words = [w for w in words if w not in ("%",)]
    extra = [w for i in inner if i not in unit_texts for w in _words(i)]
    all_words = words + extra
    joined_all = " ".join(all_words)
    is_buffer = ("buffer" in all_words and "ph" in " ".join(all_words)) or any(
        w in ("bph", "lime index", "sikora") for w in all_words) or joined_all.startswith(
        "lime index") or joined_all in ("smp", "adams evans")
    if is_buffer and "capacity" not in all_words:
        for name, buffer_analyte in _BUFFER_NAMES.items():
            if re.search(rf"\b{name}\b", joined_all):
                return HeaderInfo(given, buffer_analyte, method=name)
        return HeaderInfo(
            given, None, note="a buffer pH that names no buffer: say which with [samples.columns] "
            + ", ".join(f"{a} = '{given}'" for a in BUFFER_PH[:1]) + " (or "
            + ", ".join(BUFFER_PH[1:]) + ")",
        )
    joined = " ".join(words)
    found = next((a for a in PROPERTIES if joined in ANALYTE_SPELLINGS[a]), None)
    if found is None and joined in ("ec", "electrical conductivity") and not extra:
        return HeaderInfo(given, None, note="an EC that names no extract: map it with "
                          f"[samples.columns] ec_1_5 = '{given}' (1:5 water) or ece = "
                          f"'{given}' (saturation extract)")
    if found is None:
        return None
    analyte: str = found
    squashed = {k.replace(" ", ""): v for k, v in _PROPERTY_UNIT_TEXT.items()}
    texts = [u.lower().replace(" ", "") for u in unit_texts]
    if tail_unit is not None:
        texts.append(tail_unit)
    said = [squashed[t] for t in texts if t in squashed]
    if units:
        return HeaderInfo(given, None, note=f"{analyte} in {units[0]} is not understood; give it "
                          f"in {' or '.join(PROPERTIES[analyte])}")
    if said and said[0] not in PROPERTIES[analyte]:
        return HeaderInfo(given, None, note=f"{analyte} in {said[0]} is not understood; give it "
                          f"in {' or '.join(PROPERTIES[analyte])}")
    method = " ".join(extra) or None
    return HeaderInfo(given, analyte, unit=said[0] if said else None, method=method)


def _preference(info: HeaderInfo) -> int:
    """Lower is preferred when two headers name the same analyte."""
    if info.role == "ph":
        return {"water": 0, None: 1, "CaCl2": 2}.get(info.method, 3)
    if info.role == "cec":
        name = info.header.lower()
        return 0 if ("ecec" in name or "effective" in name) else 1
    if info.role == "id":
        # An exact "ID" after the sample spellings; order of ID_SPELLINGS otherwise.
        key = " ".join(re.sub(r"[_\-.]", " ", info.header.lower()).split())
        return ID_SPELLINGS.index(key) if key in ID_SPELLINGS else len(ID_SPELLINGS)
    return 0


def detect_columns(headers: Sequence[str]) -> ColumnGuess:
    """Recognise analytes, units, sample ID and coordinates in a header row.

    Parameters
    ----------
    headers
        The header row as written.

    Returns
    -------
    ColumnGuess

    Examples
    --------
    >>> g = detect_columns(["ID", "Lon", "Lat", "Ca", "pH (water)", "pH (CaCl2)", "ECEC", "CEC"])
    >>> g.analytes["ph"], g.analytes["cec"], g.geographic
    ('pH (water)', 'ECEC', True)
    >>> detect_columns(["Ca (mg/kg)", "Calcium (meq/100g)"]).ambiguous
    {'ca': ('Ca (mg/kg)', 'Calcium (meq/100g)')}
    """
    infos = [parse_header(h) for h in headers]
    by_role: dict[str, list[HeaderInfo]] = {}
    notes: dict[str, str] = {}
    for info in infos:
        if info.role is not None:
            by_role.setdefault(info.role, []).append(info)
        elif info.note is not None:
            notes[info.header] = info.note

    def best(role: str) -> tuple[HeaderInfo | None, tuple[str, ...]]:
        found = sorted(by_role.get(role, []), key=_preference)
        if not found:
            return None, ()
        tied = [f for f in found if _preference(f) == _preference(found[0])]
        if len(tied) > 1:
            return None, tuple(f.header for f in tied)
        return found[0], ()

    analytes: dict[str, str] = {}
    units: dict[str, str | None] = {}
    methods: dict[str, str | None] = {}
    ambiguous: dict[str, tuple[str, ...]] = {}
    for analyte in CANONICAL:
        chosen, tied = best(analyte)
        if tied:
            ambiguous[analyte] = tied
        elif chosen is not None:
            analytes[analyte] = chosen.header
            units[analyte] = chosen.unit
            methods[analyte] = chosen.method
    id_info, _ = best("id")
    x = y = None
    geographic: bool | None = None
    for xr, yr, geo in (("lon", "lat", True), ("east", "north", False), ("x", "y", None)):
        xi, _ = best(xr)
        yi, _ = best(yr)
        if xi is not None and yi is not None:
            x, y, geographic = xi.header, yi.header, geo
            break
    return ColumnGuess(
        analytes=analytes,
        units=units,
        methods=methods,
        ambiguous=ambiguous,
        id=None if id_info is None else id_info.header,
        x=x,
        y=y,
        geographic=geographic,
        notes=notes,
    )
