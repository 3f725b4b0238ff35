"""The import graph drawn from the code: no loops, and no import that runs up the layers
DEVELOPERS.md shows (pure core at the bottom; I/O and presentation above it, neither importing
the other; orchestration above them; the command line on top, imported by nothing)."""

from __future__ import annotations

import ast
import functools
from pathlib import Path

import geosoil

PACKAGE = Path(geosoil.__file__).parent

#: Each module of geosoil/ and its layer (DEVELOPERS.md, "Layers"); a new module goes here.
CORE = {"errors", "settings", "units", "names", "layers", "recording", "chemistry", "columns",
        "cellops",
        "salinity", "grids", "crs", "points", "variogram", "kriging", "model_choice",
        "surfaces", "sampling", "change", "products", "liming", "rates", "spreader", "zones",
        "tonnage", "prescriptions"}
IO = {"project", "cache", "record", "outfolder", "writers", "isoxml", "gpkg", "samples",
      "boundaries", "covariates", "vectors"}
PRESENTATION = {"presentation", "pages", "webmap", "report"}
ORCHESTRATION = {"pipeline", "outputs", "job", "explain", "plan", "compare", "batch"}
LAYER = {**dict.fromkeys(CORE, 0), **dict.fromkeys(IO, 1), **dict.fromkeys(PRESENTATION, 1),
         **dict.fromkeys(ORCHESTRATION, 2)}


def _imports(path: Path) -> set[str]:
    """The geosoil modules (and ``cli``) a module imports, at the top or inside a function
    (not those under ``if TYPE_CHECKING:``, which name types for annotations only)."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    typing_only = {id(n) for block in ast.walk(tree) if isinstance(block, ast.If)
                   and ast.unparse(block.test).endswith("TYPE_CHECKING")
                   for n in ast.walk(block)}
    found: set[str] = set()
    for node in ast.walk(tree):
        if id(node) in typing_only:
            continue
        if isinstance(node, ast.ImportFrom):
            if node.level == 1:
                names = [node.module] if node.module else [a.name for a in node.names]
            elif node.module == "geosoil":
                names = [a.name for a in node.names]
            elif node.module and node.module.startswith("geosoil."):
                names = [node.module.split(".")[1]]
            else:
                names = []
            found.update(n.split(".")[0] for n in names)
        elif isinstance(node, ast.Import):
            found.update(a.name.split(".")[1] for a in node.names
                         if a.name.startswith("geosoil."))
    return found


@functools.cache  # parsed once for the module's tests
def _graph() -> dict[str, set[str]]:
    modules = {p.stem for p in PACKAGE.glob("*.py")} - {"__init__"}
    return {m: (_imports(PACKAGE / f"{m}.py") & (modules | {"cli", "demo_farm"})) - {m}
            for m in modules}


def test_every_module_has_a_layer() -> None:
    graph = _graph()
    assert set(graph) == set(LAYER)
    # the reader sees relative, absolute and function-level imports (job's, at the top)
    assert {"pipeline", "outputs", "outfolder"} <= graph["job"]


def test_no_import_runs_up_the_layers_and_the_library_never_imports_the_cli() -> None:
    up = [(m, t) for m, targets in _graph().items() for t in targets
          if t in ("cli", "demo_farm") or LAYER[t] > LAYER[m]]
    assert up == []
    across = [(m, t) for m, targets in _graph().items() for t in targets
              if {m, t} & IO and {m, t} & PRESENTATION and not {m, t} <= IO
              and not {m, t} <= PRESENTATION]
    assert across == []  # I/O and presentation do not import each other


def test_no_import_loops() -> None:
    graph = _graph()
    state: dict[str, int] = {}  # 1 on the path, 2 done (depth-first search for a back edge)

    def visit(m: str, path: list[str]) -> list[str] | None:
        state[m] = 1
        for t in sorted(graph[m]):
            if state.get(t) == 1:
                return [*path, m, t]
            if t not in state and (loop := visit(t, [*path, m])):
                return loop
        state[m] = 2
        return None

    loops = [loop for m in sorted(graph) if m not in state and (loop := visit(m, []))]
    assert loops == []
