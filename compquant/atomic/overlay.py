"""Bring your own atomic data: importers and a lab-local overlay with explicit precedence.

The overlay is a directory holding ``lines.csv`` (columns of
:data:`compquant.atomic.LINE_COLUMNS`, plus ``grade_basis`` and ``imported_from``).  It is used
only when named: ``COMPQUANT_ATOMIC_OVERLAY=<dir>`` in the environment or
:func:`use_overlay` in Python; nothing is read from a default place.

Precedence (one rule, applied per line): **an overlay row replaces the shipped row of the same
species whose wavelength lies within** :data:`~compquant.atomic.LINE_ID_TOLERANCE_NM` **of it**; an
overlay row with no such shipped row is added.  Each replaced or added row keeps its own
``source`` and says in ``grade_basis`` that it comes from the overlay.  Within the overlay,
a later import replaces an earlier row of the same line id.

Importers:

- :func:`read_nist_lines` -- the NIST Atomic Spectra Database lines form, "tab-delimited"
  output.  Column headings as the ASD writes them (NIST ASD Lines Help, "Output for Lines",
  physics.nist.gov/PhysRefData/ASD/Html/lineshelp.html; the same headings are listed in the ASDCache
  documentation's data schema): ``element``, ``sp_num``, the wavelengths
  ``obs_wl_air(nm)`` / ``ritz_wl_air(nm)`` or ``obs_wl_vac(nm)`` / ``ritz_wl_vac(nm)`` (the unit in
  the brackets follows the form's wavelength unit: ``nm``, ``A``, ``um``), ``unc_obs_wl``,
  ``unc_ritz_wl``, ``wn(cm-1)``, ``intens``, ``Aki(s^-1)`` (``gA(s^-1)`` when g_k A_ki was chosen
  as the transition strength), ``fik``, ``S(a.u.)``, ``log_gf``, ``Acc``, ``Ei(<unit>)`` /
  ``Ek(<unit>)`` in the form's energy unit (``cm-1``, the ASD default, or ``eV``), ``conf_i``,
  ``term_i``, ``J_i``, ``conf_k``, ``term_k``, ``J_k``, ``g_i``, ``g_k``, ``Type``, ``tp_ref``,
  ``line_ref``.  Values written as ``="324.754"`` and energies in brackets or parentheses
  (derived / theoretical levels) are read as numbers; vacuum wavelengths are converted to
  standard air (Morton 2000), energies in cm⁻¹ to eV (CODATA).
- :func:`read_nist_levels` -- the ASD levels form, tab-delimited (``Configuration``, ``Term``,
  ``J``, ``g``, ``Level (eV)`` or ``Level (cm-1)``, ``Uncertainty (...)``, ``Reference``; the
  ``Limit`` row is the ionisation limit, not a level), for a level table
  (:func:`compquant.atomic.load_levels` columns).
- :func:`read_mapped_csv` -- any CSV with a column mapping ``{our column: their column}``.
- :func:`add_to_overlay` -- merge imported lines into an overlay directory (atomic write).
"""

from __future__ import annotations

import os
import re
from pathlib import Path

import numpy as np
import pandas as pd

from compquant.atomic.elements import known_symbols, species_name
from compquant.errors import AtomicDataError, InputError
from compquant.fileio import atomic_write

__all__ = [
    "ENV_VAR",
    "use_overlay",
    "overlay_dir",
    "read_nist_lines",
    "read_nist_levels",
    "read_mapped_csv",
    "add_to_overlay",
    "apply_overlay",
]

ENV_VAR = "COMPQUANT_ATOMIC_OVERLAY"
_OVERLAY: list[Path | None] = [None]
_NUM = re.compile(r"[-+]?\d+(?:\.\d*)?(?:[eE][-+]?\d+)?")


def use_overlay(path: str | os.PathLike | None) -> None:
    """Use the overlay directory ``path`` from now on (``None``: back to the environment)."""
    _OVERLAY[0] = None if path is None else Path(path)
    from compquant.atomic import lines

    lines._shipped_lines.cache_clear()


def overlay_dir() -> Path | None:
    """The overlay in use: :func:`use_overlay`'s, else ``$COMPQUANT_ATOMIC_OVERLAY``, else None."""
    if _OVERLAY[0] is not None:
        return _OVERLAY[0]
    env = os.environ.get(ENV_VAR, "").strip()
    return Path(env) if env else None


def _number(text) -> float:
    """A number from an ASD cell: ``="324.754"``, ``[3.8166]``, ``(7.72)``, ``3.8+x`` -> float."""
    m = _NUM.search(str(text).replace('"', ""))
    return float(m.group(0)) if m else np.nan


def _read_table(path: Path, sep: str) -> pd.DataFrame:
    try:
        df = pd.read_csv(path, sep=sep, dtype=str, keep_default_na=False, index_col=False)
    except FileNotFoundError as exc:
        raise InputError("file not found", where=str(path), fix="check the path") from exc
    except (OSError, UnicodeDecodeError, pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise InputError(f"cannot read the table ({exc})", where=str(path), fix="save it as UTF-8 text") from exc
    df.columns = [str(c).strip().strip('="') for c in df.columns]
    return df.apply(lambda c: c.str.strip().str.strip('="'))


def _pick(df: pd.DataFrame, names: tuple[str, ...], path: Path) -> pd.Series:
    for n in names:
        if n in df.columns:
            return df[n]
    raise AtomicDataError(f"no column {' or '.join(names)}", where=str(path),
                          fix="export the NIST ASD form as tab-delimited with these columns ticked")


_WL_UNIT_TO_NM = {"nm": 1.0, "A": 0.1, "um": 1000.0}
_WL_COLUMN = re.compile(r"^(obs|ritz)_wl_(air|vac)\((nm|A|um)\)$")


def _wavelength_air_nm(df: pd.DataFrame, path: Path) -> pd.Series:
    """Observed wavelength where there is one, else Ritz; in standard air, nm."""
    cols = {}
    for c in df.columns:
        m = _WL_COLUMN.match(c)
        if m:
            cols[m.group(1)] = (c, m.group(2), m.group(3))
    if not cols:
        raise AtomicDataError("no wavelength column (obs_wl_air(nm), ritz_wl_air(nm), obs_wl_vac(nm), ...)",
                              where=str(path), fix="export the NIST ASD lines form as tab-delimited with "
                              "observed and Ritz wavelengths ticked")
    from compquant.atomic.airvac import vacuum_to_air

    out = pd.Series(np.nan, index=df.index)
    for kind in ("ritz", "obs"):  # observed wins where both are given
        if kind not in cols:
            continue
        c, medium, unit = cols[kind]
        wl = df[c].map(_number) * _WL_UNIT_TO_NM[unit]
        if medium == "vac":
            wl = pd.Series(vacuum_to_air(wl.to_numpy(float)), index=df.index)
        out = wl.where(np.isfinite(wl), out)
    return out


def _energy_ev(df: pd.DataFrame, stem: str, path: Path) -> pd.Series:
    if f"{stem}(eV)" in df.columns:
        return df[f"{stem}(eV)"].map(_number)
    if f"{stem}(cm-1)" in df.columns:
        from compquant.plasma.constants import CM1_TO_EV  # here: the plasma package is not needed to load lines

        return df[f"{stem}(cm-1)"].map(_number) * CM1_TO_EV
    raise AtomicDataError(f"no column {stem}(eV) or {stem}(cm-1)", where=str(path),
                          fix="tick level energies in the NIST ASD lines form")


def read_nist_lines(path: str | os.PathLike, *, source: str | None = None) -> pd.DataFrame:
    """Lines from a NIST ASD tab-delimited line export, in the line-list columns.

    Rows without Aki (or g_k A_ki), g or level energies are left out (they cannot serve the
    physics).  The ASD ``Acc`` letter becomes ``aki_grade`` (empty -> E).  ``source`` defaults to
    ``"NIST ASD export <file name>"``.  Column headings: see the module docstring.
    """
    path = Path(path)
    df = _read_table(path, "\t")
    wl = _wavelength_air_nm(df, path)
    el = _pick(df, ("element",), path)
    ion = _pick(df, ("sp_num",), path).map(_number)
    gk = _pick(df, ("g_k",), path).map(_number)
    if "Aki(s^-1)" in df.columns:
        aki = df["Aki(s^-1)"].map(_number)
    elif "gA(s^-1)" in df.columns:
        aki = df["gA(s^-1)"].map(_number) / gk
    else:
        raise AtomicDataError("no column Aki(s^-1) or gA(s^-1)", where=str(path),
                              fix="choose Aki (or gk Aki) as the transition strength in the NIST ASD lines form")
    out = pd.DataFrame({"element": el, "ion": ion, "wavelength_nm": wl, "aki": aki,
                        "aki_grade": _pick(df, ("Acc",), path).str.upper().replace("", "E"),
                        "ei_ev": _energy_ev(df, "Ei", path), "ek_ev": _energy_ev(df, "Ek", path),
                        "gi": _pick(df, ("g_i",), path).map(_number), "gk": gk})
    out["source"] = source or f"NIST ASD export {path.name}"
    out["grade_basis"] = "NIST ASD accuracy letter"
    return _finish(out, path)


def read_nist_levels(path: str | os.PathLike, *, source: str | None = None) -> pd.DataFrame:
    """A level table (``energy_ev, g, source``) from a NIST ASD tab-delimited level export.

    ``Level (eV)`` or ``Level (cm-1)``; ``g`` where exported, else ``2J + 1`` (a ``J`` listed as
    ``"2,3,4"`` -- levels not resolved -- gives the sum of the 2J + 1); the ``Limit`` row (the
    ionisation limit) is left out.
    """
    path = Path(path)
    df = _read_table(path, "\t")
    if "Term" in df.columns:
        df = df[df["Term"].str.strip().str.lower() != "limit"]
    if "Level (eV)" in df.columns:
        e = df["Level (eV)"].map(_number)
    else:
        from compquant.plasma.constants import CM1_TO_EV

        e = _pick(df, ("Level (cm-1)",), path).map(_number) * CM1_TO_EV
    if "g" in df.columns:
        g = df["g"].map(_number)
    else:
        g = _pick(df, ("J",), path).map(_weight_of_j)
    out = pd.DataFrame({"energy_ev": e, "g": g}).dropna()
    out = out[(out["g"] > 0) & (out["energy_ev"] >= 0)]
    if not len(out) or not np.any(out["energy_ev"] == 0):
        raise AtomicDataError("no ground level (Level = 0) in the export", where=str(path),
                              fix="export the levels from the ground level up")
    out["g"] = out["g"].round().astype(int)
    out["source"] = source or f"NIST ASD export {path.name}"
    return out.sort_values("energy_ev", kind="stable").reset_index(drop=True)


def _weight_of_j(j) -> float:
    """``Σ (2J + 1)`` over the J values of a cell (``"3/2"``, ``"2"``, ``"2,3,4"``); NaN if none."""
    parts = [p for p in str(j).replace('"', "").split(",") if p.strip()]
    vals = [_number(_frac(p)) for p in parts]
    return float(sum(2 * v + 1 for v in vals)) if vals and all(np.isfinite(vals)) else np.nan


def _frac(j: str) -> str:
    m = re.fullmatch(r"\s*(\d+)\s*/\s*(\d+)\s*", str(j))
    return str(int(m.group(1)) / int(m.group(2))) if m else str(j)


def read_mapped_csv(path: str | os.PathLike, mapping: dict[str, str], *, source: str | None = None,
                    grade: str | None = None, wavelength_unit: str = "nm") -> pd.DataFrame:
    """Lines from any CSV: ``mapping`` names, for each line-list column, the file's column.

    Required: element, ion, wavelength_nm, aki, ei_ev, ek_ev, gi, gk.  ``aki_grade`` may come
    from a column or from ``grade`` (one letter for every row); ``source`` from a column or the
    argument.  ``wavelength_unit``: ``nm`` or ``A`` (angstrom, converted).
    """
    path = Path(path)
    df = _read_table(path, ",")
    need = ("element", "ion", "wavelength_nm", "aki", "ei_ev", "ek_ev", "gi", "gk")
    miss = [c for c in need if c not in mapping]
    if miss:
        raise AtomicDataError(f"the column mapping lacks {', '.join(miss)}", where=str(path),
                              fix="map every required column, e.g. wavelength_nm=lambda")
    absent = [v for v in mapping.values() if v not in df.columns]
    if absent:
        raise AtomicDataError(f"column(s) {', '.join(absent)} not in the file", where=str(path),
                              fix=f"the file has {', '.join(df.columns)}")
    out = pd.DataFrame({c: df[mapping[c]] for c in mapping})
    for c in ("ion", "wavelength_nm", "aki", "ei_ev", "ek_ev", "gi", "gk"):
        out[c] = out[c].map(_number)
    if wavelength_unit not in ("nm", "A"):
        raise AtomicDataError(f"wavelength unit {wavelength_unit!r}", where=str(path), fix="use nm or A")
    if wavelength_unit == "A":
        out["wavelength_nm"] = out["wavelength_nm"] / 10.0
    if "aki_grade" not in out.columns:
        if grade is None:
            raise AtomicDataError("no accuracy grade", where=str(path),
                                  fix="map aki_grade to a column or give one grade for all rows")
        out["aki_grade"] = grade
    out["aki_grade"] = out["aki_grade"].str.upper()
    if "source" not in out.columns:
        out["source"] = source or f"lab table {path.name}"
    out["grade_basis"] = "stated by the lab table"
    return _finish(out, path)


def _finish(out: pd.DataFrame, path: Path) -> pd.DataFrame:
    """Drop unusable rows, check the rest with the line-list rules."""
    from compquant.atomic.lines import AKI_GRADES

    out = out.dropna(subset=["wavelength_nm", "aki", "ei_ev", "ek_ev", "gi", "gk", "ion"])
    out = out[(out["aki"] > 0) & (out["ek_ev"] > out["ei_ev"])].reset_index(drop=True)
    if not len(out):
        raise AtomicDataError("no usable line (each needs wavelength, Aki, Ei < Ek, gi, gk)",
                              where=str(path), fix="export those columns")
    bad = ~out["element"].isin(known_symbols()) | ~out["ion"].isin([1, 2, 3])
    bad |= ~out["aki_grade"].isin(list(AKI_GRADES))
    bad |= (out["gi"] <= 0) | (out["gk"] <= 0) | (out["gi"] % 1 != 0) | (out["gk"] % 1 != 0)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise AtomicDataError(f"row {i + 1} of the usable rows is invalid ({out.iloc[i].to_dict()})",
                              where=str(path), fix="element symbol, ion 1-3, grade AAA..E, whole positive g")
    out["ion"] = out["ion"].astype(int)
    out["gi"] = out["gi"].astype(int)
    out["gk"] = out["gk"].astype(int)
    out["imported_from"] = path.name
    return out


def _overlay_file(d: Path) -> Path:
    return Path(d) / "lines.csv"


def add_to_overlay(lines: pd.DataFrame, overlay: str | os.PathLike) -> Path:
    """Merge imported ``lines`` into ``overlay/lines.csv`` (created if absent): a new row
    replaces an overlay row of the same line id.  Written atomically; returns the file."""
    d = Path(overlay)
    d.mkdir(parents=True, exist_ok=True)
    f = _overlay_file(d)
    new = lines.copy()
    if f.exists():
        old = pd.read_csv(f, dtype={"element": object}, keep_default_na=False)
        new = pd.concat([old, new], ignore_index=True)
    ids = [f"{species_name(e, int(k))} {w:.3f}" for e, k, w in zip(new["element"], new["ion"], new["wavelength_nm"])]
    new = new.assign(_id=ids).drop_duplicates("_id", keep="last").drop(columns="_id")
    cols = ["element", "ion", "wavelength_nm", "aki", "aki_grade", "ei_ev", "ek_ev", "gi", "gk",
            "source", "grade_basis", "imported_from"]
    text = new.reindex(columns=cols).to_csv(index=False, lineterminator="\n")
    with atomic_write(f, "w") as fh:
        fh.write(text)
    use_overlay(_OVERLAY[0])  # drop cached merges
    return f


def apply_overlay(shipped: pd.DataFrame) -> pd.DataFrame:
    """The shipped table with the overlay in use merged in (see the module docstring)."""
    d = overlay_dir()
    if d is None:
        return shipped
    f = _overlay_file(d)
    if not f.exists():
        raise InputError(f"no overlay line table {f.name}", where=str(d),
                         fix=f"import lines with `compquant atomic import` or unset {ENV_VAR}")
    from compquant.atomic.lines import AKI_GRADES, LINE_ID_TOLERANCE_NM, _add_ids

    ov = pd.read_csv(f, dtype={"element": object, "aki_grade": object, "source": object}, keep_default_na=False)
    ov = ov.assign(grade_basis="lab overlay " + str(f) + ": " + ov["grade_basis"].astype(str))
    ov["aki_unc_rel"] = ov["aki_grade"].map(AKI_GRADES)
    ov["wavelength_unc_nm"] = np.nan
    for c in ("stark_w_nm", "stark_shift_nm", "stark_ne_ref_cm3", "stark_t_ref_k", "stark_ne_exponent"):
        ov[c] = np.nan
    ov = _add_ids(ov)
    drop = np.zeros(len(shipped), dtype=bool)
    sp = shipped["species"].to_numpy()
    wl = shipped["wavelength_nm"].to_numpy()
    for s, w in zip(ov["species"], ov["wavelength_nm"]):
        drop |= (sp == s) & (np.abs(wl - w) <= LINE_ID_TOLERANCE_NM)
    out = pd.concat([shipped[~drop], ov[shipped.columns]], ignore_index=True)
    return out.sort_values(["element", "ion", "wavelength_nm"], kind="stable").reset_index(drop=True)
