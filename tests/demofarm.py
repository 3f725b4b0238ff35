"""The demo farm for tests: a copy with its own cache folder, and a snapshot of a folder's files.

The demo farm (``demo_farm/``, invented) is run once per test session by the ``demo_run``
fixture in ``tests/conftest.py``; tests that need a changed farm copy it with
:func:`copy_demo` (with the session's cache, ``session_cache``, when their change leaves
the surfaces as they are, so they are taken from the cache instead of kriged again).
"""

from __future__ import annotations

import json
import re
import shutil
import tomllib
from pathlib import Path
from typing import Any

import tomli_w

from geosoil import demo_farm

DEMO = Path(demo_farm.__file__).parent


def copy_demo(base: Path, *, cache: Path | None = None,
              changes: dict[str, dict[str, Any]] | None = None) -> tuple[Path, Path]:
    """The demo farm copied into ``base/farm``, and its cache folder.

    The cache folder is ``cache`` when given (the session's, ``session_cache``), else
    ``base/cache``; either is outside the farm. ``changes`` maps a dotted table of the
    project file to the keys to set in it (the file is then rewritten without its comments).
    """
    farm = base / "farm"
    shutil.copytree(DEMO, farm, ignore=shutil.ignore_patterns("__pycache__", "*.py"))
    cache = cache if cache is not None else base / "cache"
    toml = farm / "geosoil.toml"
    text = toml.read_text(encoding="utf-8")
    if changes:
        data = tomllib.loads(text)
        data.setdefault("output", {})["cache_dir"] = str(cache)
        for dotted, values in changes.items():
            table = data
            for part in dotted.split("."):
                table = table.setdefault(part, {})
            table.update(values)
        toml.write_text(tomli_w.dumps(data), encoding="utf-8")
        return farm, cache
    line = f"cache_dir = {json.dumps(str(cache))}\n"
    if re.search(r"^\[output\]\s*$", text, flags=re.M):
        text = re.sub(r"^\[output\]\s*$\n?", "[output]\n" + line, text, count=1, flags=re.M)
    else:
        text += "\n[output]\n" + line
    toml.write_text(text, encoding="utf-8")
    return farm, cache


def snapshot(folder: Path) -> dict[str, tuple[bytes, int]]:
    """Every file under ``folder`` (Python's byte-code caches apart): bytes and mtime."""
    return {
        str(p.relative_to(folder)): (p.read_bytes(), p.stat().st_mtime_ns)
        for p in sorted(folder.rglob("*")) if p.is_file() and "__pycache__" not in p.parts
    }
