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

Header meaning is never guessed across methods. pH in water (``ph``), in
CaCl2 (``ph_cacl2``) and in KCl (``ph_kcl``) are distinct analytes, as are
exchangeable (KCl) acidity (``acidity``) and potential acidity at pH 7 by a
buffer or acetate method (``acidity_potential``), and saturation-extract SAR
(``sar``) and 1:5 SAR (``sar_1to5``). A header that names no method gets the
trade's usual reading only where the readings are close: a bare "pH" is pH in
water and a bare "SAR" the saturation-extract SAR, each with a note in
:attr:`ColumnGuess.readings` naming the setting that changes it. Where the
readings differ several-fold -- "H+Al", "Acidity", "Total acidity",
"Titratable acidity" without "exchangeable", "KCl", "pH 7", "buffer" or
"acetate" -- the header is left in :attr:`ColumnGuess.undecided` until the
project maps it (potential acidity at pH 7 is often several times the
exchangeable acidity).

Examples
--------
>>> guess = detect_columns(["Sample ID", "Easting", "Northing", "Exch. Ca (meq/100g)",
...                         "Mg_ppm", "pH (CaCl2)", "Ca %"])
>>> guess.analytes
{'ca': 'Exch. Ca (meq/100g)', 'mg': 'Mg_ppm', 'ph_cacl2': 'pH (CaCl2)'}
>>> guess.units
{'ca': 'meq/100g', 'mg': 'mg/kg', 'ph_cacl2': None}
>>> guess.methods["ph_cacl2"], guess.id, guess.x, guess.y, guess.geographic
('CaCl2', 'Sample ID', 'Easting', 'Northing', False)
>>> guess.notes["Ca %"]
'a percentage (saturation), not an amount'
"""

from __future__ import annotations

import dataclasses
import re
import unicodedata
from collections.abc import Sequence

from .errors import SettingsError
from .units import ELEMENT_MASS_UNITS, normalise_unit

__all__ = [
    "CANONICAL",
    "BUFFER_PH",
    "PROPERTIES",
    "EXCHANGEABLE",
    "UNITLESS",
    "ANALYTE_SPELLINGS",
    "ID_SPELLINGS",
    "PROPERTY_UNIT_TEXTS",
    "PH_METHODS",
    "HeaderInfo",
    "ColumnGuess",
    "parse_header",
    "detect_columns",
    "extract_water_of_header",
    "is_bookkeeping",
    "letter_o_reading",
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
    "ca", "mg", "k", "na", "al", "h", "acidity", "acidity_potential", "cec",
    "ph", "ph_cacl2", "ph_kcl", "sar", "sar_1to5",
    "cec_ph7", *BUFFER_PH, *PROPERTIES,
)

#: Analytes that are exchangeable amounts, carried in cmol(+)/kg
#: (``acidity_potential``, H + Al at pH 7, is carried in the same unit).
EXCHANGEABLE: tuple[str, ...] = (
    "ca", "mg", "k", "na", "al", "h", "acidity", "acidity_potential", "cec", "cec_ph7",
)

#: Analytes without a unit.
UNITLESS: tuple[str, ...] = ("ph", "ph_cacl2", "ph_kcl", "sar", "sar_1to5", *BUFFER_PH)

#: pH analytes and the solution each is measured in.
PH_METHODS: dict[str, str] = {"ph": "water", "ph_cacl2": "CaCl2", "ph_kcl": "KCl"}

#: Electrical conductivity, naming no extract, in English, Spanish (CE: conductividad
#: eléctrica), Portuguese (condutividade elétrica), French (conductivité électrique) and
#: German (LF: Leitfähigkeit); folded, lower case.
_EC_NAMES: tuple[str, ...] = (
    "ec", "electrical conductivity", "conductivity", "ce", "conductividad electrica",
    "conductividad", "condutividade eletrica", "condutividade", "conductivite electrique",
    "conductivite", "lf", "leitfahigkeit", "leitfaehigkeit", "elektrische leitfahigkeit",
    "el leitfahigkeit",
)
#: Units of a conductivity, as PROPERTY_UNIT_TEXTS spells them (squashed, lower case).
_EC_UNIT_TEXTS = ("ds/m", "ms/cm", "us/cm", "\u00b5s/cm", "\u03bcs/cm", "ms/m")

#: Names (lower case, qualifier, charge and unit removed) that mean each analyte.
#: The first spellings of ``cec`` name an effective CEC and are preferred over a plain CEC.
ANALYTE_SPELLINGS: dict[str, tuple[str, ...]] = {
    # English, and the words of German, Spanish, Portuguese and French labs (matched with
    # their accents taken off: "cálcio" is "calcio")
    "ca": ("ca", "calcium", "calcio"),
    "mg": ("mg", "magnesium", "magnesio"),
    "k": ("k", "potassium", "kalium", "potasio", "potassio"),
    "na": ("na", "sodium", "natrium", "sodio"),
    "al": ("al", "aluminium", "aluminum", "aluminio"),
    "h": ("h", "hydrogen"),
    "acidity": ("acidity", "acid", "al+h", "h+al", "total acidity", "titratable acidity",
                "acidez"),
    "acidity_potential": ("potential acidity", "acidity potential"),
    "cec": (
        "ecec",
        "effective cec",
        "effective cation exchange capacity",
        "cec",
        "cation exchange capacity",
        # German KAK (eff.: effective), Spanish CIC(E), Portuguese CTC efetiva (t), French
        "kak eff", "kakeff", "kak", "cice", "cic efectiva", "cic", "ctc efetiva", "ctc efectiva",
        "capacidad de intercambio cationico", "capacite d echange cationique",
    ),
    "ph": ("ph",),
    "ph_cacl2": (),
    "ph_kcl": (),
    "sar": ("sar", "sodium adsorption ratio", "sare"),
    "sar_1to5": (),
    "cec_ph7": (
        "cec ph7", "cec ph 7", "cec at ph 7", "cec ph 7 0", "ctc", "ctc ph 7", "ctc ph7",
        "ctc a ph 7", "cec nh4oac ph 7", "potential cec", "kak pot", "kakpot",
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
    # "EC 1:5", "EC1:5", "EC (1:5 water)", "CE 1:5", "LF 1:5": the words once ":" and
    # brackets are split off, with each language's EC (below)
    "ec_1_5": ("ec1 5", "ce1 5", "lf1 5", "ec 1 5 soil water", *(
        f"{ec} 1 5{water}" for ec in _EC_NAMES
        for water in ("", " water", " h2o", " agua", " eau", " wasser"))),
    "ece": ("ece", "ec e", "ecse", "ec se", "ec sat", "ec sat paste", "saturated paste ec",
            "cee", "ce e", "ce es", "ce ex", "lfe", *(
                f"{ec} {extract}" for ec in _EC_NAMES for extract in (
                    "saturation extract", "sat extract", "paste", "saturated paste",
                    "saturation paste", "extracto de saturacion", "extracto saturado",
                    "pasta saturada", "extrato de saturacao", "extrato da pasta saturada",
                    "pate saturee", "extrait de pate saturee", "extrait sature",
                    "sattigungsextrakt", "im sattigungsextrakt"))),
}

#: Acidity names whose method must be stated (exchangeable or potential).
_ACIDITY_NAMES = ("acidity", "acid", "al+h", "h+al", "total acidity", "titratable acidity",
                  "acidez")
#: Words that say "exchangeable" in German, Spanish, Portuguese and French (accents off).
_EXCHANGEABLE_FOREIGN = ("austauschbar", "austauschbares", "austauschbare", "intercambiable",
                         "intercambiables", "trocavel", "trocaveis", "echangeable",
                         "echangeables")
#: Words that say an acidity is the exchangeable (1 M KCl) one.
_EXCHANGEABLE_WORDS = ("exch", "exchangeable", "ex", "exc", "kcl", *_EXCHANGEABLE_FOREIGN)
#: Words that say an acidity is potential acidity (pH 7 buffer or acetate methods).
_POTENTIAL_WORDS = ("ph 7", "ph7", "ph 7.0", "ph7.0", "smp", "buffer", "acetate", "oac",
                    "ca(oac)2", "potential", "sikora", "mehlich", "bacl2", "tea", "ph 8.2")
#: Words that say an SAR is from a saturation extract (or paste).
_SATURATION_WORDS = ("saturation", "sat", "paste", "extract", "se", "e", "sat. extract")

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
    "amostra",  # Portuguese and Spanish: sample, point
    "muestra",
    "ponto",
    "punto",
    "id muestra",
    "codigo muestra",
    "probe",  # German: sample, sample number, sample name
    "probennummer",
    "probe nr",
    "proben nr",
    "probenbezeichnung",
    "echantillon",  # French (accents off): sample
)

# with the Spanish (longitud, latitud) and German (Länge, Breite, -ngrad; accents off) words;
# Portuguese and French write longitude and latitude
_LON = ("lon", "long", "longitude", "lng", "decimal longitude", "longitud", "lange", "laenge",
        "langengrad", "laengengrad", "geogr lange")
_LAT = ("lat", "latitude", "decimal latitude", "latitud", "breite", "breitengrad",
        "geogr breite")
_EAST = ("easting", "eastings", "east", "mga easting", "utm easting", "rechtswert", "este",
         "utm este")
_NORTH = ("northing", "northings", "north", "mga northing", "utm northing", "hochwert",
          "norte", "utm norte")
_X = ("x", "x coord", "x coordinate", "xcoord", "point x", "coord x")
_Y = ("y", "y coord", "y coordinate", "ycoord", "point y", "coord y")

#: Words in front of (or after) an analyte name that change nothing.
_QUALIFIERS = ("exch", "exchangeable", "ex", "exc", "extractable", *_EXCHANGEABLE_FOREIGN)
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
    reading
        For a header that names no method: the usual reading taken and the
        setting that changes it; None otherwise.
    undecided
        For a header whose method decides between readings several-fold apart
        (exchangeable or potential acidity): why it is not taken and the
        settings that decide it (``role`` is then None); None otherwise.
    """

    header: str
    role: str | None
    unit: str | None = None
    method: str | None = None
    note: str | None = None
    reading: str | None = None
    undecided: str | None = None


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
        (for pH, ``"water"``, ``"CaCl2"``, ``"KCl"`` or None for a bare "pH").
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
    readings
        Header -> the usual reading taken for a header that names no method
        (a bare "pH" read as pH in water), with the setting that changes it.
    undecided
        Header -> why its meaning cannot be read from it (an acidity that names
        neither the exchangeable nor the potential method), with the settings
        that decide it. Such headers are in no analyte.
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
    readings: dict[str, str] = dataclasses.field(default_factory=dict)
    undecided: dict[str, str] = dataclasses.field(default_factory=dict)


def _unit_of(text: str) -> str | None:
    try:
        return normalise_unit(text)
    except SettingsError:
        return None


def _fold(text: str) -> str:
    """``text`` without accents ("Längengrad" -> "Langengrad", "água" -> "agua")."""
    return "".join(c for c in unicodedata.normalize("NFKD", text)
                   if not unicodedata.combining(c))


def _ph_method(text: str) -> str | None:
    t = _fold(text).lower().replace(" ", "")
    if "cacl" in t or t in ("ca", "c"):
        return "CaCl2"
    if "kcl" in t:
        return "KCl"
    if any(w in t for w in ("water", "h2o", "h20", "agua", "wasser", "eau")) or t in ("w",):
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
    >>> parse_header("pHw").role, parse_header("pH_CaCl2").role, parse_header("pH (KCl)").role
    ('ph', 'ph_cacl2', 'ph_kcl')
    >>> parse_header("K (Colwell)").role is None
    True
    >>> parse_header("Na mg kg-1").unit
    'mg/kg'
    >>> parse_header("H+Al (pH 7)").role, parse_header("SAR (1:5)").role
    ('acidity_potential', 'sar_1to5')
    >>> parse_header("H+Al").role is None and parse_header("H+Al").undecided is not None
    True
    """
    given = str(header)  # returned as written, so it still finds its column
    text = given.replace("\ufeff", "").strip()
    plain = re.sub(r"\((\+|c)\)", r"\1", text)  # cmol(+)/kg -> cmol+/kg
    # an extract ratio ("1:5", "1:2.5") is a method, wherever it is written
    ratios = [f"1:{m}" for m in _RATIO.findall(plain)]
    with_ratio = plain  # EC 1:5 names its extract by the ratio
    plain = _RATIO.sub(" ", plain)
    units, methods, note = _bracket_parts(plain)
    other = _lime_analyte(given, with_ratio, methods, units)
    if other is not None:
        return other
    rest = _fold(_BRACKETS.sub(" ", plain)).lower().replace("_", " ")
    tokens = _split_trailing_unit(rest.split(), units)
    name = " ".join(tokens).replace(".", " ").replace("-", " ").replace("%", " % ")
    name = re.sub(r"\s*\+\s*", "+", name)
    words, qualified = _strip_qualifiers([_CHARGE.sub("", w) for w in name.split()])
    if not words:
        return HeaderInfo(given, None)
    # pH, with its method in the name ("pHw", "pH CaCl2") or in brackets.
    if words[0].startswith("ph") and (words[0] == "ph" or _ph_method(words[0][2:])):
        return _ph_header(given, words, methods, note)
    joined = " ".join(words)
    role = _ROLE_NAMES.get(joined)
    if role is not None:
        return HeaderInfo(given, role)
    acid = _acidity_header(given, joined, methods, units, qualified, note)
    if acid is not None:
        return acid
    analyte = _ANALYTE_OF.get(joined)
    if analyte is None:
        return _not_an_analyte(given, words, note)
    return _unit_reading(_analyte_header(given, analyte, joined, methods, ratios, units, note))


_CHARGE_MARK = re.compile(r"mmol\s*(?:\(\+\)|\+|\(c\)|_c|c)", re.IGNORECASE)
_ION = {"ca": "Ca2+", "mg": "Mg2+"}


def _unit_reading(info: HeaderInfo) -> HeaderInfo:
    """The header with a note of how its unit is read where the unit leaves room: mmol/kg
    of a divalent cation without the charge mark (mmol(+)/kg, mmolc/kg), and a cation in
    g/kg."""
    if info.role in _ION and info.unit == "mmol/kg" and not _CHARGE_MARK.search(info.header):
        return dataclasses.replace(info, reading=(
            f"'{info.header}' read as mmol of charge per kg (mmol(+)/kg, the usual reading: "
            f"10 mmol(+)/kg = 1 cmol(+)/kg); if the lab means mmol of {_ION[info.role]} ions, "
            f"each carries two charges and the amounts are twice as large in charge: ask the "
            f"lab, and give the column in mmol(+)/kg (the values x 2)"))
    if info.role in ("ca", "mg", "k", "na", "al") and info.unit == "g/kg":
        return dataclasses.replace(info, reading=(
            f"'{info.header}' read as g of the element per kg of soil (1 g/kg = 1000 mg/kg), "
            "turned into cmol(+)/kg by its equivalent weight, as mg/kg is"))
    return info


def _bracket_parts(plain: str) -> tuple[list[str], list[str], str | None]:
    """What the header's brackets hold: units, methods, and a note when one holds a
    percentage or a unit that is not an amount."""
    units: list[str] = []
    methods: list[str] = []
    note: str | None = None
    for inner in (i.strip() for i in _BRACKETS.findall(plain)):
        unit = _unit_of(inner) if inner else None
        low = inner.lower()
        if unit:
            units.append(unit)
        elif "extract" in low or "paste" in low:
            methods.append(inner)
        elif any(w in low for w in ("%", "sat")):
            note = "a percentage (saturation), not an amount"
        elif "/" in inner and low.replace(" ", "") in _EC_UNIT_TEXTS:
            note = f"a conductivity ({inner}) naming no extract, not an exchangeable amount"
        elif "/" in inner:
            note = f"unit '{inner}' is not an exchangeable amount"
        elif inner:
            methods.append(inner)
    return units, methods, note


def _split_trailing_unit(tokens: list[str], units: list[str]) -> list[str]:
    """The name's tokens without a unit written after the name ("Ca ppm", "Ca meq/100 g",
    "Ca mg kg-1"), which goes to ``units``."""
    for n in range(1, len(tokens)):
        unit = _unit_of(" ".join(tokens[n:]))
        if unit:
            units.append(unit)
            return tokens[:n]
    return tokens


def _strip_qualifiers(words: list[str]) -> tuple[list[str], bool]:
    """The words without leading and trailing qualifiers ("exch.", "total"...), and whether
    one of them said exchangeable."""
    qualified = False
    while words and words[0] in _QUALIFIERS:
        qualified = qualified or words[0] in _EXCHANGEABLE_WORDS
        words = words[1:]
    while words and words[-1] in _QUALIFIERS:
        qualified = qualified or words[-1] in _EXCHANGEABLE_WORDS
        words = words[:-1]
    return words, qualified


def _not_an_analyte(given: str, words: list[str], note: str | None) -> HeaderInfo:
    """A header that is no analyte; noted when it names one but holds something else
    ("Colwell K", "Total Ca", "Ca %", "Ca sat")."""
    core = [w for w in words if w not in _NOT_EXCHANGEABLE and w not in _PERCENT_WORDS]
    named = _ANALYTE_OF.get(" ".join(core)) if core else None
    if named is not None and named not in UNITLESS:
        if any(w in _PERCENT_WORDS for w in words):
            note = "a percentage (saturation), not an amount"
        else:
            note = "another extract or measure, not the exchangeable amount"
    return HeaderInfo(given, None, note=note)


def _analyte_header(given: str, analyte: str, joined: str, methods: list[str],
                    ratios: list[str], units: list[str], note: str | None) -> HeaderInfo:
    """The header of a named analyte, unless its method or note says it holds another
    measure (an extract ratio or a non-exchangeable extract of a cation)."""
    method = " ".join(methods) or None
    if note is not None:
        return HeaderInfo(given, None, method=method, note=note)
    if analyte == "sar":
        return _sar_header(given, joined, methods, ratios, units)
    if analyte in EXCHANGEABLE and ratios:
        return HeaderInfo(given, None, method=ratios[0],
                          note=f"a {ratios[0]} extract, not the exchangeable amount")
    if (analyte in EXCHANGEABLE and method is not None
            and any(w in method.lower() for w in _NOT_EXCHANGEABLE)):
        return HeaderInfo(given, None, method=method,
                          note=f"a {method} extract, not the exchangeable amount")
    return _with_unit(given, analyte, units, method)


_RATIO = re.compile(r"(?<![\d.])1\s*:\s*(\d+(?:\.\d+)?)")
_SAT_EXTRACT_WORDS = {"sat", "saturation", "paste", "se", "saturated"}


def extract_water_of_header(header: str) -> float | str | None:
    """The water of the extract a soluble-cation header names, L per kg of soil.

    ``1:N`` (soil : water by mass) is N L/kg [derived: 1 kg of water is 1 L]; a
    saturation extract ("sat", "saturation", "paste", "SE") has as much water as
    the soil's saturation water content, which differs by sample, so it is
    returned as ``"saturation"``; a header that names neither gives None.

    Examples
    --------
    >>> extract_water_of_header("Na 1:5 (meq/L)"), extract_water_of_header("Soluble K (mg/L)")
    (5.0, None)
    >>> extract_water_of_header("Na sat. paste (mmol/L)")
    'saturation'
    """
    m = _RATIO.search(header)
    if m:
        return float(m.group(1))
    words = set(re.findall(r"[a-z]+", header.lower()))
    return "saturation" if words & _SAT_EXTRACT_WORDS else None


def _with_unit(
    given: str, analyte: str, units: list[str], method: str | None,
    reading: str | None = None,
) -> HeaderInfo:
    """The header as ``analyte``, unless its unit cannot hold it."""
    if len(set(units)) > 1:
        return HeaderInfo(given, None, note=f"two units in one header: {', '.join(units)}")
    unit = units[0] if units else None
    if analyte in UNITLESS and unit is not None:
        return HeaderInfo(given, None, note=f"{analyte} has no unit, but the header says {unit}")
    if analyte in ("acidity", "acidity_potential", "cec") and unit in ELEMENT_MASS_UNITS:
        return HeaderInfo(
            given, None, note=f"{analyte} in {unit} is not defined; give it in cmol(+)/kg"
        )
    return HeaderInfo(given, analyte, unit=unit, method=method, reading=reading)


def _ph_header(given: str, words: list[str], methods: list[str], note: str | None) -> HeaderInfo:
    """A pH header: water, CaCl2 or KCl (distinct analytes); a bare "pH" is read as water."""
    method_text = " ".join([words[0][2:], *words[1:], *methods]).lower()
    method = _ph_method(method_text)
    extra_words = any(c.isalpha() for c in " ".join(words[1:]))
    if note is not None or (extra_words and method is None):
        return HeaderInfo(given, None, note=note)
    if method is None:
        return HeaderInfo(
            given, "ph", reading=(
                f"'{given}' names no method: read as pH in water (the usual reading); if the "
                f"lab measured it in CaCl2, set [samples.columns] ph_cacl2 = '{given}' (in KCl: "
                f"ph_kcl = '{given}')"
            ),
        )
    role = {"water": "ph", "CaCl2": "ph_cacl2", "KCl": "ph_kcl"}[method]
    return HeaderInfo(given, role, method=method)


def _acidity_header(
    given: str, joined: str, methods: list[str], units: list[str], qualified: bool,
    note: str | None,
) -> HeaderInfo | None:
    """An acidity header: exchangeable, potential, or undecided (None: not an acidity)."""
    extra: str | None = None
    if joined in ANALYTE_SPELLINGS["acidity_potential"]:
        extra, potential_name = "", True
    else:
        potential_name = False
        for name in sorted(_ACIDITY_NAMES, key=len, reverse=True):
            if joined == name:
                extra = ""
            elif joined.startswith(name + " "):
                extra = joined[len(name) + 1:]
            elif joined.endswith(" " + name):
                extra = joined[: -len(name) - 1]
            if extra is not None:
                break
    if extra is None:
        return None
    method = " ".join(methods) or None
    if note is not None:
        return HeaderInfo(given, None, method=method, note=note)
    said = f"{extra} {' '.join(methods)}".lower()
    potential = potential_name or any(
        re.search(rf"(?<![a-z0-9]){re.escape(w)}(?![a-z0-9])", said) for w in _POTENTIAL_WORDS
    )
    exchangeable = qualified or "kcl" in said
    leftover = [w for w in extra.split() if w not in _EXCHANGEABLE_WORDS and w != "kcl"
                and not any(w in p.split() for p in _POTENTIAL_WORDS)]
    if leftover:
        if all(w in _PERCENT_WORDS for w in leftover):
            return HeaderInfo(given, None, method=method,
                              note="a percentage (saturation), not an amount")
        return HeaderInfo(given, None, method=method)
    if potential and not exchangeable:
        return _with_unit(given, "acidity_potential", units, method)
    if exchangeable and not potential:
        return _with_unit(given, "acidity", units, method)
    why = ("names both the exchangeable and a pH 7 method" if potential
           else "names no method")
    return HeaderInfo(
        given, None, method=method, undecided=(
            f"acidity column '{given}' {why}: exchangeable acidity (1 M KCl, Al + H) and "
            "potential acidity (H + Al at pH 7, buffer or acetate methods) often differ "
            f"several-fold; set [samples.columns] acidity = '{given}' if it is exchangeable, "
            f"or acidity_potential = '{given}' if it is potential acidity"
        ),
    )


def _sar_header(
    given: str, joined: str, methods: list[str], ratios: list[str], units: list[str]
) -> HeaderInfo:
    """An SAR header: saturation extract (``sar``) or 1:5 (``sar_1to5``)."""
    method = " ".join([*ratios, *methods]) or None
    if ratios:
        if ratios[0] != "1:5":
            return HeaderInfo(given, None, method=method, note=(
                f"SAR of a {ratios[0]} extract: geosoil reads saturation-extract and 1:5 SAR "
                "only"))
        return _with_unit(given, "sar_1to5", units, method)
    said = " ".join(methods).lower()
    if joined == "sare" or any(w in said.split() or w in said for w in
                               ("saturation", "paste", "extract")):
        return _with_unit(given, "sar", units, method)
    return _with_unit(given, "sar", units, method, reading=(
        f"'{given}' names no extract: read as saturation-extract SAR (the usual reading, USDA "
        f"Handbook 60); if the lab measured it in a 1:5 extract, set [samples.columns] "
        f"sar_1to5 = '{given}'"
    ))


_BUFFER_NAMES: dict[str, str] = {
    "smp": "bph_smp", "sikora": "bph_sikora", "mehlich": "bph_mehlich",
    "adams evans": "bph_adams_evans", "ae": "bph_adams_evans", "a e": "bph_adams_evans",
}
PROPERTY_UNIT_TEXTS: dict[str, str] = {
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
                  {k.replace(" ", "") for k in PROPERTY_UNIT_TEXTS}]
    name_part = _BRACKETS.sub(" ", plain)
    words = _words(name_part)
    # a unit written after the name: "Clay %", "OC g/kg", "pHBC mmol/kg/pH"
    tail_unit = None
    for n in range(len(words) - 1, 0, -1):
        key = " ".join(words[n:]).replace(" ", "")
        if key in {k.replace(" ", "") for k in PROPERTY_UNIT_TEXTS}:
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
    joined = _fold(" ".join(words))
    found = next((a for a in PROPERTIES if joined in ANALYTE_SPELLINGS[a]), None)
    if found is None and joined in _EC_NAMES and extra:
        # the extract in brackets: "EC (1:5 water)", "CE (extracto de saturación)"
        named = _fold(" ".join([*words, *extra]))
        found = next((a for a in ("ec_1_5", "ece") if named in ANALYTE_SPELLINGS[a]), None)
        extra = [] if found else extra
    if found is None and joined in _EC_NAMES and not extra:
        return HeaderInfo(given, None, note="an EC that names no extract: map it with "
                          f"[samples.columns] ec_1_5 = '{given}' (1:5 water) or ece = "
                          f"'{given}' (saturation extract)")
    if found is None:
        return None
    analyte: str = found
    squashed = {k.replace(" ", ""): v for k, v in PROPERTY_UNIT_TEXTS.items()}
    texts = [u.lower().replace(" ", "") for u in unit_texts]
    if tail_unit is not None:
        texts.append(tail_unit)
    said = [squashed[t] for t in texts if t in squashed]
    # a property's unit that is also a cation unit ("g/kg") is the property's
    units = [u for u in units if u not in PROPERTIES[analyte]]
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
        return 0 if info.method == "water" else 1
    if info.role == "sar":
        return 0 if info.reading is None else 1
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
    >>> g.analytes["ph"], g.analytes["ph_cacl2"], g.analytes["cec"], g.geographic
    ('pH (water)', 'pH (CaCl2)', 'ECEC', True)
    >>> detect_columns(["ID", "pH", "H+Al"]).undecided["H+Al"][:39]
    "acidity column 'H+Al' names no method: "
    >>> detect_columns(["Ca (mg/kg)", "Calcium (meq/100g)"]).ambiguous
    {'ca': ('Ca (mg/kg)', 'Calcium (meq/100g)')}
    """
    infos = [parse_header(h) for h in headers]
    by_role: dict[str, list[HeaderInfo]] = {}
    notes: dict[str, str] = {}
    undecided: dict[str, str] = {}
    for info in infos:
        if info.role is not None:
            by_role.setdefault(info.role, []).append(info)
        elif info.undecided is not None:
            undecided[info.header] = info.undecided
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
    readings: dict[str, str] = {}
    for analyte in CANONICAL:
        chosen, tied = best(analyte)
        if tied:
            ambiguous[analyte] = tied
        elif chosen is not None:
            analytes[analyte] = chosen.header
            units[analyte] = chosen.unit
            methods[analyte] = chosen.method
            if chosen.reading is not None:
                readings[chosen.header] = chosen.reading
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
        readings=readings,
        undecided=undecided,
    )


#: Words of headers that keep the lab's, the sampler's or the farm's records rather than a
#: measurement: comments, dates, lab and job numbers, names of the farm, paddock and crop
#: (English, German, Spanish, Portuguese, French; folded and lower case; our own list).
_BOOKKEEPING_WORDS = frozenset("""
    comment comments note notes remark remarks observation observations description descr
    date dated time year season sampled sampling collected received reported analysed
    analyzed tested lab laboratory no nr number num ref reference job batch order invoice
    client customer grower owner farm property paddock field block site location place
    sampler collector crop report certificate cert status type name code id sample
    bemerkung bemerkungen kommentar anmerkung anmerkungen datum probenahme labor
    labornummer auftrag kunde betrieb schlag feld ort beschreibung kultur probe
    comentario comentarios observacion observaciones nota fecha muestreo laboratorio
    numero cliente finca lote campo sitio descripcion cultivo muestra
    observacao observacoes data amostragem fazenda talhao local descricao cultura amostra
    commentaire commentaires remarque remarques prelevement laboratoire exploitation
    parcelle champ lieu echantillon
""".split())
#: Words that join the others ("date of sampling", "numero de laboratorio").
_JOINING_WORDS = frozenset("of the by at on in de del la le du da do der des".split())


def is_bookkeeping(header: str) -> bool:
    """Whether a header names a record-keeping column (a comment, a date, a lab or job
    number, the farm or crop), not an analyte: every word is one of the record-keeping
    words (or joins them, or is a number) and no unit is written. A header naming an
    element or a measure ("Zn", "B (mg/kg)", "Olsen P") is not.

    Examples
    --------
    >>> [is_bookkeeping(h) for h in ("Comments", "Date sampled", "Lab no.", "Fecha de muestreo")]
    [True, True, True, True]
    >>> [is_bookkeeping(h) for h in ("Zn", "B (mg/kg)", "Olsen P", "Notes (mg/kg)", "")]
    [False, False, False, False, False]
    """
    text = _fold(str(header)).lower()
    if parse_header(header).unit is not None or "/" in text or "%" in text:
        return False
    words = re.findall(r"[a-z0-9]+", text)
    named = [w for w in words if w in _BOOKKEEPING_WORDS]
    return bool(named) and all(
        w in _BOOKKEEPING_WORDS or w in _JOINING_WORDS or w.isdigit() for w in words)


#: Header words (folded, lower case) only German labs write, and words only labs writing in
#: Spanish, Portuguese or French write: they tell what a longitude's letter "O" means, east
#: (Ost) in German, west (Oeste, Ouest) in the others. Our own lists.
_GERMAN_WORDS = frozenset("""
    probe proben probennummer probenbezeichnung rechtswert hochwert breite breitengrad
    lange laenge langengrad laengengrad austauschbar austauschbare austauschbares kalium
    natrium kak leitfahigkeit leitfaehigkeit schlag tiefe bodenart humus ost
""".split())
_ROMANCE_WORDS = frozenset("""
    muestra punto longitud latitud intercambiable intercambiables calcio magnesio potasio
    sodio aluminio acidez agua cic cice conductividad profundidad lote oeste
    amostra ponto trocavel trocaveis potassio ctc condutividade profundidade talhao
    echantillon echangeable echangeables conductivite profondeur parcelle ouest
""".split())


def letter_o_reading(headers: Sequence[str], column: str | None = None) -> str | None:
    """What the hemisphere letter "O" of a longitude means, from the language of the
    headers: "W" (Spanish, Portuguese and French oeste, ouest), "E" (German Ost), or None
    when they do not say (English headers only) or say both.

    The longitude's own header decides first (``Longitud`` is Spanish, ``Länge``
    German); when it does not (``Longitude`` is English, Portuguese and French alike),
    the whole header row does.

    Examples
    --------
    >>> letter_o_reading(["Muestra", "Latitud", "Longitud", "pH agua"], "Longitud")
    'W'
    >>> letter_o_reading(["Probe", "Breite", "Länge"], "Länge")
    'E'
    >>> letter_o_reading(["Amostra", "Latitude", "Longitude"], "Longitude")
    'W'
    >>> letter_o_reading(["Sample", "Lat", "Long"], "Long") is None
    True
    """
    def reading(texts: Sequence[str]) -> str | None:
        words = {w for t in texts for w in re.findall(r"[a-z0-9]+", _fold(str(t)).lower())}
        german, romance = bool(words & _GERMAN_WORDS), bool(words & _ROMANCE_WORDS)
        return None if german == romance else ("E" if german else "W")

    own = reading([column]) if column is not None else None
    return own if own is not None else reading(list(headers))
