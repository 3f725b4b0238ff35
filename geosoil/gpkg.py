"""One GeoPackage of the farm for GIS users, with layer styles.  [I/O: write_gpkg]

A GeoPackage (OGC 12-128r18) holds every layer in one file: paddocks,
exclusions, samples with their chemistry, the zones of each product (all
passes, with ``rate_kg_ha`` the total and ``passes``, ``per_pass_kg_ha`` and
``schedule`` beside it) and, where a product needs several passes, one layer
per pass. GDAL (through pyogrio) writes the layers.

Layer styles go in the ``layer_styles`` table, the convention that QGIS reads
when it opens a layer of a GeoPackage (the table's columns are QGIS's; the
styles in it are our own): each row holds a style as QGIS's QML and as OGC
Symbology Encoding 1.1 (SLD), and ``useAsDefault`` marks it as the one to use.
Zones are coloured by rate in five equal steps from the smallest rate above 0
to the largest (rate 0 light grey); exclusions are a light red fill, paddocks
an outline, samples a white dot. The style XML is built as an ElementTree, which
escapes every name and label written into it.
"""

from __future__ import annotations

import contextlib
import logging
import math
import os
from collections.abc import Iterator, Mapping, Sequence
from pathlib import Path
from typing import Any
from xml.etree.ElementTree import Element, SubElement, tostring

import numpy as np
import pandas as pd

from .writers import atomic_path, text_or_none, valid_polygons

__all__ = ["RATE_COLOURS", "ZERO_COLOUR", "rate_classes", "zone_styles", "plain_style",
           "write_gpkg"]

logger = logging.getLogger(__name__)

#: GDAL's settings for SQLite's synchronous mode and rollback journal (GeoPackage is
#: SQLite), and their values while :func:`write_gpkg` writes its temporary file.
_SQLITE_WRITING = {"OGR_SQLITE_SYNCHRONOUS": "OFF", "OGR_SQLITE_JOURNAL": "MEMORY"}

#: Colours of the five rate classes, lightest (least product) first; our own ramp.
RATE_COLOURS: tuple[str, ...] = ("#f7f0c8", "#e3cf7a", "#c9a13f", "#96692a", "#5a3c1c")

#: Colour of zones with rate 0 (nothing spread).
ZERO_COLOUR = "#dcdcdc"

_QML_HEAD = "<!DOCTYPE qgis PUBLIC 'http://mrcc.com/qgis.dtd' 'SYSTEM'>\n"


def rate_classes(rates: Sequence[float], n: int = 5) -> list[tuple[float, float]]:
    """Equal-step classes from the smallest rate above 0 to the largest.

    Parameters
    ----------
    rates : sequence of float
        The zones' rates, kg/ha.
    n : int
        Number of classes (fewer when the rates take fewer values).

    Returns
    -------
    list of (float, float)
        (lower, upper) of each class; empty when no rate is above 0.

    Examples
    --------
    >>> rate_classes([0.0, 1000.0, 3000.0], n=2)
    [(1000.0, 2000.0), (2000.0, 3000.0)]
    """
    pos = np.asarray([r for r in rates if r is not None and math.isfinite(r) and r > 0], float)
    if pos.size == 0:
        return []
    lo, hi = float(pos.min()), float(pos.max())
    k = max(1, min(n, len(np.unique(pos))))
    if hi == lo:
        return [(lo, hi)]
    step = (hi - lo) / k
    edges = [lo + i * step for i in range(k)] + [hi]
    return [(edges[i], edges[i + 1]) for i in range(k)]


def _rgb(hex_colour: str) -> str:
    h = hex_colour.lstrip("#")
    return ",".join(str(int(h[i:i + 2], 16)) for i in (0, 2, 4)) + ",255"


def _sub(parent: Element, tag: str, attrs: Mapping[str, str] | None = None, *,
         text: str | None = None) -> Element:
    """A child element; ElementTree escapes its attributes and text when written."""
    child = SubElement(parent, tag, dict(attrs or {}))
    child.text = text
    return child


def _xml(root: Element) -> str:
    return tostring(root, encoding="unicode")


# --- QML (QGIS's own style format) ---------------------------------------------------

def _qml_symbol(kind: str, name: str, layer_class: str,
                options: Sequence[tuple[str, str]]) -> Element:
    symbol = Element("symbol", {"type": kind, "name": name, "alpha": "1",
                                "clip_to_extent": "1", "force_rhr": "0"})
    layer = _sub(symbol, "layer", {"class": layer_class, "enabled": "1", "locked": "0",
                                   "pass": "0"})
    values = _sub(layer, "Option", {"type": "Map"})
    for key, value in options:
        _sub(values, "Option", {"name": key, "type": "QString", "value": value})
    return symbol


def _qml_fill(name: str, colour: str, outline: str, width: float, style: str = "solid"
              ) -> Element:
    return _qml_symbol("fill", name, "SimpleFill", [
        ("color", _rgb(colour)), ("outline_color", _rgb(outline)),
        ("outline_width", str(width)), ("outline_width_unit", "MM"), ("style", style)])


def _qml_marker(name: str, colour: str, outline: str, size: float) -> Element:
    return _qml_symbol("marker", name, "SimpleMarker", [
        ("name", "circle"), ("color", _rgb(colour)), ("outline_color", _rgb(outline)),
        ("size", str(size)), ("size_unit", "MM")])


def _qml(renderer: Mapping[str, str], symbols: Sequence[Element],
         ranges: Sequence[Element] | None = None) -> str:
    root = Element("qgis", {"version": "3.28.0", "styleCategories": "Symbology"})
    render = _sub(root, "renderer-v2", {**renderer, "symbollevels": "0",
                                        "enableorderby": "0", "forceraster": "0"})
    if ranges is not None:
        _sub(render, "ranges").extend(ranges)
    _sub(render, "symbols").extend(symbols)
    return _QML_HEAD + _xml(root) + "\n"


# --- SLD (OGC Symbology Encoding 1.1) ------------------------------------------------
# The elements carry the prefixes the root declares (se:, ogc:), as QGIS writes them.

_SLD_ROOT = {
    "version": "1.1.0",
    "xmlns": "http://www.opengis.net/sld",
    "xmlns:se": "http://www.opengis.net/se",
    "xmlns:ogc": "http://www.opengis.net/ogc",
    "xmlns:xsi": "http://www.w3.org/2001/XMLSchema-instance",
    "xsi:schemaLocation": "http://www.opengis.net/sld "
                          "http://schemas.opengis.net/sld/1.1.0/StyledLayerDescriptor.xsd",
}


def _sld(layer: str, rules: Sequence[Element]) -> str:
    root = Element("StyledLayerDescriptor", _SLD_ROOT)
    named = _sub(root, "NamedLayer")
    _sub(named, "se:Name", text=layer)
    user = _sub(named, "UserStyle")
    _sub(user, "se:Name", text=layer)
    _sub(user, "se:FeatureTypeStyle").extend(rules)
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + _xml(root) + "\n"


def _svg_parameters(parent: Element, tag: str, params: Mapping[str, str]) -> Element:
    group = _sub(parent, tag)
    for key, value in params.items():
        _sub(group, "se:SvgParameter", {"name": key}, text=value)
    return group


def _sld_polygon(fill: str | None, stroke: str, width: float, opacity: float = 1.0
                 ) -> Element:
    symbolizer = Element("se:PolygonSymbolizer")
    if fill:
        _svg_parameters(symbolizer, "se:Fill", {"fill": fill, "fill-opacity": f"{opacity:g}"})
    _svg_parameters(symbolizer, "se:Stroke", {"stroke": stroke, "stroke-width": f"{width:g}"})
    return symbolizer


def _sld_point(fill: str, stroke: str, size: float) -> Element:
    symbolizer = Element("se:PointSymbolizer")
    graphic = _sub(symbolizer, "se:Graphic")
    mark = _sub(graphic, "se:Mark")
    _sub(mark, "se:WellKnownName", text="circle")
    _svg_parameters(mark, "se:Fill", {"fill": fill})
    _svg_parameters(mark, "se:Stroke", {"stroke": stroke})
    _sub(graphic, "se:Size", text=f"{size:g}")
    return symbolizer


def _rule(name: str, symbolizer: Element, flt: Element | None = None) -> Element:
    rule = Element("se:Rule")
    _sub(rule, "se:Name", text=name)
    if flt is not None:
        rule.append(flt)
    rule.append(symbolizer)
    return rule


def _compare(parent: Element, operator: str, field: str, value: str) -> None:
    comparison = _sub(parent, f"ogc:{operator}")
    _sub(comparison, "ogc:PropertyName", text=field)
    _sub(comparison, "ogc:Literal", text=value)


def _equals(field: str, value: str) -> Element:
    flt = Element("ogc:Filter")
    _compare(flt, "PropertyIsEqualTo", field, value)
    return flt


def _between(field: str, lo: float, hi: float, *, first: bool) -> Element:
    flt = Element("ogc:Filter")
    both = _sub(flt, "ogc:And")
    low = "PropertyIsGreaterThanOrEqualTo" if first else "PropertyIsGreaterThan"
    _compare(both, low, field, f"{lo:.6g}")
    _compare(both, "PropertyIsLessThanOrEqualTo", field, f"{hi:.6g}")
    return flt


def zone_styles(layer: str, rates: Sequence[float], *, unit_note: str = "kg/ha"
                ) -> tuple[str, str]:
    """QML and SLD of a zone layer: rate 0 grey, then five equal rate classes.

    Parameters
    ----------
    layer : str
        The layer's name (written in the SLD).
    rates : sequence of float
        The layer's rates (kg/ha), to place the class limits.
    unit_note : str
        Unit written in the class labels.

    Returns
    -------
    (str, str)
        The QML text and the SLD text.

    Examples
    --------
    >>> qml, sld = zone_styles("zones_gypsum", [0.0, 1000.0, 3000.0])
    >>> "graduatedSymbol" in qml, sld.count("<se:Rule>")  # rate 0 and two classes
    (True, 3)
    """
    classes = rate_classes(rates)
    zero = "0 (nothing spread)"
    ranges = [Element("range", {"lower": "0", "upper": "0", "symbol": "0", "label": zero,
                                "render": "true"})]
    symbols = [_qml_fill("0", ZERO_COLOUR, "#505050", 0.2)]
    rules = [_rule(zero, _sld_polygon(ZERO_COLOUR, "#505050", 0.5),
                   _equals("rate_kg_ha", "0"))]
    colours = RATE_COLOURS if len(classes) == len(RATE_COLOURS) else \
        tuple(RATE_COLOURS[round(i * (len(RATE_COLOURS) - 1) / max(1, len(classes) - 1))]
              for i in range(len(classes)))
    for i, ((lo, hi), colour) in enumerate(zip(classes, colours, strict=True), start=1):
        label = f"{lo:,.0f} - {hi:,.0f} {unit_note}"
        ranges.append(Element("range", {"lower": f"{lo:.6f}", "upper": f"{hi:.6f}",
                                        "symbol": str(i), "label": label, "render": "true"}))
        symbols.append(_qml_fill(str(i), colour, "#505050", 0.2))
        rules.append(_rule(label, _sld_polygon(colour, "#505050", 0.5),
                           _between("rate_kg_ha", lo, hi, first=i == 1)))
    qml = _qml({"type": "graduatedSymbol", "attr": "rate_kg_ha",
                "graduatedMethod": "GraduatedColor"}, symbols, ranges)
    return qml, _sld(layer, rules)


def plain_style(layer: str, kind: str) -> tuple[str, str]:
    """QML and SLD of a paddock (``"outline"``), exclusion (``"exclusion"``) or sample
    (``"point"``) layer.

    Examples
    --------
    >>> qml, sld = plain_style("paddocks", "outline")
    >>> "singleSymbol" in qml and "se:PolygonSymbolizer" in sld
    True
    """
    if kind == "point":
        symbol = _qml_marker("0", "#ffffff", "#202020", 2.4)
        rule = _rule(layer, _sld_point("#ffffff", "#202020", 9))
    elif kind == "exclusion":
        symbol = _qml_fill("0", "#e8a0a0", "#8b1a1a", 0.4)
        rule = _rule(layer, _sld_polygon("#e8a0a0", "#8b1a1a", 1.0, 0.8))
    elif kind == "outline":
        symbol = _qml_fill("0", "#000000", "#1e1e1e", 0.6, style="no")
        rule = _rule(layer, _sld_polygon(None, "#1e1e1e", 2.0))
    else:
        raise ValueError(f"style kind {kind!r} is not one of point, exclusion, outline")
    return _qml({"type": "singleSymbol"}, [symbol]), _sld(layer, [rule])


def _plain_columns(frame: Any) -> Any:
    """Columns GDAL can write: objects that are not text become text; polygons valid,
    without parts under ``writers.MIN_PART_M2``."""
    out = frame.copy()
    if out.crs is not None and out.geom_type.isin(["Polygon", "MultiPolygon"]).any():
        out = out.set_geometry([valid_polygons(g, out.crs) for g in out.geometry], crs=out.crs)
    for col in out.columns:
        if col == out.geometry.name:
            continue
        s = out[col]
        if s.dtype == object:
            out[col] = s.map(text_or_none)
        elif isinstance(s.dtype, pd.BooleanDtype) or s.dtype == bool:
            out[col] = s.astype("Int64" if s.isna().any() else "int64")
    return out


#: Features from which a layer gets a spatial index (R-tree): the GeoPackage standard makes
#: it optional, and a smaller layer is read whole by a GIS. The demo's 7 layers (at most a
#: few hundred features) wrote in 0.07-0.13 s without one and 0.15-0.20 s with one.
SPATIAL_INDEX_FROM = 10_000


@contextlib.contextmanager
def _unsynchronised_sqlite(pyogrio: Any) -> Iterator[None]:
    """SQLite without a disk flush per transaction, and its rollback journal in memory,
    while the layers are written.

    Each layer is a transaction of its own, and SQLite's defaults wait for the disk at
    every one (0.7 s of the demo's 0.9 s GeoPackage, measured) and make and delete a
    journal file beside the GeoPackage for each (a third of what was left on a busy
    machine). The file is a temporary one until :func:`write_gpkg` renames it, and is
    flushed once (:func:`_fsync`) before that, so a crash never leaves a half-written
    GeoPackage under the real name; a failed statement still rolls back (the journal is
    in memory, not off). GDAL's settings are restored afterwards.
    """
    before = {key: pyogrio.get_gdal_config_option(key) for key in _SQLITE_WRITING}
    pyogrio.set_gdal_config_options(dict(_SQLITE_WRITING))
    try:
        yield
    finally:
        pyogrio.set_gdal_config_options(before)


def _fsync(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def write_gpkg(
    path: str | os.PathLike[str],
    layers: Mapping[str, Any],
    *,
    styles: Mapping[str, tuple[str, str]] | None = None,
) -> Path:
    """Write GeoDataFrames as the layers of one GeoPackage, with styles, atomically.

    Parameters
    ----------
    path : path-like
        The ``.gpkg`` file (replaced when it exists).
    layers : mapping of str to GeoDataFrame
        Layer name -> layer, written in order; empty layers are left out.
    styles : mapping of str to (str, str), optional
        Layer name -> (QML, SLD) written to ``layer_styles`` as its default.

    Returns
    -------
    Path
        ``path``.

    Examples
    --------
    >>> import tempfile, geopandas as gpd, shapely, pyogrio
    >>> g = gpd.GeoDataFrame({"paddock": ["North"]}, geometry=[shapely.box(0, 0, 10, 10)],
    ...                      crs="EPSG:32755")
    >>> p = write_gpkg(Path(tempfile.mkdtemp()) / "farm.gpkg", {"paddocks": g},
    ...                styles={"paddocks": plain_style("paddocks", "outline")})
    >>> sorted(name for name, _ in pyogrio.list_layers(p))
    ['layer_styles', 'paddocks']
    """
    import pyogrio

    styles = dict(styles or {})
    with atomic_path(path) as tmp, _unsynchronised_sqlite(pyogrio):
        written: list[str] = []
        for name, frame in layers.items():
            if frame is None or len(frame) == 0:
                continue
            # a spatial index (R-tree) for a layer large enough to need one: building it
            # is most of the time a small layer takes to write (GIS reads those whole)
            index = "YES" if len(frame) >= SPATIAL_INDEX_FROM else "NO"
            pyogrio.write_dataframe(_plain_columns(frame), tmp, layer=name, driver="GPKG",
                                    append=bool(written), promote_to_multi=None,
                                    layer_options={"SPATIAL_INDEX": index})
            written.append(name)
        rows = [
            {"f_table_catalog": "", "f_table_schema": "", "f_table_name": name,
             "f_geometry_column": "geom", "styleName": f"{name} (geosoil)",
             "styleQML": qml, "styleSLD": sld, "useAsDefault": True,
             "description": "geosoil's style for this layer", "owner": "", "ui": "",
             "update_time": pd.Timestamp.now(tz="UTC").strftime("%Y-%m-%dT%H:%M:%S.000Z")}
            for name, (qml, sld) in styles.items() if name in written
        ]
        if rows:
            pyogrio.write_dataframe(pd.DataFrame(rows), tmp, layer="layer_styles",
                                    driver="GPKG", append=True, layer_options={"FID": "id"})
        _fsync(tmp)
    logger.info("GeoPackage: %s (%d layers)", path, len(written))
    return Path(path)
