"""Select and join the lines of one sample for the calibration-free analysis."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from compquant.cflibs.atomicdata import species_name, split_species
from compquant.errors import AtomicDataError, DataQualityError, InputError

ATOMIC_COLS = ("aki", "gk", "ek_ev", "ei_ev")
OPTIONAL_ATOMIC = ("aki_grade", "stark_w_nm", "stark_ne_ref_cm3", "stark_t_ref_k", "stark_ne_exponent")
H_ALPHA_NM = 656.28


@dataclass
class LineSet:
    """Arrays of the usable lines of one sample (one entry per line)."""

    line_id: np.ndarray
    species: np.ndarray
    element: np.ndarray
    ion: np.ndarray
    wl: np.ndarray
    intensity: np.ndarray
    u_intensity: np.ndarray
    gA: np.ndarray
    ek: np.ndarray
    ei: np.ndarray
    u_ln_a: np.ndarray
    fwhm: np.ndarray
    stark_w: np.ndarray
    stark_ne: np.ndarray
    stark_t: np.ndarray
    stark_p: np.ndarray

    @property
    def n(self) -> int:
        return len(self.line_id)

    def subset(self, mask) -> LineSet:
        mask = np.asarray(mask)
        return LineSet(**{k: getattr(self, k)[mask] for k in self.__dataclass_fields__})


def _col(df, name, default=np.nan):
    if name in df.columns:
        return df[name].to_numpy()
    return np.full(len(df), default, dtype=object if isinstance(default, str) else float)


def join_atomic(rows: pd.DataFrame, atomic, where: str) -> pd.DataFrame:
    """Add atomic columns (from the line list) to the line-table rows where they are missing."""
    need = [c for c in ATOMIC_COLS if c not in rows.columns]
    out = rows.copy()
    if need:
        ll = atomic.line_list()
        if "line_id" not in ll.columns:
            raise AtomicDataError("line list has no line_id column", where="line list",
                                  fix="use the line list of compquant.atomic")
        keep = ["line_id"] + [c for c in (*ATOMIC_COLS, *OPTIONAL_ATOMIC, "element", "ion",
                                         "wavelength_nm") if c in ll.columns and c not in out.columns]
        ll = ll[keep].drop_duplicates("line_id")
        out = out.merge(ll, on="line_id", how="left")
    for c in OPTIONAL_ATOMIC:
        if c not in out.columns:
            out[c] = np.nan
    if "element" not in out.columns or "ion" not in out.columns:
        sp = [split_species(str(lid).rsplit(" ", 1)[0]) for lid in out["line_id"]]
        out["element"] = [s[0] for s in sp]
        out["ion"] = [s[1] for s in sp]
    if "wavelength_nm" not in out.columns:
        out["wavelength_nm"] = [float(str(lid).rsplit(" ", 1)[1]) for lid in out["line_id"]]
    return out


def prepare_lines(rows: pd.DataFrame, atomic, settings, where: str):
    """Return ``(LineSet, excluded, h_alpha)``.

    ``excluded`` is a list of ``{"line_id", "reason"}``; ``h_alpha`` is a dict with the
    measured H I 656.28 nm row (``fwhm_nm``, ``intensity``) or ``None``.
    """
    for c in ("line_id", "intensity"):
        if c not in rows.columns:
            raise InputError(f"line table has no {c!r} column", where=where,
                             fix="use a line table from compquant.lines.measure_run")
    df = join_atomic(rows.reset_index(drop=True), atomic, where)
    excluded: list[dict] = []
    h_alpha = None
    keep = np.ones(len(df), dtype=bool)
    flags = df["flags"].fillna("").astype(str).to_numpy() if "flags" in df.columns else [""] * len(df)
    bad_flags = set(settings.exclude_flags)
    for i, r in df.iterrows():
        lid = str(r["line_id"])
        el, ion = str(r["element"]), int(r["ion"])
        fl = {f for f in str(flags[i]).split(";") if f}
        if el == "H" and ion == 1 and abs(float(r["wavelength_nm"]) - H_ALPHA_NM) < 0.3:
            if not (fl & bad_flags) and np.isfinite(r.get("fwhm_nm", np.nan)):
                h_alpha = {"line_id": lid, "fwhm_nm": float(r["fwhm_nm"]),
                           "u_fwhm_nm": float(r["u_fwhm_nm"]) if "u_fwhm_nm" in df.columns
                           and np.isfinite(r["u_fwhm_nm"]) else np.nan,
                           "wavelength_nm": float(r["wavelength_nm"])}
        reason = None
        if fl & bad_flags:
            reason = "flag " + ";".join(sorted(fl & bad_flags))
        elif el in settings.exclude_elements:
            reason = "element excluded ([cf] exclude_elements)"
        elif settings.elements is not None and el not in settings.elements:
            reason = "element not in [cf] elements"
        elif ion not in (1, 2):
            reason = "ion stage above II not used"
        elif not (np.isfinite(r["intensity"]) and r["intensity"] > 0):
            reason = "intensity not positive"
        elif not all(np.isfinite(float(r[c])) for c in ATOMIC_COLS) or r["aki"] <= 0 or r["gk"] <= 0:
            reason = "no atomic data (A_ki, g_k, E_i, E_k) for this line"
        if reason:
            keep[i] = False
            excluded.append({"line_id": lid, "reason": reason})
    d = df[keep].reset_index(drop=True)
    if len(d) == 0:
        raise DataQualityError("no usable lines for the calibration-free analysis", where=where,
                               fix="check the line flags, [cf] elements and the atomic data")
    I = d["intensity"].to_numpy(float)
    uI = _col(d, "u_intensity").astype(float)
    uI = np.where(np.isfinite(uI) & (uI >= 0), uI, 0.0)
    grades = d["aki_grade"].to_numpy() if "aki_grade" in d.columns else [None] * len(d)
    u_ln_a = np.array([atomic.aki_relative_uncertainty(g) if _has(g) else 0.0 for g in grades], float)
    el = d["element"].astype(str).to_numpy()
    ion = d["ion"].astype(int).to_numpy()
    ls = LineSet(
        line_id=d["line_id"].astype(str).to_numpy(),
        species=np.array([species_name(e, z) for e, z in zip(el, ion)]),
        element=el,
        ion=ion,
        wl=d["wavelength_nm"].to_numpy(float),
        intensity=I,
        u_intensity=uI,
        gA=(d["gk"].to_numpy(float) * d["aki"].to_numpy(float)),
        ek=d["ek_ev"].to_numpy(float),
        ei=d["ei_ev"].to_numpy(float),
        u_ln_a=u_ln_a,
        fwhm=_col(d, "fwhm_nm").astype(float),
        stark_w=d["stark_w_nm"].to_numpy(float),
        stark_ne=d["stark_ne_ref_cm3"].to_numpy(float),
        stark_t=d["stark_t_ref_k"].to_numpy(float),
        stark_p=d["stark_ne_exponent"].to_numpy(float),
    )
    return ls, excluded, h_alpha


def _has(g) -> bool:
    if g is None:
        return False
    if isinstance(g, float) and np.isnan(g):
        return False
    return str(g).strip() != ""


__all__ = ["H_ALPHA_NM", "LineSet", "join_atomic", "prepare_lines"]
