"""Sampling depths: reading a lab's depth, the layers of a file and the part of each
layer a treatment spans (pure).

A lab writes the depth of a sample as one range ("0-10", "10-30 cm", "10 to 30",
"0.1-0.3 m") or as two numbers (top and bottom columns). Samples with the same
top and bottom form one *layer*; a file with one layer is read as it always was
(one layer of soil, the treated depth of ``[soil] depth_m``). With several
layers, the shallowest (the *top layer*) keeps the plain surface names and
everything the rules read but gypsum; each deeper layer has its own surfaces and
classes, named with the layer's suffix (``esp_10-30cm``).

The gypsum requirement of a treated depth is the sum of the layers' requirements
over the part of the treated depth each stands for (:func:`spans`): a layer stands
for the soil from its top to the next layer's top (a gap between sampled layers is
given to the layer above it), the top layer from the surface, and the deepest
layer down to the treated depth when that goes below it. Layers that overlap
(0-10 and 0-15) are refused: which sample stands for the soil at 5 cm would be a
guess.

Examples
--------
>>> parse_depth("10 to 30 cm")
(10.0, 30.0)
>>> parse_depth("0.1-0.3", unit="m")
(10.0, 30.0)
>>> [f"{s.layer.label}: {s.from_cm:g}-{s.to_cm:g}" for s in
...  spans([Layer(0, 10), Layer(10, 30)], treat_cm=20)]
['0-10 cm: 0-10', '10-30 cm: 10-20']
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass

__all__ = [
    "DEPTH_UNITS",
    "Layer",
    "Span",
    "parse_depth",
    "depth_unit_of",
    "find_layers",
    "spans",
    "depth_role",
]

#: Centimetres per unit of a depth (exact: 1 in = 2.54 cm by definition).
DEPTH_UNITS: dict[str, float] = {"cm": 1.0, "mm": 0.1, "m": 100.0, "in": 2.54}

_UNIT_WORDS = {"cm": "cm", "centimetres": "cm", "centimeters": "cm", "mm": "mm", "m": "m",
               "metres": "m", "meters": "m", "in": "in", "inch": "in", "inches": "in",
               '"': "in"}
_NUMBER = r"(\d+(?:[.,]\d+)?)"
_UNIT = r"\s*(cm|mm|m|in|inch|inches|\")?"
_RANGE = re.compile(
    rf"^\s*{_NUMBER}{_UNIT}\s*(?:-|–|—|to|until|bis|a|à)\s*{_NUMBER}{_UNIT}\s*$",
    re.IGNORECASE,
)


@dataclass(frozen=True, order=True)
class Layer:
    """A sampled layer, top and bottom in centimetres below the surface."""

    top_cm: float
    bottom_cm: float

    @property
    def label(self) -> str:
        """As a person writes it: ``"10-30 cm"``."""
        return f"{self.top_cm:g}-{self.bottom_cm:g} cm"

    @property
    def key(self) -> str:
        """As a setting names it: ``"10-30"``."""
        return f"{self.top_cm:g}-{self.bottom_cm:g}"

    @property
    def suffix(self) -> str:
        """Appended to the names of a deeper layer's surfaces and files: ``"_10-30cm"``."""
        return f"_{self.key}cm"

    @property
    def thickness_cm(self) -> float:
        return self.bottom_cm - self.top_cm


@dataclass(frozen=True)
class Span:
    """The part of the treated depth one layer stands for, cm below the surface."""

    layer: Layer
    from_cm: float
    to_cm: float

    @property
    def thickness_m(self) -> float:
        return (self.to_cm - self.from_cm) / 100.0


def _number(text: str) -> float:
    return float(text.replace(",", "."))


def depth_unit_of(header: str) -> str | None:
    """The unit a depth header names in brackets or as its last word, or None.

    >>> depth_unit_of("Depth (cm)"), depth_unit_of("Top depth m"), depth_unit_of("Depth")
    ('cm', 'm', None)
    """
    text = header.strip().lower()
    m = re.search(r"[(\[]\s*([a-z\"]+)\s*[)\]]", text)
    word = m.group(1) if m else (text.split()[-1] if text.split() else "")
    return _UNIT_WORDS.get(word)


def parse_depth(text: object, *, unit: str = "cm") -> tuple[float, float]:
    """Top and bottom (cm) of a depth range as a lab writes it.

    Parameters
    ----------
    text
        The cell: ``"0-10"``, ``"0 - 10 cm"``, ``"10 to 30"``, ``"0.1-0.3 m"``,
        ``"0–10"`` (en dash).
    unit
        Unit of numbers that name none (``cm``, ``mm``, ``m``, ``in``).

    Raises
    ------
    ValueError
        Text that is not a range of two depths, or a bottom not below the top;
        the message says what a depth should look like.

    >>> parse_depth("0-10"), parse_depth("0–10 cm"), parse_depth("0-4 in")
    ((0.0, 10.0), (0.0, 10.0), (0.0, 10.16))
    """
    raw = "" if text is None else str(text)
    m = _RANGE.match(raw)
    if not m:
        raise ValueError(
            f"'{raw}' is not a depth range such as '0-10', '10-30 cm' or '10 to 30'"
        )
    u_top = _UNIT_WORDS.get((m.group(2) or "").lower())
    u_bottom = _UNIT_WORDS.get((m.group(4) or "").lower())
    u_bottom = u_bottom or unit
    u_top = u_top or u_bottom
    top = round(_number(m.group(1)) * DEPTH_UNITS[u_top], 6)
    bottom = round(_number(m.group(3)) * DEPTH_UNITS[u_bottom], 6)
    return check_depths(top, bottom)


def check_depths(top: float, bottom: float) -> tuple[float, float]:
    """Top and bottom (cm), checked: both at or below the surface, bottom below top.

    >>> check_depths(10, 30)
    (10.0, 30.0)
    """
    top, bottom = float(top), float(bottom)
    if not (top == top and bottom == bottom) or top < 0 or bottom <= top:
        raise ValueError(
            f"a depth from {top:g} to {bottom:g} cm is not a layer (the bottom must be below "
            "the top, both at or below the surface)"
        )
    if bottom > 1000:
        raise ValueError(f"a bottom {bottom:g} cm below the surface is not a soil sample "
                         "(is the unit right?)")
    return top, bottom


def find_layers(pairs: Sequence[tuple[float, float]]) -> list[Layer]:
    """The distinct layers of ``(top_cm, bottom_cm)`` pairs, shallowest first.

    Raises
    ------
    ValueError
        Two layers overlap (naming both).

    >>> [l.label for l in find_layers([(10, 30), (0, 10), (0, 10)])]
    ['0-10 cm', '10-30 cm']
    """
    layers = sorted({Layer(float(t), float(b)) for t, b in pairs})
    for a, b in zip(layers, layers[1:], strict=False):
        if b.top_cm < a.bottom_cm:
            raise ValueError(
                f"layers {a.label} and {b.label} overlap: each depth of soil must be "
                "sampled in one layer"
            )
    return layers


def spans(layers: Sequence[Layer], *, treat_cm: float) -> list[Span]:
    """What each layer stands for within the treated depth ``0 - treat_cm``.

    A layer stands for the soil from its top (the surface for the first) to the next
    layer's top; the deepest one down to ``treat_cm`` when that lies below it. Layers
    wholly below the treated depth are left out; a layer cut by it counts pro rata.

    >>> [(s.from_cm, s.to_cm) for s in spans([Layer(0, 10), Layer(10, 30)], treat_cm=45)]
    [(0.0, 10.0), (10.0, 45.0)]
    >>> [(s.from_cm, s.to_cm) for s in spans([Layer(0, 10), Layer(20, 30)], treat_cm=30)]
    [(0.0, 20.0), (20.0, 30.0)]
    """
    out: list[Span] = []
    ordered = sorted(layers)
    for i, layer in enumerate(ordered):
        start = 0.0 if i == 0 else layer.top_cm
        end = ordered[i + 1].top_cm if i + 1 < len(ordered) else max(layer.bottom_cm, treat_cm)
        start, end = min(start, treat_cm), min(end, treat_cm)
        if end > start:
            out.append(Span(layer, float(start), float(end)))
    return out


_RANGE_WORDS = ("depth", "layer", "horizon", "interval", "sampling depth", "sample depth",
                "depth range", "depth (cm)")
_TOP_WORDS = ("top", "upper", "from", "start", "min")
_BOTTOM_WORDS = ("bottom", "lower", "to", "end", "max", "base")


def depth_role(header: str) -> str | None:
    """``"range"``, ``"top"`` or ``"bottom"`` for a depth header, else None.

    >>> [depth_role(h) for h in ("Depth (cm)", "Depth from (cm)", "Lower depth", "Top (cm)",
    ...                          "Sample ID", "Bottom depth m")]
    ['range', 'top', 'bottom', 'top', None, 'bottom']
    """
    text = re.sub(r"[(\[][^)\]]*[)\]]", " ", header.lower())
    words = re.findall(r"[a-z]+", text)
    if not words:
        return None
    has_depth = "depth" in words or "depths" in words
    top = any(w in _TOP_WORDS for w in words)
    bottom = any(w in _BOTTOM_WORDS for w in words)
    if top != bottom and (has_depth or len(words) == 1):
        if len(words) == 1 and words[0] not in ("top", "bottom", "upper", "lower"):
            return None
        return "top" if top else "bottom"
    if has_depth and not top and not bottom and len(words) <= 3:
        return "range"
    if words in (["layer"], ["horizon"], ["sampling", "interval"]):
        return "range"
    return None
