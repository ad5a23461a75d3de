"""The results contract: one declared column set for calibrated and calibration-free results.

Every route to a composition -- calibration curves (:func:`compquant.calibrate.quantify`,
basis ``"calibration"``), PLS models (basis ``"pls"``) and calibration-free analysis
(:func:`compquant.cflibs.analyse_cf`, basis ``"cf"``) -- gives one row per (sample, element)
with the columns declared once here in :data:`COLUMNS` (name, dtype, unit, meaning).  The
twelve :data:`CORE_COLUMNS` are what every route states; :data:`RESULT_COLUMNS` adds the
sample's ``role`` and the effective degrees of freedom ``dof`` that the calibrated route knows
(the calibration-free route leaves them empty in :func:`to_frame`).

Uncertainties follow the GUM: ``u`` is the standard uncertainty, ``U = k u`` the expanded one
(``k = 2``, or Student's t for the effective degrees of freedom by Welch-Satterthwaite when the
method asks for it).  Detection limits follow IUPAC practice (LOD = 3 s / slope, LOQ = 10 s / slope).

Result objects (:class:`compquant.calibrate.QuantifyResult`, :class:`compquant.cflibs.CFResult`,
:class:`compquant.analyse.AnalysisOutput`) give the rows as ``to_frame()`` and a plain-text table
as ``summary()``, in the manner of statsmodels' results classes.

References
----------
.. [1] JCGM 100:2008, Evaluation of measurement data -- Guide to the expression of uncertainty in
   measurement (GUM), 6.2 (expanded uncertainty) and G.4 (Welch-Satterthwaite).
.. [2] IUPAC, Compendium of Analytical Nomenclature (Orange Book), 3rd ed. 1998, 18.4.3.7
   (limit of detection).
"""

from __future__ import annotations

import math
from dataclasses import dataclass


@dataclass(frozen=True)
class Column:
    """One column of the results table."""

    name: str
    dtype: str  # pandas dtype: "object" (text), "float64", "bool"
    unit: str  # "" for text and pure numbers
    meaning: str


#: the declared column set, in table order
COLUMNS: tuple[Column, ...] = (
    Column("sample_id", "object", "", "sample id as in the run"),
    Column("element", "object", "", "element symbol"),
    Column("mass_fraction", "float64", "g/g", "mass fraction; NaN when not determined"),
    Column("u", "float64", "g/g", "standard uncertainty of the mass fraction"),
    Column("U", "float64", "g/g", "expanded uncertainty U = k u"),
    Column("k", "float64", "", "coverage factor"),
    Column("lod", "float64", "g/g", "limit of detection (NaN: not defined, e.g. calibration-free)"),
    Column("loq", "float64", "g/g", "limit of quantification (NaN: not defined)"),
    Column("below_lod", "bool", "", "mass fraction below the LOD (the estimate is kept; reports print < LOD)"),
    Column("flags", "object", "", "';'-joined flags of the result and its lines (docs/certificate.md)"),
    Column("basis", "object", "", "route: 'calibration', 'pls' or 'cf'"),
    Column("line_id", "object", "", "line(s) the result rests on (';'-joined for calibration-free)"),
    Column("role", "object", "", "the sample's role in the run (calibrated route; '' when not known)"),
    Column("dof", "float64", "", "effective degrees of freedom of u (calibrated route; NaN when not known)"),
)
#: every column, in order (the calibrated route's table)
RESULT_COLUMNS: list[str] = [c.name for c in COLUMNS]
#: the columns every route states (the calibration-free route's ``results_table()``)
CORE_COLUMNS: list[str] = RESULT_COLUMNS[:12]
#: the routes (values of ``basis``)
BASES: tuple[str, ...] = ("calibration", "pls", "cf")
_BY_NAME = {c.name: c for c in COLUMNS}


def column(name: str) -> Column:
    """The declaration of one column (``KeyError`` for a name outside the contract)."""
    return _BY_NAME[name]


def empty_frame(columns=None):
    """An empty results table with the declared dtypes (``columns``: a subset, default all)."""
    import pandas as pd

    names = list(columns or RESULT_COLUMNS)
    return pd.DataFrame({n: pd.Series(dtype=_BY_NAME[n].dtype) for n in names}, columns=names)


def to_frame(table, columns=None):
    """``table`` (a results DataFrame of any route) as the full contract: declared columns, order
    and dtypes; missing ``role`` becomes ``""`` and missing ``dof`` NaN.  The input is not changed."""
    import pandas as pd

    names = list(columns or RESULT_COLUMNS)
    if table is None or len(table) == 0:
        return empty_frame(names)
    out = pd.DataFrame(index=range(len(table)))
    src = table.reset_index(drop=True)
    for n in names:
        col = _BY_NAME[n]
        if n in src.columns:
            values = src[n]
        else:
            values = pd.Series([_missing(col)] * len(src))
        if col.dtype == "bool":
            values = values.fillna(False).astype(bool)
        elif col.dtype == "float64":
            values = pd.to_numeric(values, errors="coerce").astype("float64")
        else:  # text as object dtype under pandas 2 and 3 alike
            values = pd.Series([str(v) for v in values.fillna("")], dtype=object)
        out[n] = pd.Series(values.to_numpy(), dtype=col.dtype)
    return out


def _missing(col: Column):
    return "" if col.dtype == "object" else (False if col.dtype == "bool" else math.nan)


def _percent(x) -> str:
    try:
        v = float(x)
    except (TypeError, ValueError):
        return "-"
    return "-" if not math.isfinite(v) else f"{100.0 * v:.4g}"


def summary_text(frame, title: str, info: dict | None = None) -> str:
    """A plain-text summary: a header of ``info`` items, then one line per result (mass fraction and
    U in %, k, flags), in the manner of statsmodels' ``summary()``."""
    info = dict(info or {})
    info.setdefault("results", len(frame))
    width = 78
    lines = ["=" * width, title.center(width).rstrip(), "=" * width]
    lines += [f"{k + ':':<24}{v}" for k, v in info.items()]
    lines.append("-" * width)
    head = f"{'sample':<16}{'element':<8}{'w / %':>10}{'U / %':>10}{'k':>6}  {'basis':<12}flags"
    lines.append(head)
    lines.append("-" * width)
    for r in frame.itertuples(index=False):
        w = "< LOD" if bool(getattr(r, "below_lod", False)) else _percent(r.mass_fraction)
        k = "-" if not (isinstance(r.k, float) and math.isfinite(r.k)) else f"{r.k:.2f}"
        lines.append(f"{str(r.sample_id)[:15]:<16}{str(r.element):<8}{w:>10}{_percent(r.U):>10}{k:>6}  "
                     f"{str(r.basis):<12}{r.flags or ''}")
    lines.append("=" * width)
    lines.append("mass fractions in %; U = k u (GUM); flags: docs/certificate.md")
    return "\n".join(lines)


__all__ = [
    "BASES",
    "COLUMNS",
    "CORE_COLUMNS",
    "Column",
    "RESULT_COLUMNS",
    "column",
    "empty_frame",
    "summary_text",
    "to_frame",
]
