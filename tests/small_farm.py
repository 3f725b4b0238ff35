"""A small invented project for the tests of the bookkeeping (cache, warnings, output folder).

One or more box paddocks in UTM zone 55S and twelve samples on a grid in each; the
surface cache in a ``cache`` folder beside the project (never the user's cache).
The figures are invented: tests that use this farm check properties, never values.
"""

from __future__ import annotations

import json
from pathlib import Path

import geopandas as gpd
import shapely

__all__ = ["UTM", "X0", "Y0", "HEADER", "make_project"]

UTM = "EPSG:32755"
X0, Y0 = 540_000.0, 6_160_000.0
HEADER = ("Sample,Easting,Northing,pH (CaCl2),Ca (cmol/kg),Mg (cmol/kg),K (cmol/kg),"
          "Na (cmol/kg),Exch Acidity (cmol/kg)")


def make_project(folder: Path, *, names: tuple[str, ...] = ("Home",), extra: str = "",
                 cache: Path | None = None) -> Path:
    """Write ``folder/geosoil.toml``, ``paddocks.gpkg`` (one 400 m x 300 m box per name,
    side by side) and ``lab.csv``; ``extra`` is appended to the TOML."""
    folder.mkdir(parents=True, exist_ok=True)
    boxes = [shapely.box(X0 + k * 500, Y0, X0 + k * 500 + 400, Y0 + 300)
             for k in range(len(names))]
    gpd.GeoDataFrame({"name": list(names)}, geometry=boxes, crs=UTM).to_file(
        folder / "paddocks.gpkg")
    rows = []
    for k in range(len(names)):
        for i in range(12):
            x, y = X0 + k * 500 + 20 + (i % 4) * 90 + i, Y0 + 30 + (i // 4) * 80 + 2 * i
            rows.append(f"P{k}S{i + 1:02d},{x:.1f},{y:.1f},{5.0 + i / 10:.1f},"
                        f"{6 + i / 5:.2f},2.1,0.5,{0.3 + i / 8 + k / 10:.2f},0.2")
    (folder / "lab.csv").write_text(HEADER + "\n" + "\n".join(rows) + "\n")
    cache_dir = json.dumps(str(cache if cache is not None else folder.parent / "cache"))
    (folder / "geosoil.toml").write_text(
        f'[samples]\nfile = "lab.csv"\ncrs = "{UTM}"\n\n[boundaries]\npaddocks = "paddocks.gpkg"\n'
        f"\n{extra}\n\n[output]\ncache_dir = {cache_dir}\n"
    )
    return folder
