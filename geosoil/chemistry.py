"""Soil chemistry of each sample: ECEC, saturations, ESP, sodicity and acidity.

All amounts are exchangeable, in cmol(+)/kg (see :mod:`geosoil.units`);
saturations are percent of the ECEC. Pure and vectorised: the functions take
numpy arrays (or anything array-like) and :func:`derive` takes and returns a
DataFrame with the canonical analyte columns (``ca``, ``mg``, ``k``, ``na``,
``al``, ``h``, ``acidity``, ``cec``, ``ph``, ``sar``).

ECEC
    The sum of exchangeable Ca, Mg, K, Na and exchangeable acidity (Al + H).
    Where acidity was not measured and the sample's pH is at or above
    ``neutral_ph`` (7.0), acidity counts as 0 (common practice: exchangeable
    acidity is negligible in neutral and alkaline soils). Where the sum cannot
    be formed, a lab-supplied CEC (column ``cec``) is used and the basis is
    recorded in ``ecec_basis``.
ESP
    Exchangeable Na as percent of the ECEC; where Na is missing but SAR is
    given, estimated by the USDA Handbook 60 relation (Richards 1954, pp. 25-26)
    ESR = -0.0126 + 0.01475 SAR, ESP = 100 ESR / (1 + ESR), and flagged in
    ``esp_estimated``.
Sodicity
    ESP >= 6 sodic, >= 15 strongly sodic (Northcote & Skene 1972; Australian
    Soil Classification, Isbell 1996). The US convention (USDA Handbook 60) is
    ESP >= 15 for a sodic soil: set ``sodic_esp_percent = 15``.

Examples
--------
>>> import pandas as pd
>>> soil = pd.DataFrame({"ca": [8.0], "mg": [3.0], "k": [0.5], "na": [1.5], "acidity": [0.0]})
>>> out = derive(soil)
>>> float(out.ecec.iloc[0]), float(out.esp.iloc[0]), out.sodicity.iloc[0]
(13.0, 11.538461538461538, 'sodic')
"""

from __future__ import annotations

import dataclasses
import logging
import os
import warnings
from collections.abc import Mapping

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from .errors import DataWarning, InputError, SettingsError
from .settings import setting

__all__ = [
    "ChemistrySettings",
    "DERIVED",
    "ecec_from_parts",
    "saturation",
    "esp_from_sar",
    "sodicity_class",
    "derive",
]

logger = logging.getLogger(__name__)

#: Columns :func:`derive` adds (plus ``acid_reason``, why ``acid_flag`` is set).
DERIVED: tuple[str, ...] = (
    "ecec",
    "ecec_basis",
    "ca_sat",
    "mg_sat",
    "k_sat",
    "na_sat",
    "esp",
    "esp_estimated",
    "acid_sat",
    "al_sat",
    "base_sat",
    "ca_mg_ratio",
    "sodicity",
    "acid_flag",
    "acid_reason",
)

_BASES = ("ca", "mg", "k", "na")
_NAMES = {"ca": "Ca", "mg": "Mg", "k": "K", "na": "Na", "acidity": "acidity (Al + H)"}


@dataclasses.dataclass(frozen=True)
class ChemistrySettings:
    """Thresholds for the sodicity class and the acidity flag.

    Defaults: sodicity from Northcote & Skene (1972); the acidity thresholds
    are common practice (no single published source) and are meant to be set
    for the crop and the region.
    """

    sodic_esp_percent: float = setting(
        6.0,
        doc="ESP at or above which a sample is sodic (Northcote & Skene 1972)",
        unit="%",
        minimum=0.0,
        maximum=100.0,
    )
    strongly_sodic_esp_percent: float = setting(
        15.0,
        doc="ESP at or above which a sample is strongly sodic (Northcote & Skene 1972)",
        unit="%",
        minimum=0.0,
        maximum=100.0,
    )
    acid_ph: float = setting(
        5.5,
        doc="pH in water (1:5) below which a sample is flagged acid (common practice)",
        minimum=2.0,
        maximum=9.0,
    )
    acid_ph_cacl2: float = setting(
        4.8,
        doc="the same threshold when the lab gave pH in CaCl2 only (common practice: pH in "
        "CaCl2 reads about 0.5-0.8 below pH in water)",
        minimum=2.0,
        maximum=9.0,
    )
    acid_saturation_percent: float = setting(
        15.0,
        doc="acid (Al + H) saturation of the ECEC above which a sample is flagged acid "
        "(common practice: sensitive crops suffer from about 10-20 %)",
        unit="%",
        minimum=0.0,
        maximum=100.0,
    )
    neutral_ph: float = setting(
        7.0,
        doc="pH at or above which unmeasured exchangeable acidity counts as 0 in the ECEC "
        "(common practice; compared with whichever pH the lab gave)",
        minimum=5.0,
        maximum=9.0,
    )

    def __post_init__(self) -> None:
        if self.strongly_sodic_esp_percent < self.sodic_esp_percent:
            raise SettingsError(
                f"must be at least sodic_esp_percent ({self.sodic_esp_percent:g} %)",
                key="strongly_sodic_esp_percent",
            )
        if self.acid_ph >= self.neutral_ph:
            raise SettingsError(
                f"must be below neutral_ph ({self.neutral_ph:g})", key="acid_ph"
            )


def ecec_from_parts(
    ca: ArrayLike, mg: ArrayLike, k: ArrayLike, na: ArrayLike, acidity: ArrayLike
) -> NDArray[np.float64]:
    """ECEC as the sum of exchangeable cations and acidity, cmol(+)/kg.

    A missing part (NaN) gives a NaN ECEC; :func:`derive` decides what to do then.

    Parameters
    ----------
    ca, mg, k, na, acidity : array_like
        Exchangeable amounts, cmol(+)/kg.

    Returns
    -------
    ndarray of float64
        ECEC, cmol(+)/kg (NaN where a part is missing).

    Examples
    --------
    >>> float(ecec_from_parts(8.0, 3.0, 0.5, 1.5, 2.0)[()])
    15.0
    """
    parts = [np.asarray(v, dtype=float) for v in (ca, mg, k, na, acidity)]
    return parts[0] + parts[1] + parts[2] + parts[3] + parts[4]


def saturation(part: ArrayLike, ecec: ArrayLike) -> NDArray[np.float64]:
    """``part`` as percent of ``ecec``; NaN where the ECEC is missing or not positive.

    Parameters
    ----------
    part : array_like
        Exchangeable amount, cmol(+)/kg.
    ecec : array_like
        ECEC, cmol(+)/kg.

    Returns
    -------
    ndarray of float64
        Percent of the ECEC.

    Examples
    --------
    >>> saturation([1.5, 1.0], [13.0, 0.0]).round(3).tolist()
    [11.538, nan]
    """
    p = np.asarray(part, dtype=float)
    e = np.asarray(ecec, dtype=float)
    p, e = np.broadcast_arrays(p, e)
    ok = np.isfinite(e) & (e > 0)
    out = np.full(p.shape, np.nan)
    np.divide(100.0 * p, e, out=out, where=ok)
    return out


def esp_from_sar(sar: ArrayLike) -> NDArray[np.float64]:
    """ESP estimated from SAR (USDA Handbook 60, Richards 1954, pp. 25-26).

    ESR = -0.0126 + 0.01475 SAR; ESP = 100 ESR / (1 + ESR). Below SAR 0.854
    the relation gives a negative ESR; the ESP is then 0.

    Parameters
    ----------
    sar : array_like
        Sodium adsorption ratio, (mmol/L)^0.5.

    Returns
    -------
    ndarray of float64
        Estimated ESP, %.

    Examples
    --------
    >>> esp_from_sar([5.0, 10.0, 0.0]).round(3).tolist()
    [5.763, 11.887, 0.0]
    """
    s = np.asarray(sar, dtype=float)
    esr = np.maximum(-0.0126 + 0.01475 * s, 0.0)
    return 100.0 * esr / (1.0 + esr)


def sodicity_class(
    esp: ArrayLike, settings: ChemistrySettings | None = None
) -> NDArray[np.str_]:
    """Sodicity class of each ESP: "non-sodic", "sodic", "strongly sodic" ("unknown" for NaN).

    Parameters
    ----------
    esp : array_like
        ESP, %.
    settings : ChemistrySettings, optional
        The class limits (default: :class:`ChemistrySettings` defaults).

    Returns
    -------
    ndarray of str
        One class per value.

    Examples
    --------
    >>> sodicity_class([2.0, 6.0, 15.0, float("nan")]).tolist()
    ['non-sodic', 'sodic', 'strongly sodic', 'unknown']
    """
    s = settings or ChemistrySettings()
    e = np.asarray(esp, dtype=float)
    return np.select(
        [~np.isfinite(e), e >= s.strongly_sodic_esp_percent, e >= s.sodic_esp_percent],
        ["unknown", "strongly sodic", "sodic"],
        default="non-sodic",
    )


def _column(samples: pd.DataFrame, name: str) -> NDArray[np.float64]:
    if name in samples.columns:
        return pd.to_numeric(samples[name], errors="coerce").to_numpy(dtype=float)
    return np.full(len(samples), np.nan)


def _acidity(samples: pd.DataFrame) -> NDArray[np.float64]:
    """Exchangeable acidity: the ``acidity`` column, else Al + H (whichever were measured)."""
    acidity = _column(samples, "acidity")
    al = _column(samples, "al")
    h = _column(samples, "h")
    parts = np.where(np.isfinite(al), al, 0.0) + np.where(np.isfinite(h), h, 0.0)
    from_parts = np.where(np.isfinite(al) | np.isfinite(h), parts, np.nan)
    return np.where(np.isfinite(acidity), acidity, from_parts)


def derive(
    samples: pd.DataFrame,
    settings: ChemistrySettings | None = None,
    *,
    file: str | os.PathLike[str] | None = None,
    headers: Mapping[str, str] | None = None,
    ph_method: str | None = None,
    on_bad_row: str = "stop",
) -> pd.DataFrame:
    """Add ECEC, saturations, ESP, sodicity and the acidity flag to each sample.

    Parameters
    ----------
    samples
        Canonical analyte columns in cmol(+)/kg (absent columns count as not
        measured); ``source_row`` and ``sample_id`` are used in messages.
    settings
        Thresholds; defaults when None.
    file, headers
        The samples file and analyte -> lab header, to name them in messages.
    ph_method
        How the ``ph`` column was measured: "water" (or None) compares it with
        ``acid_ph``; "CaCl2" with ``acid_ph_cacl2``.
    on_bad_row
        "stop": a sample whose ECEC cannot be formed raises :class:`InputError`.
        "skip": its ECEC and saturations are left empty (``ecec_basis`` "none")
        with a :class:`DataWarning`; its measured values stay.

    Returns
    -------
    DataFrame
        A copy of ``samples`` with the columns in :data:`DERIVED`:
        ``ecec`` (cmol(+)/kg), ``ecec_basis`` ("sum of cations" | "lab CEC"),
        ``ca_sat``, ``mg_sat``, ``k_sat``, ``na_sat``, ``acid_sat`` (Al + H),
        ``al_sat``, ``base_sat`` (Ca + Mg + K + Na), all percent of ECEC;
        ``esp`` (``na_sat``, or from SAR), ``esp_estimated`` (bool),
        ``ca_mg_ratio`` (charge basis; NaN where Mg is 0), ``sodicity``
        (see :func:`sodicity_class`), ``acid_flag`` (bool) and ``acid_reason``
        (text, "" when not flagged). A NaN pH or acid saturation does not set the flag.
        ``attrs["ecec_gaps"]`` lists the (row, problem) of the samples whose ECEC was
        left empty (``on_bad_row="skip"``), so a caller can report them as problems.

    Raises
    ------
    InputError
        A sample lacks a part the ECEC needs and has no lab CEC (``on_bad_row="stop"``);
        the message names the file, row and column.

    Examples
    --------
    >>> import pandas as pd
    >>> s = pd.DataFrame({"ca": [2.0], "mg": [1.0], "k": [0.2], "na": [0.3],
    ...                   "al": [1.0], "h": [0.5], "ph": [4.6]})
    >>> row = derive(s).iloc[0]
    >>> float(row.ecec), float(row.acid_sat), bool(row.acid_flag), row.acid_reason
    (5.0, 30.0, True, 'pH 4.6 below 5.5; acid saturation 30.0 % above 15 %')
    """
    s = settings or ChemistrySettings()
    if ph_method not in (None, "water", "CaCl2"):
        raise SettingsError(
            f"'{ph_method}' is not allowed; use 'water' or 'CaCl2'", key="ph_method"
        )
    if on_bad_row not in ("stop", "skip"):
        raise SettingsError(
            f"'{on_bad_row}' is not allowed; use 'stop' or 'skip'", key="on_bad_row"
        )
    headers = headers or {}
    ca, mg, k, na = (_column(samples, a) for a in _BASES)
    al = _column(samples, "al")
    ph = _column(samples, "ph")
    sar = _column(samples, "sar")
    lab_cec = _column(samples, "cec")
    acidity = _acidity(samples)
    neutral = np.isfinite(ph) & (ph >= s.neutral_ph)
    acidity_used = np.where(np.isfinite(acidity), acidity, np.where(neutral, 0.0, np.nan))

    summed = ecec_from_parts(ca, mg, k, na, acidity_used)
    use_sum = np.isfinite(summed) & (summed > 0)
    use_lab = ~use_sum & np.isfinite(lab_cec) & (lab_cec > 0)
    ecec = np.where(use_sum, summed, np.where(use_lab, lab_cec, np.nan))
    bad = ~use_sum & ~use_lab
    no_cations = not any(np.isfinite(v).any() for v in (ca, mg, k, na, lab_cec))
    if no_cations and len(samples):
        # a file of pH (or Al) alone: it still gives surfaces for what it has
        warnings.warn(
            f"{file or 'samples'}: no exchangeable cations and no CEC in the file, so no ECEC, "
            "saturations or ESP; rules that need them are skipped",
            DataWarning,
            stacklevel=2,
        )
    gaps: list[tuple[int | None, str]] = []
    if not no_cations and bad.any():
        gaps = _report_ecec_gaps(
            samples, bad, parts={"ca": ca, "mg": mg, "k": k, "na": na, "acidity": acidity_used},
            neutral_ph=s.neutral_ph, file=file, headers=headers,
            on_bad_row=on_bad_row,
        )

    out = samples.copy()
    out.attrs["ecec_gaps"] = gaps
    out["ecec"] = ecec
    out["ecec_basis"] = np.select([use_sum, use_lab], ["sum of cations", "lab CEC"], "none")
    for name, part in (("ca", ca), ("mg", mg), ("k", k), ("na", na)):
        out[f"{name}_sat"] = saturation(part, ecec)
    esp_measured = out["na_sat"].to_numpy()
    esp_sar = esp_from_sar(sar)
    estimated = ~np.isfinite(esp_measured) & np.isfinite(esp_sar)
    esp = np.where(np.isfinite(esp_measured), esp_measured, esp_sar)
    out["esp"] = esp
    out["esp_estimated"] = estimated
    acid_sat = saturation(acidity_used, ecec)
    out["acid_sat"] = acid_sat
    out["al_sat"] = saturation(al, ecec)
    out["base_sat"] = saturation(ca + mg + k + na, ecec)
    ratio = np.full(len(out), np.nan)
    with np.errstate(over="ignore"):
        np.divide(ca, mg, out=ratio, where=np.isfinite(mg) & (mg > 0))
    out["ca_mg_ratio"] = ratio
    out["sodicity"] = sodicity_class(esp, s)

    ph_limit = s.acid_ph_cacl2 if ph_method == "CaCl2" else s.acid_ph
    low_ph = np.isfinite(ph) & (ph < ph_limit)
    high_acid = np.isfinite(acid_sat) & (acid_sat > s.acid_saturation_percent)
    out["acid_flag"] = low_ph | high_acid
    method = " (CaCl2)" if ph_method == "CaCl2" else ""
    reasons = []
    for p, a, lp, ha in zip(ph, acid_sat, low_ph, high_acid, strict=True):
        why = []
        if lp:
            why.append(f"pH{method} {p:g} below {ph_limit:g}")
        if ha:
            why.append(f"acid saturation {a:.1f} % above {s.acid_saturation_percent:g} %")
        reasons.append("; ".join(why))
    out["acid_reason"] = reasons
    logger.debug("derived chemistry for %d samples (%d from SAR)", len(out), int(estimated.sum()))
    return out


def _header_of(analyte: str, headers: Mapping[str, str]) -> str:
    """The lab's header of ``analyte``; for acidity, its Al and H headers when it came from them."""
    if analyte == "acidity" and "acidity" not in headers:
        parts = [headers[a] for a in ("al", "h") if a in headers]
        if parts:
            return ", ".join(parts)
    return headers.get(analyte, analyte)


def _report_ecec_gaps(
    samples: pd.DataFrame,
    bad: NDArray[np.bool_],
    *,
    parts: Mapping[str, NDArray[np.float64]],
    neutral_ph: float,
    file: str | os.PathLike[str] | None,
    headers: Mapping[str, str],
    on_bad_row: str,
) -> list[tuple[int | None, str]]:
    """Raise (or warn, for "skip") naming the samples whose ECEC cannot be formed.

    Returns the (row, problem) of each such sample when they are skipped.
    """
    rows = samples["source_row"].to_numpy() if "source_row" in samples.columns else None
    ids = samples["sample_id"].to_numpy() if "sample_id" in samples.columns else None
    problems = []
    for i in np.flatnonzero(bad):
        missing = [a for a in parts if not np.isfinite(parts[a][i])]
        if missing:
            names = ", ".join(_NAMES[a] for a in missing)
            problem = f"the ECEC needs exchangeable {names}, which this sample lacks"
            if "acidity" in missing:
                problem += f" (acidity counts as 0 only at pH {neutral_ph:g} or above)"
            problem += ", and there is no lab CEC to use instead"
        else:
            problem = "the ECEC is 0 and there is no lab CEC to use instead"
        if ids is not None:
            problem = f"sample '{ids[i]}': {problem}"
        columns = ", ".join(_header_of(a, headers) for a in missing) or None
        row = None if rows is None else int(rows[i])
        problems.append((row, columns, problem))
    fix = (
        "give the missing values (or map their columns in [samples.columns]), or give a lab "
        "CEC column, or set on_bad_row = 'skip' to leave these samples' ECEC empty"
    )
    if on_bad_row == "stop":
        row, columns, problem = problems[0]
        more = len(problems) - 1
        if more:
            problem += f" ({more} more sample{'s' if more > 1 else ''} likewise)"
        raise InputError(problem, file=file, row=row, column=columns, fix=fix)
    listed = "; ".join(
        f"row {r}: {p}" if r is not None else p for r, _c, p in problems
    )
    warnings.warn(
        f"{file or 'samples'}: ECEC left empty for {len(problems)} sample(s): {listed}",
        DataWarning,
        stacklevel=3,
    )
    return [(r, p) for r, _c, p in problems]
