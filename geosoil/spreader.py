"""The spreader model: what a machine can put out for a required rate.

One job: turn a required rate (kg/ha, per cell or per zone) into what the
spreader actually applies. Rates below the machine's minimum become 0; larger
rates are split into the fewest equal passes (or seasons) of at most
``max_per_pass``, each rounded to the machine's rate step and kept within the
spreadable step-multiples. :mod:`geosoil.rates` works out the required rates,
:mod:`geosoil.zones` applies this model to each zone.

Rates are advisory: have them checked by a qualified agronomist before
spreading.
"""

from __future__ import annotations

import dataclasses
import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .errors import RateWarning, SettingsError
from .products import _check_declared
from .settings import setting
from .units import RATE_UNITS, format_rate, rate_from_kg_ha, rate_to_kg_ha

__all__ = [
    "SPREADER_CEILING_KG_HA",
    "COMMON_MAX_PER_PASS_KG_HA",
    "SpreaderSettings",
    "unsplit_pass_warning",
    "split_passes",
    "spreader_passes",
    "apply_spreader_limits",
    "pass_schedule",
]


def _kg_ha(value: float, unit: str) -> float:
    """A scalar rate in ``unit`` as kg/ha."""
    return float(np.asarray(rate_to_kg_ha(value, unit)))


#: Largest spreader rate accepted for any setting: 100 t/ha. Field spreaders of lime and
#: gypsum are set in single t/ha to tens of t/ha (common practice); a figure above this is
#: a typo or a unit mix-up, refused before anything is computed.
SPREADER_CEILING_KG_HA = 100_000.0

#: Most lime or gypsum spread in one pass, kg/ha: about 5 t/ha (common practice, from
#: memory: larger rates are split over passes or seasons so that the product is spread
#: evenly, works into the soil and can be re-tested between; see the cautions). ``geosoil new``
#: writes it for each product (``[spreader] max_per_pass_by_product``); a run with no
#: per-pass limit for a product warns where a zone's single pass is above it.
COMMON_MAX_PER_PASS_KG_HA = 5_000.0


@dataclass(frozen=True)
class SpreaderSettings:
    """What the spreader can do. Rates below are in ``unit``.

    Examples
    --------
    >>> sp = SpreaderSettings(unit="t/ha", min_rate=0.5, max_per_pass=2.5, rate_step=0.25)
    >>> sp.max_per_pass_kg_ha
    2500.0
    """

    unit: str = setting("kg/ha", doc="unit of the rates below", choices=RATE_UNITS)
    min_rate: float = setting(
        0.0, doc="smallest rate the spreader can put out; lower rates become 0", minimum=0.0
    )
    max_per_pass: float = setting(
        0.0, doc="largest rate in one pass (0: no limit); more is split into equal passes",
        minimum=0.0,
    )
    max_per_pass_by_product: dict[str, float] = setting(
        default_factory=dict,
        doc="largest rate in one pass of a product, by its name in [products] (0: none; "
        "'geosoil new' writes 5000 kg/ha each, common practice); the smaller of it and "
        "max_per_pass applies",
    )
    rate_step: float = setting(
        0.0, doc="the machine's rate step; each pass is rounded to it (0: no rounding)", minimum=0.0
    )
    rounding: str = setting(
        "nearest", doc="rounding to the rate step", choices=("nearest", "up", "down")
    )
    split_into: str = setting(
        "passes",
        doc="large rates are split into 'passes' in one season or 'seasons' (one pass a year, "
        "re-testing between)",
        choices=("passes", "seasons"),
    )

    def __post_init__(self) -> None:
        _check_declared(self)
        values = [(key, getattr(self, key)) for key in ("min_rate", "max_per_pass", "rate_step")]
        values += [(f"max_per_pass_by_product.{name}", value)
                   for name, value in self.max_per_pass_by_product.items()]
        for key, value in values:
            if not (math.isfinite(value) and value >= 0):
                raise SettingsError(f"must be 0 or more (got {value:g})", key=key)
            kg_ha = _kg_ha(value, self.unit)
            if kg_ha > SPREADER_CEILING_KG_HA:
                raise SettingsError(
                    f"{value:g} {self.unit} is beyond what any spreader puts out "
                    f"(at most {SPREADER_CEILING_KG_HA / 1000:g} t/ha in one pass); give the "
                    "machine's figure in [spreader] unit",
                    key=key,
                )
        for name in self.max_per_pass_by_product:
            try:
                self.for_product(name)
            except SettingsError as exc:  # min_rate or rate_step above the product's limit
                raise SettingsError(f"for product '{name}': {exc.bare_message}",
                                    key=f"max_per_pass_by_product.{name}") from None
        if self.max_per_pass > 0:
            if self.min_rate > self.max_per_pass:
                raise SettingsError(
                    f"min_rate {self.min_rate:g} is above max_per_pass {self.max_per_pass:g}",
                    key="min_rate",
                )
            if self.rate_step > self.max_per_pass:
                raise SettingsError(
                    f"rate_step {self.rate_step:g} is above max_per_pass {self.max_per_pass:g}",
                    key="rate_step",
                )
            if self.rate_step > 0 and self._low_grid() > self._high_grid() + 1e-9:
                raise SettingsError(
                    f"no multiple of rate_step {self.rate_step:g} lies between min_rate "
                    f"{self.min_rate:g} and max_per_pass {self.max_per_pass:g}",
                    key="rate_step",
                )

    def _low_grid(self) -> float:
        if self.rate_step <= 0:
            return self.min_rate
        return math.ceil(self.min_rate / self.rate_step - 1e-9) * self.rate_step

    def _high_grid(self) -> float:
        if self.rate_step <= 0:
            return self.max_per_pass
        return math.floor(self.max_per_pass / self.rate_step + 1e-9) * self.rate_step

    def for_product(self, product: str) -> SpreaderSettings:
        """The limits that apply to ``product``: ``max_per_pass`` is the smaller of the
        spreader's and the product's own (``max_per_pass_by_product``), 0 meaning none.

        Examples
        --------
        >>> sp = SpreaderSettings(unit="t/ha", max_per_pass_by_product={"gypsum": 5.0})
        >>> sp.for_product("gypsum").max_per_pass, sp.for_product("lime").max_per_pass
        (5.0, 0.0)
        """
        own = self.max_per_pass_by_product.get(product, 0.0)
        limits = [v for v in (self.max_per_pass, own) if v > 0]
        return dataclasses.replace(self, max_per_pass=min(limits) if limits else 0.0,
                                   max_per_pass_by_product={})

    @property
    def min_rate_kg_ha(self) -> float:
        """Smallest spreadable rate, kg/ha."""
        return _kg_ha(self.min_rate, self.unit)

    @property
    def max_per_pass_kg_ha(self) -> float:
        """Largest rate per pass, kg/ha (0: no limit)."""
        return _kg_ha(self.max_per_pass, self.unit)

    @property
    def rate_step_kg_ha(self) -> float:
        """Rate step, kg/ha (0: none)."""
        return _kg_ha(self.rate_step, self.unit)


def unsplit_pass_warning(
    rates_kg_ha: Sequence[float], zones: Sequence[object], *, spreader: SpreaderSettings,
    paddock: str, product: str, rate_unit: str = "kg/ha",
) -> str | None:
    """The warning for zones whose whole rate goes on in one pass above
    :data:`COMMON_MAX_PER_PASS_KG_HA` because no per-pass limit applies to ``product``;
    None when a limit applies or no zone is above it. Rates are never changed here: an
    existing project keeps its rates until its owner sets a limit.

    Parameters
    ----------
    rates_kg_ha, zones
        Each zone's rate (kg/ha, one pass) and its number.
    spreader
        The project's spreader settings (its limits for ``product`` are looked up).
    paddock, product
        Named in the message.
    rate_unit
        Unit of the rates in the message.

    Examples
    --------
    >>> print(unsplit_pass_warning([9800.0, 1200.0], [1, 2], spreader=SpreaderSettings(),
    ...                            paddock="Red Hill", product="gypsum", rate_unit="t/ha"))
    ... # doctest: +NORMALIZE_WHITESPACE
    paddock 'Red Hill', gypsum: zone(s) 1 get up to 9.8 t/ha in a single pass, above the
    5.0 t/ha commonly spread in one pass (common practice), because no per-pass limit is set:
    set [spreader] max_per_pass_by_product.gypsum (or max_per_pass) to your spreader's
    figure to split it into passes
    """
    if spreader.for_product(product).max_per_pass > 0:
        return None
    above = [(float(r), z) for r, z in zip(rates_kg_ha, zones, strict=True)
             if math.isfinite(r) and r > COMMON_MAX_PER_PASS_KG_HA]
    if not above:
        return None
    top = max(r for r, _ in above)
    names = ", ".join(str(z) for _, z in above)
    return (f"paddock '{paddock}', {product}: zone(s) {names} get up to "
            f"{format_rate(top, rate_unit)} in a single pass, above the "
            f"{format_rate(COMMON_MAX_PER_PASS_KG_HA, rate_unit)} commonly spread in one pass "
            "(common practice), because no per-pass limit is set: set [spreader] "
            f"max_per_pass_by_product.{product} (or max_per_pass) to your spreader's figure "
            "to split it into passes")


def split_passes(rate: ArrayLike, max_per_pass: float) -> tuple[Any, Any]:
    """Split a rate into the fewest equal passes of at most ``max_per_pass``.

    Works per cell (arrays) or per zone (scalars), in any one unit.

    Parameters
    ----------
    rate
        Rate(s) to split.
    max_per_pass
        Largest rate per pass, same unit; 0 or less means no limit.

    Returns
    -------
    n_passes, per_pass
        ``n_passes = ceil(rate / max_per_pass)`` (0 where the rate is 0 or NaN)
        and ``per_pass = rate / n_passes`` (NaN where the rate is NaN).

    Examples
    --------
    >>> split_passes(6000.0, 2500.0)
    (3, 2000.0)
    >>> split_passes(5000.0, 2500.0)
    (2, 2500.0)
    """
    r = np.asarray(rate, dtype=float)
    pos = np.where(np.isnan(r), 0.0, np.maximum(r, 0.0))
    if max_per_pass > 0:
        n = np.ceil(pos / max_per_pass - 1e-9)
        n = np.where(pos > 0, np.maximum(n, 1.0), 0.0)
    else:
        n = np.where(pos > 0, 1.0, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        per = np.where(n > 0, pos / np.where(n > 0, n, 1.0), 0.0)
    per = np.where(np.isnan(r), np.nan, per)
    n_int = n.astype(np.int64)
    if r.ndim == 0:
        return int(n_int), float(per)
    return n_int, per


def spreader_passes(rate_kg_ha: ArrayLike, spreader: SpreaderSettings) -> tuple[Any, Any]:
    """Passes and rate per pass (kg/ha) the spreader puts out for a required rate.

    Below the minimum spreadable rate: 0 passes. Otherwise the fewest equal
    passes of at most ``max_per_pass``, each rounded to the rate step and kept
    within the smallest and largest step-multiples in ``[min_rate, max_per_pass]``.

    Parameters
    ----------
    rate_kg_ha : array_like
        Required rate, kg/ha.
    spreader : SpreaderSettings
        The spreader's limits.

    Returns
    -------
    passes : int or ndarray of int64
        Number of passes (0 where nothing is spread).
    per_pass : float or ndarray
        Rate per pass, kg/ha.

    Examples
    --------
    >>> sp = SpreaderSettings(unit="t/ha", min_rate=0.5, max_per_pass=2.5, rate_step=0.25)
    >>> spreader_passes(6100.0, sp)
    (3, 2000.0)
    """
    r = np.asarray(rate_kg_ha, dtype=float)
    lo, hi, step = spreader.min_rate_kg_ha, spreader.max_per_pass_kg_ha, spreader.rate_step_kg_ha
    keep = np.where(np.isnan(r), False, r >= lo) & (np.nan_to_num(r) > 0)
    n, per = split_passes(np.where(keep, r, 0.0), hi)
    per = np.asarray(per, dtype=float)
    if step > 0:
        x = per / step
        if spreader.rounding == "nearest":
            q = np.floor(x + 0.5)
        elif spreader.rounding == "up":
            q = np.ceil(x - 1e-9)
        else:
            q = np.floor(x + 1e-9)
        per = q * step
    # keep each pass within the smallest and largest spreadable (step-multiple) rates
    low_grid = _kg_ha(spreader._low_grid(), spreader.unit)
    per = np.where(np.asarray(n) > 0, np.maximum(per, low_grid), 0.0)
    if hi > 0:
        per = np.minimum(per, _kg_ha(spreader._high_grid(), spreader.unit))
    n = np.where(per > 0, n, 0)
    per = np.where(np.isnan(r), np.nan, per)
    if r.ndim == 0:
        return int(n), float(per)
    return np.asarray(n, dtype=np.int64), per


def apply_spreader_limits(
    rate_kg_ha: NDArray[np.float64], spreader: SpreaderSettings
) -> NDArray[np.float64]:
    """The rate the spreader actually puts out, kg/ha (all passes together).

    Rates below ``min_rate`` become 0; larger rates are split into equal passes
    of at most ``max_per_pass``, each rounded to ``rate_step``; the result is
    passes x rate per pass. NaN stays NaN.

    Warns
    -----
    RateWarning
        Counting the cells set to 0 below the minimum and the cells split
        into several passes (or seasons).

    Parameters
    ----------
    rate_kg_ha : ndarray of float64
        Required rate per cell, kg/ha.
    spreader : SpreaderSettings
        The spreader's limits.

    Returns
    -------
    ndarray of float64
        Rate spread per cell, kg/ha.

    Examples
    --------
    >>> import numpy as np
    >>> sp = SpreaderSettings(min_rate=200, max_per_pass=2500, rate_step=100)
    >>> import warnings
    >>> with warnings.catch_warnings():
    ...     warnings.simplefilter("ignore")
    ...     apply_spreader_limits(np.array([150.0, 1234.0, 6100.0, np.nan]), sp)
    array([   0., 1200., 6000.,   nan])
    """
    r = np.asarray(rate_kg_ha, dtype=float)
    n, per = spreader_passes(r, spreader)
    out = np.where(np.isnan(r), np.nan, np.asarray(n, dtype=float) * per)
    lo = spreader.min_rate_kg_ha
    below = int(np.count_nonzero((r > 0) & (r < lo)))
    split = int(np.count_nonzero(np.asarray(n) > 1))
    if below:
        warnings.warn(
            f"{below} cell(s) need less than the spreader's minimum rate "
            f"{rate_from_kg_ha(lo, spreader.unit):g} {spreader.unit}: set to 0",
            RateWarning,
            stacklevel=2,
        )
    if split:
        warnings.warn(
            f"{split} cell(s) need more than {spreader.max_per_pass:g} {spreader.unit} per pass: "
            f"split into equal {spreader.split_into}",
            RateWarning,
            stacklevel=2,
        )
    return out


def pass_schedule(passes: int, per_pass_kg_ha: float, spreader: SpreaderSettings, *,
                  unit: str | None = None) -> str:
    """How a rate split by :func:`spreader_passes` is put on, in the spreader's unit
    (or ``unit``: the run shows it in ``[output] rate_unit``, as every table).

    ``"3 passes of 0.75 t/ha"`` when ``split_into = "passes"``; ``"2 seasons of
    2.0 t/ha"`` when ``split_into = "seasons"`` (one application a year,
    re-testing the soil between). Empty for one pass or none.

    Parameters
    ----------
    passes : int
        Number of passes.
    per_pass_kg_ha : float
        Rate per pass, kg/ha.
    spreader : SpreaderSettings
        The spreader's limits.
    unit : str, optional
        The rate unit of the text (one of ``kg/ha``, ``t/ha``, ``lb/ac``); default the
        spreader's.

    Returns
    -------
    str
        Such as ``"2 seasons of 2.0 t/ha"``; empty for one pass.

    Examples
    --------
    >>> sp = SpreaderSettings(unit="t/ha", max_per_pass=2.5, split_into="seasons")
    >>> n, per = spreader_passes(4000.0, sp)
    >>> pass_schedule(n, per, sp)
    '2 seasons of 2.0 t/ha'
    >>> pass_schedule(1, 2000.0, sp)
    ''
    >>> pass_schedule(n, per, sp, unit="lb/ac")
    '2 seasons of 1,784 lb/ac'
    """
    if passes <= 1:
        return ""
    shown = spreader.unit if unit is None else unit
    return f"{passes} {spreader.split_into} of {format_rate(per_pass_kg_ha, shown)}"
