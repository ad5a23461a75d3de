"""The emission-line list: loading, validation, selection, Aki accuracy grades.

Columns of a line-list CSV (shipped ``compquant/data/atomic/lines.csv.gz``, built by
``scripts/build_atomic_data.py`` from published compilations, or the user's own file):

=================== ======= ==========================================================
column              unit    meaning
=================== ======= ==========================================================
element                     chemical symbol, e.g. ``Cu``
ion                         1 = neutral (``Cu I``), 2 = singly ionised, 3 = doubly ionised
wavelength_nm       nm      wavelength in standard air (Morton 2000 refractive index)
aki                 s^-1    transition probability (Einstein A) upper k -> lower i
aki_grade                   NIST ASD accuracy letter: AAA AA A+ A B+ B C+ C D+ D E
ei_ev, ek_ev        eV      lower and upper level energies above the ground state
gi, gk                      statistical weights 2J+1 of the lower and upper levels
stark_w_nm          nm      Stark FWHM at ``stark_ne_ref_cm3`` and ``stark_t_ref_k``
stark_shift_nm      nm      Stark shift at the same conditions (+ = to the red)
stark_ne_ref_cm3    cm^-3   electron density the Stark data refer to
stark_t_ref_k       K       electron temperature the Stark data refer to
stark_ne_exponent           optional: width ~ ne**exponent (1 for isolated lines,
                            ~0.68 for the hydrogen Balmer lines); default 1
source                      where the row comes from
=================== ======= ==========================================================

Optional columns, always present in what :func:`load_line_list` returns:
``aki_unc_rel`` (the relative bound of Aki the grade implies, :data:`AKI_GRADES`),
``grade_basis`` (why the row has its grade) and ``wavelength_unc_nm``.

Stark cells are empty where unknown.  :func:`load_line_list` adds ``species``
(``"Cu I"``) and ``line_id`` (``"Cu I 324.754"``, 3 decimals), the contract of
``docs/architecture.md``.  For the lines of the list shipped until 2026-12 whose published
wavelength rounds differently, the former id is kept (``line_id_aliases.csv``, e.g.
``Cu I 510.554`` for 510.5548 nm); :func:`find_line` resolves any id within 0.0025 nm.
"""

from __future__ import annotations

import functools
import os
from pathlib import Path

import numpy as np
import pandas as pd

from compquant.atomic.elements import _data_dir, _fail, _read_csv, known_symbols, parse_species, species_name
from compquant.errors import AtomicDataError

__all__ = [
    "LINE_COLUMNS",
    "AKI_GRADES",
    "load_line_list",
    "lines_for",
    "find_line",
    "aki_relative_uncertainty",
    "aki_standard_uncertainty",
    "LINE_ID_TOLERANCE_NM",
]

LINE_COLUMNS = (
    "element",
    "ion",
    "wavelength_nm",
    "aki",
    "aki_grade",
    "ei_ev",
    "ek_ev",
    "gi",
    "gk",
    "stark_w_nm",
    "stark_shift_nm",
    "stark_ne_ref_cm3",
    "stark_t_ref_k",
    "source",
)
OPTIONAL_COLUMNS = ("stark_ne_exponent", "aki_unc_rel", "grade_basis", "wavelength_unc_nm")
#: stages the shipped list holds; :func:`load_line_list` returns I and II unless asked
ALL_STAGES = (1, 2, 3)
#: a line id resolves to the nearest line of its species within this distance (nm)
LINE_ID_TOLERANCE_NM = 0.0025
_ROMAN = {1: "I", 2: "II", 3: "III"}
_REQUIRED_NUMERIC = ("wavelength_nm", "aki", "ei_ev", "ek_ev", "gi", "gk")
_OPTIONAL_NUMERIC = ("stark_w_nm", "stark_shift_nm", "stark_ne_ref_cm3", "stark_t_ref_k", "stark_ne_exponent")

#: NIST ASD accuracy grades of transition probabilities -> upper bound of the
#: relative uncertainty of Aki (from memory of the NIST ASD documentation,
#: "Accuracy of transition probabilities"; E means "> 50 %").
AKI_GRADES: dict[str, float] = {
    "AAA": 0.003,
    "AA": 0.01,
    "A+": 0.02,
    "A": 0.03,
    "B+": 0.07,
    "B": 0.10,
    "C+": 0.18,
    "C": 0.25,
    "D+": 0.40,
    "D": 0.50,
    "E": 1.00,
}


def aki_relative_uncertainty(grade: str) -> float:
    """Upper bound of the relative uncertainty of Aki for a NIST accuracy grade.

    AAA <= 0.3 %, AA <= 1 %, A+ <= 2 %, A <= 3 %, B+ <= 7 %, B <= 10 %,
    C+ <= 18 %, C <= 25 %, D+ <= 40 %, D <= 50 %, E > 50 % (returned as 1.0,
    i.e. 100 %).  From memory of the NIST ASD documentation.

    This is a *bound*, not a standard uncertainty; see
    :func:`aki_standard_uncertainty` for the convention compquant uses.
    """
    g = str(grade).strip().upper()
    if g not in AKI_GRADES:
        raise AtomicDataError(
            f"unknown Aki accuracy grade {grade!r}",
            where="aki_grade",
            fix=f"use one of {' '.join(AKI_GRADES)}",
        )
    return AKI_GRADES[g]


def aki_standard_uncertainty(grade):
    """Relative *standard* uncertainty of Aki for grade(s): bound / sqrt(3).

    Convention: the NIST bound is read as the half-width of a rectangular
    distribution (GUM, JCGM 100:2008, 4.3.7), so ``u = bound / sqrt(3)``.  For
    grade E (no upper bound) the 100 % used as bound gives u = 58 %.  Accepts a
    single grade or an array-like of grades (returns a numpy array).
    """
    if isinstance(grade, str):
        return aki_relative_uncertainty(grade) / np.sqrt(3.0)
    return np.array([aki_relative_uncertainty(g) for g in grade]) / np.sqrt(3.0)


def _read_line_list(path: Path) -> pd.DataFrame:
    raw = _read_csv(path, "line list", LINE_COLUMNS)
    ln = raw.attrs["file_lines"]
    if len(raw) == 0:
        raise AtomicDataError("the line list has no rows", where=str(path), fix="add lines")
    out = pd.DataFrame(index=range(len(raw)))
    symbols = known_symbols()
    # file line number of data row i: header is line 1
    for i, el in enumerate(raw["element"]):
        if el not in symbols:
            _fail(
                path,
                ln[i],
                "element",
                f"unknown element {el!r}",
                "use a chemical symbol with Z = 1..92, e.g. Cu",
            )
    out["element"] = raw["element"].to_numpy()
    ion = np.empty(len(raw), dtype=int)
    for i, v in enumerate(raw["ion"]):
        if v not in ("1", "2", "3"):
            _fail(
                path,
                ln[i],
                "ion",
                f"ion stage {v!r} must be 1 (neutral), 2 (singly) or 3 (doubly ionised)",
                "write 1, 2 or 3",
            )
        ion[i] = int(v)
    out["ion"] = ion
    for col in _REQUIRED_NUMERIC + _OPTIONAL_NUMERIC:
        if col not in raw.columns:  # only optional columns can be absent here
            out[col] = np.nan
            continue
        required = col in _REQUIRED_NUMERIC
        vals = np.full(len(raw), np.nan)
        for i, v in enumerate(raw[col]):
            if v == "":
                if required:
                    _fail(path, ln[i], col, "value is empty", "every line needs this value")
                continue
            try:
                x = float(v)
            except ValueError:
                _fail(path, ln[i], col, f"value {v!r} is not a number", "write a plain decimal number")
            if not np.isfinite(x):
                _fail(path, ln[i], col, f"value {v!r} is not finite", "write a finite number")
            vals[i] = x
        out[col] = vals
    grades = raw["aki_grade"].str.upper().to_numpy()
    for i, g in enumerate(grades):
        if g not in AKI_GRADES:
            _fail(
                path,
                ln[i],
                "aki_grade",
                f"unknown accuracy grade {raw['aki_grade'][i]!r}",
                f"use one of {' '.join(AKI_GRADES)}",
            )
    out["aki_grade"] = grades
    checks = (
        ("wavelength_nm", out["wavelength_nm"] <= 0, "wavelength must be positive"),
        ("aki", out["aki"] <= 0, "Aki must be positive (s^-1)"),
        ("ei_ev", out["ei_ev"] < 0, "lower-level energy must not be negative"),
        ("ek_ev", out["ek_ev"] <= out["ei_ev"], "upper-level energy ek_ev must exceed ei_ev"),
        ("gi", (out["gi"] <= 0) | (out["gi"] != np.round(out["gi"])), "gi must be a positive whole number"),
        ("gk", (out["gk"] <= 0) | (out["gk"] != np.round(out["gk"])), "gk must be a positive whole number"),
        ("stark_w_nm", out["stark_w_nm"] < 0, "Stark width must not be negative"),
        ("stark_ne_ref_cm3", out["stark_ne_ref_cm3"] <= 0, "reference density must be positive"),
        ("stark_t_ref_k", out["stark_t_ref_k"] <= 0, "reference temperature must be positive"),
    )
    for col, bad, what in checks:
        bad = np.asarray(bad)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            _fail(path, ln[i], col, f"{what} (found {raw[col][i]!r})", "correct the value")
    has_w = np.isfinite(out["stark_w_nm"].to_numpy())
    no_ref = has_w & ~(np.isfinite(out["stark_ne_ref_cm3"].to_numpy()))
    if no_ref.any():
        i = int(np.flatnonzero(no_ref)[0])
        _fail(
            path,
            ln[i],
            "stark_ne_ref_cm3",
            "a Stark width needs its reference electron density",
            "fill stark_ne_ref_cm3 (cm^-3) or empty stark_w_nm",
        )
    out["stark_ne_exponent"] = np.where(has_w & np.isnan(out["stark_ne_exponent"]), 1.0, out["stark_ne_exponent"])
    out["gi"] = out["gi"].astype(int)
    out["gk"] = out["gk"].astype(int)
    for i, s in enumerate(raw["source"]):
        if not s:
            _fail(path, ln[i], "source", "every line needs a source", "name where the values come from")
    out["source"] = raw["source"].to_numpy()
    out["species"] = [species_name(e, k) for e, k in zip(out["element"], out["ion"])]
    out["line_id"] = [f"{s} {w:.3f}" for s, w in zip(out["species"], out["wavelength_nm"])]
    dup = out["line_id"].duplicated()
    if dup.any():
        i = int(np.flatnonzero(dup)[0])
        _fail(
            path,
            ln[i],
            "wavelength_nm",
            f"line {out['line_id'][i]!r} is listed twice",
            "keep one row per line (line ids use 3 decimals)",
        )
    out["aki_unc_rel"] = out["aki_grade"].map(AKI_GRADES).to_numpy(dtype=float)
    out["grade_basis"] = raw["grade_basis"].to_numpy() if "grade_basis" in raw.columns else "stated by the user"
    if "wavelength_unc_nm" in raw.columns:
        out["wavelength_unc_nm"] = pd.to_numeric(raw["wavelength_unc_nm"], errors="coerce").to_numpy()
    else:
        out["wavelength_unc_nm"] = np.nan
    return out[_OUT_COLUMNS].sort_values(["element", "ion", "wavelength_nm"], kind="stable").reset_index(drop=True)


_OUT_COLUMNS = list(LINE_COLUMNS[:-1]) + [
    "stark_ne_exponent",
    "aki_unc_rel",
    "grade_basis",
    "wavelength_unc_nm",
    "source",
    "species",
    "line_id",
]


def _add_ids(df: pd.DataFrame) -> pd.DataFrame:
    roman = np.array(["", "I", "II", "III"], dtype=object)
    df["species"] = df["element"].to_numpy(dtype=object) + " " + roman[df["ion"].to_numpy()]
    df["line_id"] = df["species"].to_numpy(dtype=object) + " " + np.char.mod("%.3f", df["wavelength_nm"].to_numpy())
    return df


@functools.lru_cache(maxsize=1)
def _shipped_all() -> pd.DataFrame:
    """The shipped database (every stage), read once per process.  The file is built and checked by
    scripts/build_atomic_data.py and tests/test_atomic_sources.py, so it is read without the
    row-by-row checks a user file gets."""
    from compquant.atomic._cache import cached

    path = _data_dir() / "lines.csv.gz"
    alias = _data_dir() / "line_id_aliases.csv"
    return cached("lines", [path, alias], lambda: _read_shipped(path, alias))


def _read_shipped(path: Path, alias: Path) -> pd.DataFrame:
    str_cols = ("element", "aki_grade", "grade_basis", "source")
    df = pd.read_csv(path, dtype={c: object for c in str_cols}, keep_default_na=False, na_values={
        c: [""] for c in _REQUIRED_NUMERIC + _OPTIONAL_NUMERIC + ("aki_unc_rel", "wavelength_unc_nm")})
    df["gi"] = df["gi"].astype(int)
    df["gk"] = df["gk"].astype(int)
    df = _add_ids(df)
    # ids of the former line list kept for the lines they named (line_id_aliases.csv, written by
    # scripts/build_atomic_data.py): e.g. "Cu I 510.554" for the line at 510.5548 nm
    al = pd.read_csv(alias)
    key = dict(zip(zip(al["species"], al["wavelength_nm"].round(5)), al["line_id"]))
    k = list(zip(df["species"], df["wavelength_nm"].round(5)))
    df["line_id"] = [key.get(x, lid) for x, lid in zip(k, df["line_id"])]
    return df[_OUT_COLUMNS]


@functools.lru_cache(maxsize=4)
def _shipped_lines(stages: tuple[int, ...] = (1, 2)) -> pd.DataFrame:
    df = _shipped_all()
    from compquant.atomic import overlay

    df = overlay.apply_overlay(df)
    return df[df["ion"].isin(stages)].reset_index(drop=True)


def load_line_list(path: str | os.PathLike | None = None, *, stages=(1, 2)) -> pd.DataFrame:
    """Load and validate a line list; ``None`` loads the shipped database.

    Returns a new DataFrame (columns of :data:`LINE_COLUMNS` plus
    ``stark_ne_exponent``, ``aki_unc_rel``, ``grade_basis``, ``wavelength_unc_nm``,
    ``species`` and ``line_id``) sorted by element, ion and wavelength.  For the
    shipped database ``stages`` selects the ionisation stages (default I and II;
    ``(1, 2, 3)`` adds the stage-III lines) and the lab-local overlay, if any, takes
    precedence (:mod:`compquant.atomic.overlay`).  Problems with a user file raise
    :class:`~compquant.errors.AtomicDataError` naming the file, the line number
    (header = line 1) and the column: missing columns, empty or non-numeric
    values, Aki <= 0, an unknown element, ek_ev <= ei_ev, an unknown accuracy
    grade, duplicate line ids.
    """
    if path is None:
        st = tuple(sorted({int(s) for s in stages}))
        if not st or any(s not in ALL_STAGES for s in st):
            raise AtomicDataError(f"stages {stages!r} must be among 1, 2, 3", where="load_line_list",
                                  fix="pass e.g. stages=(1, 2)")
        return _shipped_lines(st).copy()
    return _read_line_list(Path(path))


def find_line(species: str, wavelength_nm: float, *, lines: pd.DataFrame | None = None,
              tolerance_nm: float = LINE_ID_TOLERANCE_NM) -> pd.Series | None:
    """The line of ``species`` nearest ``wavelength_nm`` within ``tolerance_nm``; None if none.

    Line ids carry 3 decimals; a published wavelength may differ from an id written from an
    older table in the third decimal (e.g. ``Cu I 458.695`` is 458.6967 nm in van Hoof's Atomic
    Line List v3), so ids resolve within :data:`LINE_ID_TOLERANCE_NM` (docs/atomic-data.md).
    """
    tab = _shipped_lines((1, 2, 3)) if lines is None else lines
    sel = tab[tab["species"] == species_name(*parse_species(species))]
    if len(sel) == 0:
        return None
    d = np.abs(sel["wavelength_nm"].to_numpy(dtype=float) - float(wavelength_nm))
    j = int(np.argmin(d))
    return None if d[j] > tolerance_nm else sel.iloc[j]


def lines_for(
    what: str, wl_min: float = 0.0, wl_max: float = np.inf, *, lines: pd.DataFrame | None = None
) -> pd.DataFrame:
    """Lines of a species (``"Cu I"``) or of an element (``"Cu"``, all stages)
    with ``wl_min <= wavelength_nm <= wl_max`` (nm, air), sorted by wavelength.

    ``lines`` defaults to the shipped list.
    """
    tab = _shipped_lines((1, 2)) if lines is None else lines
    text = str(what).strip()
    if " " in text:
        sym, ion = parse_species(text)
        mask = (tab["element"] == sym) & (tab["ion"] == ion)
    else:
        parse_species(f"{text} I")  # validates the symbol
        mask = tab["element"] == text
    mask &= (tab["wavelength_nm"] >= wl_min) & (tab["wavelength_nm"] <= wl_max)
    return tab[mask].sort_values("wavelength_nm").reset_index(drop=True)
