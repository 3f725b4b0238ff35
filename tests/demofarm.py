"""The demo farm for tests: a copy with its own cache folder, and a snapshot of a folder's files.

The demo farm (``demo_farm/``, invented) is run once per test session by the ``demo_run``
fixture in ``tests/conftest.py``; tests that need a changed farm copy it with
:func:`copy_demo`.
"""

from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

from geosoil import demo_farm

DEMO = Path(demo_farm.__file__).parent


def copy_demo(base: Path) -> tuple[Path, Path]:
    """The demo farm copied into ``base/farm``; its cache folder ``base/cache`` (outside it)."""
    farm = base / "farm"
    shutil.copytree(DEMO, farm, ignore=shutil.ignore_patterns("__pycache__", "*.py"))
    cache = base / "cache"
    toml = farm / "geosoil.toml"
    text = toml.read_text(encoding="utf-8")
    line = f"cache_dir = {json.dumps(str(cache))}\n"
    if re.search(r"^\[output\]\s*$", text, flags=re.M):
        text = re.sub(r"^\[output\]\s*$\n?", "[output]\n" + line, text, count=1, flags=re.M)
    else:
        text += "\n[output]\n" + line
    toml.write_text(text, encoding="utf-8")
    return farm, cache



def snapshot(folder: Path) -> dict[str, tuple[bytes, int]]:
    return {
        str(p.relative_to(folder)): (p.read_bytes(), p.stat().st_mtime_ns)
        for p in sorted(folder.rglob("*")) if p.is_file()
    }
