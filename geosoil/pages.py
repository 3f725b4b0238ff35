"""The page templates (``geosoil/templates``): one jinja2 environment per kind of page.

Parsing and compiling the report's templates takes about a tenth of a second, on
every run. jinja2 can keep the compiled form of a template (its *bytecode cache*)
and take it back while the template's source is unchanged; geosoil keeps it in
the user's own cache folder (``<user cache>/geosoil/templates``, the folder
:func:`geosoil.cache.default_folder` names), the same trust as Python's own
``__pycache__``: compiled code that the user's account wrote. So it is never kept
in a project's ``[output] cache_dir`` (a folder that may come with a project from
someone else), and a folder that other users can write to, or that this user does
not own, is not used. Without a usable folder, the templates are compiled in
memory as before (slower, the same pages).

An entry is found by the template's name and checked against a checksum of its
source, and is kept apart per jinja2 version, per environment kind and per
Python version (jinja2's own check), so a changed template or an upgrade never
takes an old entry.
"""

from __future__ import annotations

import functools
import logging
import os
import stat
from pathlib import Path
from typing import Any

__all__ = ["environment", "template_cache_folder"]

logger = logging.getLogger(__name__)

#: jinja2 options of each kind of page.
_OPTIONS: dict[str, dict[str, Any]] = {
    # the report, the change and plan reports: blocks on their own lines leave no blank lines
    "report": {"trim_blocks": True, "lstrip_blocks": True},
    # the web map: its script and styles are placed as written
    "map": {"keep_trailing_newline": True},
}


def template_cache_folder() -> Path:
    """Where compiled templates are kept: ``templates`` in the user's geosoil cache folder.

    Returns
    -------
    Path
        ``$XDG_CACHE_HOME/geosoil/templates`` when that is set on Linux; the
        platform's usual user cache folder elsewhere.
    """
    import platformdirs

    return Path(platformdirs.user_cache_dir("geosoil", appauthor=False)) / "templates"


def _usable(folder: Path) -> bool:
    """Make ``folder`` and its parent (mode 0700) and say whether compiled code may be
    loaded from it: directories this user owns that no other user can write to."""
    try:
        folder.parent.parent.mkdir(parents=True, exist_ok=True)
        for f in (folder.parent, folder):
            f.mkdir(mode=0o700, exist_ok=True)
        stats = [f.lstat() for f in (folder.parent, folder)]
    except OSError as exc:
        logger.debug("no template cache in %s: %s", folder, exc)
        return False
    uid = os.getuid() if hasattr(os, "getuid") else None
    return all(stat.S_ISDIR(st.st_mode) and (uid is None or st.st_uid == uid)
               and not st.st_mode & (stat.S_IWGRP | stat.S_IWOTH) for st in stats)


@functools.cache
def environment(kind: str) -> Any:
    """The jinja2 environment of one kind of page (``"report"`` or ``"map"``).

    Autoescaping is on for ``.html`` templates. Compiled templates are kept in
    :func:`template_cache_folder` when that folder is usable (see the module's
    text).

    Parameters
    ----------
    kind : str
        ``"report"`` (the report, change and plan reports) or ``"map"``.

    Returns
    -------
    jinja2.Environment
        One per kind for the life of the process.
    """
    import jinja2

    bcc = None
    folder = template_cache_folder() / f"{kind}-jinja2-{jinja2.__version__}"
    if _usable(folder):
        bcc = jinja2.FileSystemBytecodeCache(str(folder))
    return jinja2.Environment(
        loader=jinja2.PackageLoader("geosoil", "templates"),
        autoescape=jinja2.select_autoescape(["html"]),
        bytecode_cache=bcc,
        **_OPTIONS[kind],
    )
