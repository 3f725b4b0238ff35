"""File names for paddocks and products: one distinct, safe name for each.

A paddock's outputs go in a folder named after it and a product's in files named
after it, so two names that make the same file name would write over each other.
:func:`slug` turns a name into a file name (letters and digits of any script kept,
lower case, everything else a dash); :func:`assign` gives every name of a set its
own file name and reports the names that would clash:

* names whose slugs are equal, or equal on a file system that ignores case and
  Unicode normalisation (macOS, Windows): ``Red Hill``, ``red-hill``,
  ``RED  HILL!``;
* names with no letter or digit at all, whose slug is empty (``!!!``, ``--``).

The caller refuses them (the default) or, when the user chooses
``[output] name_clashes = "suffix"``, takes the distinct names given here
(``red-hill``, ``red-hill-2``...; ``paddock-1`` for an empty slug) and says which
name went where.
"""

from __future__ import annotations

import hashlib
import re
import unicodedata
from collections.abc import Sequence
from dataclasses import dataclass, field

__all__ = ["MAX_NAME_CHARS", "slug", "fold", "Assignment", "assign"]

#: Longest paddock or product name accepted: in UTF-8 (up to 3 bytes a character
#: for every script in use) it fits a shapefile text field (254 bytes) and, as a
#: file name, every common file system's 255-byte limit.
MAX_NAME_CHARS = 80

_MAX_SLUG_BYTES = 120
# names Windows keeps for devices, whatever the extension
_RESERVED = {"con", "prn", "aux", "nul", *(f"com{i}" for i in range(1, 10)),
             *(f"lpt{i}" for i in range(1, 10))}


def slug(name: str) -> str:
    """A file-name-safe form of a paddock or product name; empty when it has no letter or digit.

    Letters, marks and digits of every script are kept (in Unicode NFC form, lower
    case); every run of other characters becomes one dash. A slug longer than 120
    bytes in UTF-8 is cut and ends in a short hash of the whole name.

    Parameters
    ----------
    name : str
        A paddock or product name as the user wrote it.

    Returns
    -------
    str
        The slug ("" when ``name`` has no letter or digit).

    Examples
    --------
    >>> slug("North Flat / Dam side")
    'north-flat-dam-side'
    >>> slug("Südhang 2"), slug("Μεγάλο χωράφι"), slug("北の畑")
    ('südhang-2', 'μεγάλο-χωράφι', '北の畑')
    >>> slug("!!!")
    ''
    """
    text = unicodedata.normalize("NFC", str(name))
    kept = "".join(ch if unicodedata.category(ch)[0] in "LMN" else "-" for ch in text)
    s = re.sub(r"-+", "-", kept).strip("-").lower()
    if len(s.encode()) > _MAX_SLUG_BYTES:
        digest = hashlib.sha256(text.encode()).hexdigest()[:8]
        s = s.encode()[: _MAX_SLUG_BYTES - 9].decode(errors="ignore").rstrip("-") + "-" + digest
    if s in _RESERVED:
        s += "-1"
    return s


def fold(file_name: str) -> str:
    """The form under which a case- and normalisation-insensitive file system compares names.

    Parameters
    ----------
    file_name : str
        A file name.

    Returns
    -------
    str
        NFKC-normalised and case-folded.

    Examples
    --------
    >>> fold("Straße") == fold("STRASSE")
    True
    """
    return unicodedata.normalize("NFKC", file_name).casefold()


@dataclass
class Assignment:
    """Distinct file names for a set of names, and the names that clashed."""

    files: dict[str, str] = field(default_factory=dict)
    #: groups of two or more names that make the same file name, with that file name
    clashes: list[tuple[str, list[str]]] = field(default_factory=list)
    #: names with no letter or digit
    empty: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        """True when every name made its own file name without help."""
        return not self.clashes and not self.empty


def assign(names: Sequence[str], *, fallback: str) -> Assignment:
    """Give each name its own file name; list those that clash or have none.

    Names keep their plain slug where it is theirs alone; the second and later
    names of a clashing group get ``-2``, ``-3``... (in the order given), and a
    name without letters or digits gets ``<fallback>-1``, ``<fallback>-2``...
    The file names returned are distinct even on case-insensitive file systems.

    Parameters
    ----------
    names : sequence of str
        Distinct names, in the order the user gave them.
    fallback : str
        The word for a name with no letters or digits ("paddock", "product").

    Returns
    -------
    Assignment
        ``files`` maps every name to its file name.

    Examples
    --------
    >>> a = assign(["Red Hill", "red-hill", "!!", "Creek"], fallback="paddock")
    >>> a.files
    {'Red Hill': 'red-hill', 'red-hill': 'red-hill-2', '!!': 'paddock-1', 'Creek': 'creek'}
    >>> a.clashes, a.empty
    ([('red-hill', ['Red Hill', 'red-hill'])], ['!!'])
    """
    out = Assignment()
    groups: dict[str, list[str]] = {}
    plain: dict[str, str] = {}
    for name in names:
        s = slug(name)
        if not s:
            out.empty.append(name)
            continue
        plain[name] = s
        groups.setdefault(fold(s), []).append(name)
    for members in groups.values():
        if len(members) > 1:
            out.clashes.append((plain[members[0]], list(members)))
    taken: set[str] = set()

    def free(base: str, start: int) -> str:
        k = start
        while True:
            candidate = base if k == 0 else f"{base}-{k}"
            if fold(candidate) not in taken:
                return candidate
            k += 1

    # plain slugs first (the first of each group keeps its own), then the others
    for members in groups.values():
        name = members[0]
        out.files[name] = plain[name]
        taken.add(fold(plain[name]))
    for members in groups.values():
        for name in members[1:]:
            out.files[name] = free(plain[name], 2)
            taken.add(fold(out.files[name]))
    for name in out.empty:
        out.files[name] = free(fallback, 1)
        taken.add(fold(out.files[name]))
    out.files = {name: out.files[name] for name in names}
    return out
