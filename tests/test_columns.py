"""Tests for geosoil.columns: lab header spellings -> analytes, units, ID and coordinates."""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st

from geosoil.columns import ANALYTE_SPELLINGS, detect_columns, is_bookkeeping, parse_header


@pytest.mark.parametrize(
    "header, role, unit, method",
    [
        ("Ca", "ca", None, None),
        ("CA", "ca", None, None),
        ("Exch Ca", "ca", None, None),
        ("Exch. Ca (meq/100g)", "ca", "meq/100g", None),
        ("Exchangeable Calcium (cmol(+)/kg)", "ca", "cmol/kg", None),
        ("Calcium (meq/100g)", "ca", "meq/100g", None),
        ("Ca (mg/kg)", "ca", "mg/kg", None),
        ("Ca ppm", "ca", "mg/kg", None),
        ("Ca [ppm]", "ca", "mg/kg", None),
        ("Ca_cmolc_kg", "ca", "cmol/kg", None),
        ("Ca_meq/100g", "ca", "meq/100g", None),
        ("Ca2+ (cmol(c)/kg)", "ca", "cmol/kg", None),
        ("Ca++", "ca", None, None),
        ("Mg", "mg", None, None),
        ("Mg mg/kg", "mg", "mg/kg", None),
        ("Magnesium (mmol(+)/kg)", "mg", "mmol/kg", None),
        ("K", "k", None, None),
        ("Exch K (NH4OAc)", "k", None, "NH4OAc"),
        ("Potassium", "k", None, None),
        ("Na", "na", None, None),
        ("Exch-Na mg kg-1", "na", "mg/kg", None),
        ("Sodium (meq/100 g)", "na", "meq/100g", None),
        ("Al", "al", None, None),
        ("Exch Al (KCl)", "al", None, "KCl"),
        ("Aluminium", "al", None, None),
        ("Aluminum", "al", None, None),
        ("H", "h", None, None),
        ("Exch. Acidity", "acidity", None, None),
        ("Exchangeable acidity (cmol/kg)", "acidity", "cmol/kg", None),
        ("Exch. Al+H", "acidity", None, None),
        ("Acidity (KCl)", "acidity", None, "KCl"),
        ("H+Al (pH 7)", "acidity_potential", None, "pH 7"),
        ("Potential acidity (cmol/kg)", "acidity_potential", "cmol/kg", None),
        ("H+Al (Ca acetate)", "acidity_potential", None, "Ca acetate"),
        ("Acidity (SMP buffer)", "acidity_potential", None, "SMP buffer"),
        ("Exch Al + H (meq/100g)", "acidity", "meq/100g", None),
        ("ECEC", "cec", None, None),
        ("ECEC (cmol(+)/kg)", "cec", "cmol/kg", None),
        ("CEC", "cec", None, None),
        ("Cation exchange capacity", "cec", None, None),
        ("pH", "ph", None, None),
        ("pH (CaCl2)", "ph_cacl2", None, "CaCl2"),
        ("pH (water)", "ph", None, "water"),
        ("pH (1:5 water)", "ph", None, "water"),
        ("pH 1:5 (CaCl2)", "ph_cacl2", None, "CaCl2"),
        ("pH_H2O", "ph", None, "water"),
        ("pHw", "ph", None, "water"),
        ("pHCa", "ph_cacl2", None, "CaCl2"),
        ("pH CaCl2", "ph_cacl2", None, "CaCl2"),
        ("pH (KCl)", "ph_kcl", None, "KCl"),
        ("SAR", "sar", None, None),
        ("SARe", "sar", None, None),
        ("SAR (saturation extract)", "sar", None, "saturation extract"),
        ("Sodium adsorption ratio", "sar", None, None),
        ("SAR (1:5)", "sar_1to5", None, "1:5"),
        ("SAR1:5", "sar_1to5", None, "1:5"),
        ("Sample", "id", None, None),
        ("Sample ID", "id", None, None),
        ("Sample_ID", "id", None, None),
        ("ID", "id", None, None),
        ("Easting", "east", None, None),
        ("Northing", "north", None, None),
        ("Easting (m)", "east", None, None),
        ("X", "x", None, None),
        ("Y", "y", None, None),
        ("Lon", "lon", None, None),
        ("Lat", "lat", None, None),
        ("Longitude", "lon", None, None),
        ("Latitude (WGS84)", "lat", None, None),
        ("\ufeffSample ID", "id", None, None),
    ],
)
def test_parse_header_common_lab_spellings(header, role, unit, method):
    info = parse_header(header)
    assert (info.role, info.unit, info.method) == (role, unit, method)


@pytest.mark.parametrize(
    "header, note",
    [
        ("Ca %", "percentage"),
        ("Ca (%)", "percentage"),
        ("Ca (% of CEC)", "percentage"),
        ("Exch Na %", "percentage"),
        ("Ca sat", "percentage"),
        ("Colwell K", "not the exchangeable amount"),
        ("K (Colwell)", "not the exchangeable amount"),
        ("Total Ca", "not the exchangeable amount"),
        ("Al (CaCl2)", "not the exchangeable amount"),
        ("Na (meq/L)", "not an exchangeable amount"),
        ("Ca (mg/kg) (meq/100g)", "two units"),
        ("CEC (mg/kg)", "mg/kg is not defined"),
        ("Na (1:5)", "not the exchangeable amount"),
        ("SAR (1:2.5)", "saturation-extract and 1:5 SAR only"),
    ],
)
def test_headers_that_name_an_analyte_but_hold_something_else(header, note):
    info = parse_header(header)
    assert info.role is None
    assert note in info.note


@pytest.mark.parametrize(
    "header", ["Ca:Mg", "Ca/Mg ratio", "ESP", "EC", "Phosphorus", "Depth (cm)", "N", "Notes", ""]
)
def test_other_headers_are_left_alone(header):
    assert parse_header(header).role is None


def test_detect_reads_each_ph_method_and_prefers_ecec():
    guess = detect_columns(
        ["ID", "Lon", "Lat", "pH (CaCl2)", "pH (water)", "CEC", "ECEC", "Ca", "Ca %"]
    )
    assert guess.analytes == {"ca": "Ca", "cec": "ECEC", "ph": "pH (water)",
                              "ph_cacl2": "pH (CaCl2)"}
    assert guess.methods["ph"] == "water"
    assert guess.ambiguous == {}
    assert guess.notes == {"Ca %": "a percentage (saturation), not an amount"}


def test_detect_reads_ph_in_cacl2_as_its_own_analyte():
    guess = detect_columns(["Sample", "X", "Y", "pH (CaCl2)"])
    assert "ph" not in guess.analytes
    assert guess.analytes["ph_cacl2"] == "pH (CaCl2)" and guess.methods["ph_cacl2"] == "CaCl2"


def test_two_equal_candidates_are_reported_not_guessed():
    guess = detect_columns(["Ca (mg/kg)", "Calcium (meq/100g)", "Mg"])
    assert "ca" not in guess.analytes
    assert guess.ambiguous == {"ca": ("Ca (mg/kg)", "Calcium (meq/100g)")}
    assert guess.analytes == {"mg": "Mg"}


@pytest.mark.parametrize(
    "headers, x, y, geographic",
    [
        (["Longitude", "Latitude"], "Longitude", "Latitude", True),
        (["Easting", "Northing"], "Easting", "Northing", False),
        (["X", "Y"], "X", "Y", None),
        (["X", "Y", "Lon", "Lat"], "Lon", "Lat", True),
        (["Lon", "Northing"], None, None, None),
    ],
)
def test_detect_coordinates(headers, x, y, geographic):
    guess = detect_columns(headers)
    assert (guess.x, guess.y, guess.geographic) == (x, y, geographic)


def test_detect_id_prefers_the_sample_id_over_lab_numbers():
    assert detect_columns(["Lab No", "Sample ID", "Ca"]).id == "Sample ID"
    assert detect_columns(["Name", "ID"]).id == "ID"
    assert detect_columns(["Ca", "Mg"]).id is None


_EXCHANGEABLE_SPELLINGS = [
    (a, n) for a in ("ca", "mg", "k", "na", "al", "h") for n in ANALYTE_SPELLINGS[a]
]
_UNIT_SPELLINGS = [
    ("cmol(+)/kg", "cmol/kg"), ("cmolc/kg", "cmol/kg"), ("meq/100g", "meq/100g"),
    ("meq/100 g", "meq/100g"), ("mmol(+)/kg", "mmol/kg"), ("mg/kg", "mg/kg"), ("ppm", "mg/kg"),
]


@given(
    spelling=st.sampled_from(_EXCHANGEABLE_SPELLINGS),
    qualifier=st.sampled_from(["", "Exch ", "Exch. ", "Exchangeable ", "exch_"]),
    unit=st.sampled_from(_UNIT_SPELLINGS),
    layout=st.sampled_from(["{q}{n} ({u})", "{q}{n} [{u}]", "{q}{n} {u}", "{q}{n}_{u}"]),
    upper=st.booleans(),
)
def test_any_qualifier_name_and_unit_layout_is_read(spelling, qualifier, unit, layout, upper):
    analyte, name = spelling
    name = name.upper() if upper else name.capitalize()
    header = layout.format(q=qualifier, n=name, u=unit[0])
    info = parse_header(header)
    assert (info.role, info.unit) == (analyte, unit[1]), header


@given(st.lists(st.text(max_size=12), max_size=8))
def test_detect_never_fails_and_maps_each_header_once(headers):
    guess = detect_columns(headers)
    used = list(guess.analytes.values())
    assert len(used) == len(set(used))
    assert set(used) <= set(headers)


# --------------------------------------------------------------------------- messy header rows

#: Header cells as labs write them, plus junk a spreadsheet export leaves behind.
_MESSY_HEADERS = [
    "Sample ID", "Sample", "ID", "Site", "Lab No", "Longitude", "Latitude", "Lon", "Lat",
    "Easting", "Northing", "X", "Y", "Exch Ca (meq/100g)", "Ca", "Mg", "K", "Na", "Al", "H",
    "Exch. Ca", "Ca (mg/kg)", "Mg (cmol(+)/kg)", "K (mmol/kg)", "Na (ppm)", "pH (water)",
    "pH (CaCl2)", "pH", "CEC", "ECEC", "SAR", "Exch Acidity", "Calcium", "Ca %", "Notes",
    "", " ", "\ufeffSample", "(meq/100g)", "meq/100g", "Ca/Mg", "Lat Lon", "column 7", "2",
    "Ca Ca", "n.d.", "<0.1", "ÉCEC", "Échantillon", "\x00", "Ca\tMg", "Ca (meq/100g) (mg/kg)",
]


@given(st.lists(st.sampled_from(_MESSY_HEADERS) | st.text(max_size=10), max_size=10))
def test_detect_columns_on_messy_rows_names_only_headers_given(headers):
    """Property: any header row, duplicates and junk included, is read without an exception;
    every role points at a header that is in the row, no header takes two roles, x and y differ."""
    guess = detect_columns(headers)
    named = [*guess.analytes.values(), *(h for h in (guess.id, guess.x, guess.y) if h)]
    assert set(named) <= set(headers)
    assert len(named) == len(set(named))
    for tied in guess.ambiguous.values():
        assert len(tied) > 1 and set(tied) <= set(headers)
    assert (guess.x is None) == (guess.y is None)


@given(st.sampled_from(_MESSY_HEADERS) | st.text(max_size=30))
def test_parse_header_never_fails_and_keeps_the_header(header):
    info = parse_header(header)
    assert info.header == header


def test_header_with_spaces_or_bom_is_returned_as_written():
    """Regression (hypothesis found it): a padded header was returned stripped, so the reader
    looked up a column that does not exist (KeyError on GeoJSON properties like ' Ca')."""
    guess = detect_columns(["\ufeffSample", " Ca ", "Lon", "Lat"])
    assert guess.id == "\ufeffSample" and guess.analytes["ca"] == " Ca "
    assert parse_header(" Ca ").header == " Ca " and parse_header(" Ca ").role == "ca"


# --------------------------------------------------------------------------- lime analytes


@pytest.mark.parametrize(
    ("header", "role", "unit"),
    [
        ("SMP Buffer pH", "bph_smp", None),
        ("Buffer pH (SMP)", "bph_smp", None),
        ("Sikora BpH", "bph_sikora", None),
        ("Mehlich buffer pH", "bph_mehlich", None),
        ("Adams-Evans buffer pH", "bph_adams_evans", None),
        ("Organic Carbon (%)", "oc", "%"),
        ("OC %", "oc", "%"),
        ("Organic C (Walkley-Black) %", "oc", "%"),
        ("Organic matter %", "om", "%"),
        ("Clay %", "clay", "%"),
        ("Clay (g/kg)", "clay", "g/kg"),
        ("pHBC (mmol/kg/pH)", "phbc", "mmol/kg/pH"),
        ("CTC pH 7 (mmolc/dm3)", "cec_ph7", "mmol/dm3"),
    ],
)
def test_lime_analyte_headers(header: str, role: str, unit: str | None) -> None:
    info = parse_header(header)
    assert (info.role, info.unit) == (role, unit)


@pytest.mark.parametrize("header", ["Buffer pH", "BpH", "pH (buffer)", "Lime index"])
def test_buffer_ph_without_its_buffer_is_not_guessed(header: str) -> None:
    info = parse_header(header)
    assert info.role is None
    assert "names no buffer" in (info.note or "")
    assert info.role != "ph"


def test_plain_ph_is_still_ph_beside_a_buffer_ph() -> None:
    g = detect_columns(["ID", "Lon", "Lat", "pH", "SMP buffer pH", "Clay %"])
    assert g.analytes == {"ph": "pH", "bph_smp": "SMP buffer pH", "clay": "Clay %"}


# --------------------------------------------------------------------------- header meaning


@pytest.mark.parametrize(
    "header",
    ["H+Al", "Al+H", "Acidity", "Acidity (cmol/kg)", "Total acidity", "Titratable acidity",
     "Extractable acidity"],
)
def test_acidity_that_names_no_method_is_left_undecided(header):
    """Exchangeable (KCl) and potential (pH 7) acidity differ several-fold, so a header that
    names neither is read as neither; the note names both settings that decide it."""
    info = parse_header(header)
    assert info.role is None
    assert f"acidity = '{header}'" in info.undecided
    assert f"acidity_potential = '{header}'" in info.undecided
    guess = detect_columns(["ID", "Lon", "Lat", "Ca", header])
    assert "acidity" not in guess.analytes and header in guess.undecided


def test_bare_ph_and_sar_take_the_usual_reading_with_a_note_naming_the_setting():
    guess = detect_columns(["ID", "Lon", "Lat", "pH", "SAR", "pH (CaCl2)"])
    assert guess.analytes["ph"] == "pH" and guess.analytes["ph_cacl2"] == "pH (CaCl2)"
    assert guess.analytes["sar"] == "SAR"
    assert "pH in water" in guess.readings["pH"]
    assert "ph_cacl2 = 'pH'" in guess.readings["pH"]
    assert "sar_1to5 = 'SAR'" in guess.readings["SAR"]
    assert "pH (CaCl2)" not in guess.readings


def test_ph_methods_and_sar_extracts_are_distinct_analytes():
    guess = detect_columns(["ID", "pH (water)", "pH (CaCl2)", "pH (KCl)", "SAR (1:5)", "SARe"])
    assert guess.analytes == {"ph": "pH (water)", "ph_cacl2": "pH (CaCl2)",
                              "ph_kcl": "pH (KCl)", "sar": "SARe", "sar_1to5": "SAR (1:5)"}
    assert guess.readings == {}


@pytest.mark.parametrize(
    "header, role, unit",
    [
        # German, Spanish, Portuguese and French lab words (terms of the trade)
        ("Calcium austauschbar", "ca", None),
        ("Kalium austauschbar (mmol(+)/kg)", "k", "mmol/kg"),
        ("Natrium austauschbar", "na", None),
        ("Ca intercambiable (cmol(+)/kg)", "ca", "cmol/kg"),
        ("Potasio intercambiable", "k", None),
        ("Sodio intercambiable", "na", None),
        ("Cálcio trocável (cmolc/dm3)", "ca", "cmol/dm3"),
        ("Potássio trocável", "k", None),
        ("Magnésium échangeable (cmol(+)/kg)", "mg", "cmol/kg"),
        ("Aluminio intercambiable", "al", None),
        ("KAK eff", "cec", None),
        ("CICE", "cec", None),
        ("CTC efetiva", "cec", None),
        ("KAK pot", "cec_ph7", None),
        ("Acidez intercambiable", "acidity", None),
        ("pH (agua)", "ph", None),
        ("pH em água", "ph", None),
        ("pH eau", "ph", None),
        ("Probe", "id", None),
        ("Muestra", "id", None),
        ("Breitengrad", "lat", None),
        ("Längengrad", "lon", None),
        ("Latitud", "lat", None),
        ("Longitud", "lon", None),
        ("Rechtswert", "east", None),
        ("Hochwert", "north", None),
        # a cation in g/kg: element mass per kg, as mg/kg is
        ("Ca (g/kg)", "ca", "g/kg"),
        # g/kg stays a property's unit for organic carbon and clay
        ("Organic carbon (g/kg)", "oc", "g/kg"),
    ],
)
def test_other_languages_and_units(header, role, unit) -> None:
    info = parse_header(header)
    assert (info.role, info.unit) == (role, unit)


@pytest.mark.parametrize("header", ["Ca (mmol/kg)", "Mg mmol/kg"])
def test_mmol_of_a_divalent_cation_without_the_charge_mark_says_how_it_is_read(header) -> None:
    # user trial: "Ca (mmol/kg)" was read as mmol(+)/kg without a word
    info = parse_header(header)
    assert info.unit == "mmol/kg" and "read as mmol of charge per kg" in info.reading
    assert "two charges" in info.reading


@pytest.mark.parametrize("header", ["Ca (mmolc/kg)", "Ca (mmol(+)/kg)", "K (mmol/kg)",
                                    "Na mmol/kg"])
def test_mmol_with_the_charge_mark_or_of_a_monovalent_cation_needs_no_note(header) -> None:
    assert parse_header(header).reading is None


@pytest.mark.parametrize("header", ["Comments", "Notes", "Date sampled", "Lab no.", "Lab No 2",
                                    "Job number", "Date of sampling", "Bemerkungen",
                                    "Fecha de muestreo", "Observações", "Remarques"])
def test_record_keeping_headers(header: str) -> None:
    # user trial: the demo's 'Comments' was warned of in every run as an analyte might be
    assert is_bookkeeping(header)


@pytest.mark.parametrize("header", ["Zn", "B (mg/kg)", "Olsen P", "Colwell K", "NO3-N",
                                    "Notes (mg/kg)", "Sample %", "Kalzium frei", "column 7", ""])
def test_headers_that_may_hold_an_analyte_are_not_record_keeping(header: str) -> None:
    assert not is_bookkeeping(header)


@given(st.one_of(st.floats(allow_nan=False, allow_infinity=False).map(repr),
                 st.integers(-10**9, 10**9).map(str),
                 st.decimals(allow_nan=False, allow_infinity=False, places=3)
                 .map(lambda d: str(d).replace(".", ",")),
                 st.floats(0, 1000, allow_nan=False).map(lambda f: f"<{f:g}")))
def test_a_number_names_no_column(text: str) -> None:
    """The header search skips the numbers of a data row (geosoil.samples._find_header):
    sound only while no number, as a lab writes it (decimal comma, below-detection "<"),
    is read as naming an analyte, the sample ID or a coordinate."""
    from geosoil.samples import _is_number

    assert _is_number(text)
    assert parse_header(text).role is None
