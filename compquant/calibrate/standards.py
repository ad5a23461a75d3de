"""Certified reference materials: loading and validating a standards file.

A standards file lists, for each certified standard (CRM), the certified mass
fraction of each element with its expanded uncertainty ``U`` and coverage
factor ``k``; the standard uncertainty is ``u = U / k`` (GUM, JCGM 100:2008,
6.2/6.3).  CSV columns (docs/architecture.md)::

    standard_id,matrix,element,mass_fraction,expanded_uncertainty,k,unit,source

``unit`` is one of ``%``, ``mg/kg`` (ppm by mass) or ``g/g``; values are
converted to mass fraction g/g on loading.  A TOML form holds the same
information as ``[[standard]]`` tables with an ``[standard.elements.<El>]``
sub-table (``value``, ``U``, ``k``, ``unit``) per element.

Every problem raises :class:`compquant.errors.StandardsError` naming the file,
the row (1-based line number of the CSV file, header = line 1) and the column.
"""

from __future__ import annotations

import csv
import io
import math

import pandas as pd

from compquant.errors import StandardsError
from compquant.fileio import STDIN_NAME, InputBytes, parse_toml, read_input

#: chemical element symbols Z = 1..118 (IUPAC names of the elements; checked
#: against ``periodictable`` in tests)
ELEMENT_SYMBOLS = (
    "H He Li Be B C N O F Ne Na Mg Al Si P S Cl Ar K Ca Sc Ti V Cr Mn Fe Co Ni Cu Zn Ga Ge As "
    "Se Br Kr Rb Sr Y Zr Nb Mo Tc Ru Rh Pd Ag Cd In Sn Sb Te I Xe Cs Ba La Ce Pr Nd Pm Sm Eu "
    "Gd Tb Dy Ho Er Tm Yb Lu Hf Ta W Re Os Ir Pt Au Hg Tl Pb Bi Po At Rn Fr Ra Ac Th Pa U Np "
    "Pu Am Cm Bk Cf Es Fm Md No Lr Rf Db Sg Bh Hs Mt Ds Rg Cn Nh Fl Mc Lv Ts Og"
).split()
_ELEMENTS = frozenset(ELEMENT_SYMBOLS)

#: factor that turns a value in ``unit`` into a mass fraction (g/g)
UNIT_FACTORS = {"%": 1e-2, "mg/kg": 1e-6, "ppm": 1e-6, "g/g": 1.0}

COLUMNS = ("standard_id", "matrix", "element", "mass_fraction", "expanded_uncertainty", "k", "unit", "source")

#: columns of the loaded standards table
TABLE_COLUMNS = ("standard_id", "matrix", "element", "mass_fraction", "u", "U", "k", "source")


def _num(text: str, where: str, column: str, *, positive: bool = False) -> float:
    s = (text or "").strip()
    if s == "":
        raise StandardsError(f"missing value in column '{column}'", where=where, fix="fill in the value (a number)")
    try:
        v = float(s)
    except ValueError:
        raise StandardsError(
            f"'{s}' in column '{column}' is not a number",
            where=where,
            fix="write a plain decimal number such as 0.0125",
        ) from None
    if not math.isfinite(v):
        raise StandardsError(
            f"value {s!r} in column '{column}' is not finite", where=where, fix="write a finite number"
        )
    if positive and v <= 0:
        raise StandardsError(
            f"column '{column}' must be > 0 (got {s})",
            where=where,
            fix="coverage factors are positive, usually k = 2",
        )
    if v < 0:
        raise StandardsError(
            f"negative value {s} in column '{column}'",
            where=where,
            fix="certified mass fractions and uncertainties are >= 0",
        )
    return v


def _record(raw: dict, where_row: str, seen: dict) -> dict:
    sid = str(raw.get("standard_id", "") or "").strip()
    if not sid:
        raise StandardsError(
            "missing value in column 'standard_id'", where=where_row, fix="name the certified standard"
        )
    el = str(raw.get("element", "") or "").strip()
    if not el:
        raise StandardsError(
            "missing value in column 'element'", where=where_row, fix="give the element symbol, e.g. Zn"
        )
    if el not in _ELEMENTS:
        hint = el.capitalize() if el.capitalize() in _ELEMENTS else None
        raise StandardsError(
            f"unknown element '{el}' in column 'element'",
            where=where_row,
            fix=(
                f"did you mean '{hint}'? symbols are case-sensitive"
                if hint
                else "use an element symbol such as Cu, Zn, Pb"
            ),
        )
    unit = str(raw.get("unit", "") or "").strip()
    if unit not in UNIT_FACTORS:
        raise StandardsError(f"bad unit '{unit}' in column 'unit'", where=where_row, fix="use one of %, mg/kg, g/g")
    f = UNIT_FACTORS[unit]
    value = _num(raw.get("mass_fraction"), where_row, "mass_fraction") * f
    U = _num(raw.get("expanded_uncertainty"), where_row, "expanded_uncertainty") * f
    k = _num(raw.get("k"), where_row, "k", positive=True)
    if value > 1.0:
        raise StandardsError(
            f"mass fraction {value:g} g/g is above 1",
            where=where_row,
            fix=f"check the value and its unit ('{unit}')",
        )
    key = (sid, el)
    if key in seen:
        raise StandardsError(
            f"duplicated entry for standard '{sid}', element '{el}' (first at {seen[key]})",
            where=where_row,
            fix="keep one certified value per standard and element",
        )
    seen[key] = where_row
    return {
        "standard_id": sid,
        "matrix": str(raw.get("matrix", "") or "").strip(),
        "element": el,
        "mass_fraction": value,
        "u": U / k,
        "U": U,
        "k": k,
        "source": str(raw.get("source", "") or "").strip(),
    }


def _load_csv(text: str, p: str) -> list[dict]:
    text = text.replace("\r\n", "\n").replace("\r", "\n")  # universal newlines, as a text-mode open reads
    lines = [ln for ln in text.splitlines()]
    reader = csv.reader(io.StringIO(text))
    rows = list(reader)
    # skip leading comment/blank lines, remember physical line numbers
    numbered = [(i + 1, r) for i, r in enumerate(rows)]
    numbered = [(n, r) for n, r in numbered if r and any(c.strip() for c in r) and not r[0].lstrip().startswith("#")]
    if not numbered or len(lines) == 0:
        raise StandardsError(
            "empty standards file",
            where=str(p),
            fix=f"write a header {','.join(COLUMNS)} and one row per element",
        )
    hline, header = numbered[0]
    header = [h.strip() for h in header]
    missing = [c for c in COLUMNS if c not in header]
    if missing:
        raise StandardsError(
            f"missing column(s) {', '.join(missing)}",
            where=f"{p}: line {hline}",
            fix=f"the header must be {','.join(COLUMNS)}",
        )
    unknown = [c for c in header if c not in COLUMNS]
    if unknown:
        raise StandardsError(
            f"unknown column(s) {', '.join(unknown)}",
            where=f"{p}: line {hline}",
            fix=f"the allowed columns are {','.join(COLUMNS)}",
        )
    if len(set(header)) != len(header):
        raise StandardsError("a column name appears twice", where=f"{p}: line {hline}", fix="name each column once")
    out, seen = [], {}
    for n, r in numbered[1:]:
        where = f"{p}: line {n}"
        if len(r) != len(header):
            raise StandardsError(
                f"{len(r)} fields, the header has {len(header)}",
                where=where,
                fix="one value per column; quote fields that contain commas",
            )
        raw = dict(zip(header, r))
        try:
            out.append(_record(raw, where, seen))
        except StandardsError as exc:
            # name the column in 'where' as well
            raise exc
    return out


def _load_toml(text: str, p: str) -> list[dict]:
    data = parse_toml(text, p, StandardsError)
    stds = data.get("standard")
    if not isinstance(stds, list) or not stds:
        raise StandardsError(
            "no [[standard]] tables", where=str(p), fix="write one [[standard]] table per certified standard"
        )
    out, seen = [], {}
    for i, s in enumerate(stds, 1):
        where = f"{p}: [[standard]] #{i}"
        if not isinstance(s, dict):
            raise StandardsError("expected a table", where=where, fix="see docs/calibration.md")
        bad = sorted(set(s) - {"id", "matrix", "source", "elements"})
        if bad:
            raise StandardsError(
                f"unknown key(s) {', '.join(bad)}",
                where=where,
                fix="allowed keys are id, matrix, source, elements",
            )
        els = s.get("elements")
        if not isinstance(els, dict) or not els:
            raise StandardsError(
                "missing [standard.elements] table",
                where=where,
                fix="add e.g. elements.Zn = {value = 1.2, U = 0.05, k = 2, unit = '%'}",
            )
        for el, spec in els.items():
            w = f"{where} element {el}"
            if not isinstance(spec, dict):
                raise StandardsError(
                    "expected a table {value, U, k, unit}",
                    where=w,
                    fix="write elements.Zn = {value = 1.2, U = 0.05, k = 2, unit = '%'}",
                )
            bad = sorted(set(spec) - {"value", "U", "k", "unit", "source"})
            if bad:
                raise StandardsError(
                    f"unknown key(s) {', '.join(bad)}",
                    where=w,
                    fix="allowed keys are value, U, k, unit, source",
                )
            raw = {
                "standard_id": s.get("id", ""),
                "matrix": s.get("matrix", ""),
                "element": el,
                "mass_fraction": "" if spec.get("value") is None else str(spec.get("value")),
                "expanded_uncertainty": "" if spec.get("U") is None else str(spec.get("U")),
                "k": "" if spec.get("k") is None else str(spec.get("k")),
                "unit": spec.get("unit", ""),
                "source": spec.get("source", s.get("source", "")),
            }
            out.append(_record(raw, w, seen))
    return out


def _is_toml(src: InputBytes, text: str) -> bool:
    """A ``.toml`` file, or text from standard input whose first line that is neither blank nor
    a comment opens a table (``[[standard]]``); a CSV file starts with its header."""
    if src.path is not None:
        return src.suffix == ".toml"
    for ln in text.splitlines():
        s = ln.strip()
        if s and not s.startswith("#"):
            return s.startswith("[")
    return False


def load_standards(path) -> pd.DataFrame:
    """Load and validate a certified-standards file (``.csv`` or ``.toml``).

    Values in ``%``, ``mg/kg`` or ``g/g`` are converted to mass fraction g/g, and the standard
    uncertainty is ``u = U / k`` from the certified expanded uncertainty ``U`` and coverage
    factor ``k`` (JCGM 100:2008, 6.2/6.3; module docstring for the CSV and TOML layouts).

    Parameters
    ----------
    path : str, path-like or InputBytes
        The file; ``-`` reads the table from standard input
        (:func:`compquant.fileio.read_stdin`: refused when it is a terminal or empty, bounded in
        size); an :class:`compquant.fileio.InputBytes` is a table already read (from a file or
        standard input). Text from standard input is TOML when its first line that is neither
        blank nor a comment opens a table (``[[standard]]``), CSV otherwise. Files and standard
        input are limited to :data:`compquant.fileio.MAX_TABLE_BYTES`.

    Returns
    -------
    DataFrame
        Columns ``standard_id, matrix, element, mass_fraction (g/g), u (standard uncertainty,
        g/g), U (expanded, g/g), k, source``; ``df.attrs`` holds ``path`` (the path, or
        ``<stdin>``), ``name`` (the file name provenance records, ``<stdin>`` for standard
        input) and ``sha256`` of the bytes read.

    Raises
    ------
    StandardsError
        For: unknown element, missing value, negative value, mass fraction above 1, duplicated
        (standard, element) entry, bad unit, ``k <= 0``, malformed rows; the message names the
        file, the row (1-based line number of the CSV file, header = line 1) and the column.

    See Also
    --------
    calibrate : fits the curves to these certified values.
    quantify : compares the check samples with them.

    References
    ----------
    .. [1] JCGM 100:2008, Evaluation of measurement data -- Guide to the expression of uncertainty
       in measurement (GUM), 6.2-6.3 (``u = U / k``).
    .. [2] RFC 4180, Common Format and MIME Type for Comma-Separated Values (CSV) Files; TOML
       v1.0.0 specification (https://toml.io/en/v1.0.0).
    .. [3] FIPS 180-4, Secure Hash Standard (SHA-256 of the bytes read, ``df.attrs["sha256"]``).
    .. [4] compquant documentation: docs/calibration.md (standards file), docs/architecture.md.

    Examples
    --------
    >>> from compquant import load_standards
    >>> df = load_standards("standards/demo-copper-alloys.csv")
    >>> row = df.iloc[0]
    >>> print(row.standard_id, row.element, row.mass_fraction, row.u, row.U, row.k)
    HRM-CA-101 Cu 0.6114 0.0006 0.0012 2.0
    """
    src = read_input(path, "standards file", error=StandardsError)
    text = src.text(StandardsError, "standards file")
    recs = _load_toml(text, src.where) if _is_toml(src, text) else _load_csv(text, src.where)
    if not recs:
        raise StandardsError("no certified values in file", where=src.where, fix="add one row per standard and element")
    df = pd.DataFrame.from_records(recs, columns=list(TABLE_COLUMNS))
    df.attrs["path"] = str(src.path) if src.path is not None else STDIN_NAME
    df.attrs["name"] = src.name
    df.attrs["sha256"] = src.sha256
    return df


def certified(standards: pd.DataFrame, standard_id: str, element: str) -> tuple[float, float] | None:
    """``(mass_fraction, u)`` of ``element`` in ``standard_id``, or None if not certified."""
    m = standards[(standards["standard_id"] == standard_id) & (standards["element"] == element)]
    if m.empty:
        return None
    r = m.iloc[0]
    return float(r["mass_fraction"]), float(r["u"])


__all__ = ["ELEMENT_SYMBOLS", "UNIT_FACTORS", "load_standards", "certified"]
