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


#: line-table flags that mean the measurement failed: such a line never contributes intensity,
#: whatever ``[cf] exclude_flags`` says (docs/calibration-free.md §5a)
FAILED_FLAGS = ("not_found", "saturated")


def measurement_failure(r, flags: set, w_instr_nm: float, settings) -> str | None:
    """Why a measured line is not a measurement (``None`` when it is one).

    * flagged ``not_found`` or ``saturated`` by the line pipeline;
    * intensity not finite and positive, or no finite standard uncertainty (a U must include
      the line's own uncertainty), or u ≥ intensity (SNR < 1);
    * a profile fit that collapsed: FWHM below ``collapsed_fwhm_fraction`` × the instrumental
      FWHM (no line on the detector is narrower than the instrument function);
    * a profile fit at its upper width bound: FWHM ≥ ``max_line_fwhm_nm`` when given.
    """
    failed = sorted(flags & set(FAILED_FLAGS))
    if failed:
        return "measurement failed (flag " + ";".join(failed) + ")"
    inten = float(r["intensity"]) if np.isfinite(r["intensity"]) else float("nan")
    if not (np.isfinite(inten) and inten > 0):
        return "intensity not positive"
    u = float(r["u_intensity"]) if "u_intensity" in r and r["u_intensity"] is not None else float("nan")
    if not np.isfinite(u) or u < 0:
        return "measurement failed (no intensity uncertainty)"
    if u >= inten:
        return f"measurement failed (u_intensity {u:.3g} ≥ intensity {inten:.3g})"
    fwhm = float(r["fwhm_nm"]) if "fwhm_nm" in r and np.isfinite(r["fwhm_nm"]) else float("nan")
    if np.isfinite(fwhm) and w_instr_nm > 0 and fwhm < settings.collapsed_fwhm_fraction * w_instr_nm:
        return (f"profile fit collapsed (FWHM {fwhm:.4g} nm < {settings.collapsed_fwhm_fraction:g} × "
                f"instrumental {w_instr_nm:.4g} nm)")
    if np.isfinite(fwhm) and settings.max_line_fwhm_nm is not None and fwhm >= settings.max_line_fwhm_nm:
        return f"profile fit at its width bound (FWHM {fwhm:.4g} nm ≥ max_line_fwhm_nm)"
    return None


def _atomic_ok(r) -> bool:
    return all(np.isfinite(float(r[c])) for c in ATOMIC_COLS) and r["aki"] > 0 and r["gk"] > 0


def _lineset(d: pd.DataFrame, atomic, intensity=None, u_intensity=None) -> LineSet:
    grades = d["aki_grade"].to_numpy() if "aki_grade" in d.columns else [None] * len(d)
    u_ln_a = np.array([atomic.aki_relative_uncertainty(g) if _has(g) else 0.0 for g in grades], float)
    el = d["element"].astype(str).to_numpy()
    ion = d["ion"].astype(int).to_numpy()
    return LineSet(
        line_id=d["line_id"].astype(str).to_numpy(),
        species=np.array([species_name(e, z) for e, z in zip(el, ion)]),
        element=el,
        ion=ion,
        wl=d["wavelength_nm"].to_numpy(float),
        intensity=d["intensity"].to_numpy(float) if intensity is None else intensity,
        u_intensity=_col(d, "u_intensity").astype(float) if u_intensity is None else u_intensity,
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


def prepare_lines(rows: pd.DataFrame, atomic, settings, where: str, *, w_instr_fn=None,
                  elements=None, drop: dict | None = None):
    """Return ``(LineSet, excluded, h_alpha, nondetected)``.

    ``excluded`` is a list of ``{"line_id", "element", "reason"}``; ``h_alpha`` is a dict with
    the measured H I 656.28 nm row (``fwhm_nm``, ``intensity``) or ``None``; ``nondetected`` is
    a :class:`LineSet` of the lines of analysed elements that were looked for and not found
    (``intensity`` holds the upper limit max(I, 0) + k·u with k = ``upper_limit_sigma``; lines
    without a finite u give no limit and are left out).  ``elements`` overrides
    ``settings.elements`` (per-sample lists); ``drop`` maps line ids to a reason for leaving
    them out (rejected outliers, elements found not determined).
    """
    for c in ("line_id", "intensity"):
        if c not in rows.columns:
            raise InputError(f"line table has no {c!r} column", where=where,
                             fix="use a line table from compquant.lines.measure_run")
    df = join_atomic(rows.reset_index(drop=True), atomic, where)
    elements = settings.elements if elements is None else elements
    drop = drop or {}
    excluded: list[dict] = []
    h_alpha = None
    keep = np.zeros(len(df), dtype=bool)
    nd_keep = np.zeros(len(df), dtype=bool)
    nd_ul = np.full(len(df), np.nan)
    flags = df["flags"].fillna("").astype(str).to_numpy() if "flags" in df.columns else [""] * len(df)
    bad_flags = set(settings.exclude_flags)
    for i, r in df.iterrows():
        lid = str(r["line_id"])
        el, ion = str(r["element"]), int(r["ion"])
        fl = {f for f in str(flags[i]).split(";") if f}
        if el == "H" and ion == 1 and abs(float(r["wavelength_nm"]) - H_ALPHA_NM) < 0.3:
            if not (fl & (bad_flags | set(FAILED_FLAGS))) and np.isfinite(r.get("fwhm_nm", np.nan)):
                h_alpha = {"line_id": lid, "fwhm_nm": float(r["fwhm_nm"]),
                           "u_fwhm_nm": float(r["u_fwhm_nm"]) if "u_fwhm_nm" in df.columns
                           and np.isfinite(r["u_fwhm_nm"]) else np.nan,
                           "wavelength_nm": float(r["wavelength_nm"])}
        w_instr = float(w_instr_fn(float(r["wavelength_nm"]))) if w_instr_fn is not None else 0.0
        reason = None
        if el in settings.exclude_elements:
            reason = "element excluded ([cf] exclude_elements)"
        elif elements is not None and el not in elements:
            reason = "element not in [cf] elements"
        elif ion not in (1, 2):
            reason = "ion stage above II not used"
        elif lid in drop:
            reason = drop[lid]
        elif not _atomic_ok(r):
            reason = "no atomic data (A_ki, g_k, E_i, E_k) for this line"
        else:
            reason = measurement_failure(r, fl, w_instr, settings)
            if reason is None and fl & bad_flags:
                reason = "flag " + ";".join(sorted(fl & bad_flags))
            if "not_found" in fl:
                u = float(r["u_intensity"]) if "u_intensity" in df.columns else float("nan")
                if np.isfinite(u) and u > 0 and u < np.inf:
                    inten = float(r["intensity"]) if np.isfinite(r["intensity"]) else 0.0
                    nd_keep[i] = True
                    nd_ul[i] = max(inten, 0.0) + settings.upper_limit_sigma * u
        if reason:
            excluded.append({"line_id": lid, "element": el, "reason": reason})
        else:
            keep[i] = True
    d = df[keep].reset_index(drop=True)
    if len(d) == 0:
        why = "; ".join(f"{x['line_id']}: {x['reason']}" for x in excluded[:6])
        raise DataQualityError("no usable lines for the calibration-free analysis"
                               + (f" ({why}{' …' if len(excluded) > 6 else ''})" if why else ""),
                               where=where, fix="check the line flags, [cf] elements and the atomic data")
    uI = _col(d, "u_intensity").astype(float)
    ls = _lineset(d, atomic, u_intensity=np.where(np.isfinite(uI) & (uI >= 0), uI, 0.0))
    nd = df[nd_keep].reset_index(drop=True)
    nd_ls = _lineset(nd, atomic, intensity=nd_ul[nd_keep], u_intensity=np.zeros(len(nd)))
    return ls, excluded, h_alpha, nd_ls


def _has(g) -> bool:
    if g is None:
        return False
    if isinstance(g, float) and np.isnan(g):
        return False
    return str(g).strip() != ""


__all__ = ["FAILED_FLAGS", "H_ALPHA_NM", "LineSet", "join_atomic", "measurement_failure", "prepare_lines"]
