"""Interference map: which lines of other detected elements fall on a method's analyte lines.

For an analyte line at λ₀ and a line group of another element's species *s*
(detected or possible in the sample) at λ with ``|λ − λ₀| ≤ window · λ₀/R``
(``window`` = 1 instrument FWHM by default: lines closer than about one FWHM
are not resolved, common practice), the interferer's predicted contribution at
the analyte position is

    c = a_s · r · exp(−4 ln 2 · (λ − λ₀)² / w²)

— its predicted integrated intensity (scale ``a_s`` times LTE relative
strength ``r``, :mod:`compquant.identify.core`) times the height fraction of a
Gaussian profile of FWHM ``w`` (instrument FWHM, or the observed width when
wider) at the separation.  Its *relative contribution* is ``c`` divided by the
analyte's own signal at the line (observed share of the matched peak, else the
predicted intensity when the analyte species is detected or possible, else none).  The analyte line is *overlapped*
when the relative contribution reaches ``interference_fraction`` (5 %
default), or, with no analyte signal to compare, when the interferer alone is
predicted at ≥ ``interference_snr`` σ.

``window_contribution`` is what window integration of the analyte line (its ``window_nm``, as
the line measurement uses it) would pick up from the interferer, relative to the analyte's own
area in that window: ``a_s r [Φ((W/2 − Δ)/s) − Φ((−W/2 − Δ)/s)] / (S_a [2Φ(W/2s_a) − 1])`` for
Gaussian profiles (Φ the normal distribution function, s = FWHM / 2√(2 ln 2)) — the size of the
additive correction a calibration would need.

Alternatives: the analyte element's other line groups in range (any ion
stage) that have no interferer above those thresholds, ranked by predicted SNR
(when the analyte's scale is known; at least ``expect_margin · k_sigma``) or
else by LTE relative strength.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.special import ndtr

from compquant.errors import InputError
from compquant.identify.core import Identification
from compquant.identify.peaks import GAUSS_AREA_FACTOR

MAP_COLUMNS = ["line_id", "element", "ion", "wavelength_nm", "analyte_signal", "interferer_line_id",
               "interferer_species", "interferer_status", "separation_nm", "interferer_contribution",
               "relative_contribution", "interferer_snr", "window_nm", "window_contribution", "overlapped",
               "alternatives"]

_FOUR_LN2 = 4.0 * np.log(2.0)
_FWHM_PER_SIGMA = 2.0 * np.sqrt(2.0 * np.log(2.0))


def _analyte_frame(analyte_lines, pitch_nm: float) -> pd.DataFrame:
    """Accept a DataFrame (line_id, element, ion, wavelength_nm[, window_nm]) or the method's
    ``LineSpec`` objects; ``window_nm`` is the integration window (for LineSpec: as the line
    measurement uses it, :func:`compquant.method.window_width_nm`), NaN when unknown."""
    cols = ["line_id", "element", "ion", "wavelength_nm"]
    if isinstance(analyte_lines, pd.DataFrame):
        df = analyte_lines
    else:
        from compquant.method import window_width_nm

        rows = []
        for x in analyte_lines:
            row = {k: getattr(x, k) for k in cols}
            try:
                row["window_nm"] = float(window_width_nm(x, pitch_nm))
            except (AttributeError, TypeError, ValueError):
                row["window_nm"] = np.nan
            rows.append(row)
        df = pd.DataFrame(rows)
    if df.empty:
        return pd.DataFrame(columns=[*cols, "window_nm"])
    missing = sorted(set(cols) - set(df.columns))
    if missing:
        raise InputError(f"analyte lines lack column(s) {', '.join(missing)}", where="interference map",
                         fix="pass the method's [[lines]] (Method.lines) or a table with those columns")
    out = df.loc[:, cols].reset_index(drop=True)
    out["window_nm"] = df["window_nm"].to_numpy(float) if "window_nm" in df.columns else np.nan
    return out


def _interferers_at(ident: Identification, lam0: np.ndarray, element: np.ndarray, width: float):
    """Long table of (analyte index, interfering group) pairs within ``width`` FWHM, with contributions."""
    g = ident.lines
    sp = ident.species.set_index("species")
    active = sp.index[sp["status"] != "not detected"]
    cand = g[g["species"].isin(active)]
    if cand.empty or lam0.size == 0:
        return pd.DataFrame(columns=["a", "grp", "sep", "contrib", "snr", "area", "w"])
    pred_area = cand["predicted_area"].to_numpy(float)  # a_s * r of each group
    cwl = cand["wavelength_nm"].to_numpy(float)
    fwhm0 = lam0 / ident.resolving_power
    sep = cwl[None, :] - lam0[:, None]
    near = (np.abs(sep) <= width * fwhm0[:, None]) & (cand["element"].to_numpy()[None, :] != element[:, None])
    ai, gj = np.nonzero(near)
    w = _species_width(ident, cand["species"].to_numpy()[gj], lam0[ai])
    frac = np.exp(-_FOUR_LN2 * (sep[ai, gj] / w) ** 2)
    contrib = pred_area[gj] * frac
    sigma = np.interp(lam0[ai], ident.wavelength, ident.noise)
    snr = contrib / (GAUSS_AREA_FACTOR * w * sigma)
    return pd.DataFrame({"a": ai, "grp": cand.index.to_numpy()[gj], "sep": sep[ai, gj], "contrib": contrib,
                         "snr": snr, "area": pred_area[gj], "w": w})


def _species_width(ident: Identification, species: np.ndarray, lam: np.ndarray) -> np.ndarray:
    """Line width of each species at λ: instrument FWHM times the species' median observed broadening."""
    g = ident.lines
    m = (g["peak_id"] >= 0) & (g["share"] >= 0.5)
    pk = ident.peaks
    ratio = pd.Series(dtype=float)
    if m.any() and len(pk):
        fw = pk["fwhm_nm"].to_numpy()[g.loc[m, "peak_id"].to_numpy()]
        inst = g.loc[m, "wavelength_nm"].to_numpy() / ident.resolving_power
        ratio = pd.Series(fw / inst).groupby(g.loc[m, "species"].to_numpy()).median().clip(lower=1.0)
    fac = pd.Series(species).map(ratio).fillna(1.0).to_numpy(float)
    return lam / ident.resolving_power * fac


def _analyte_signal(ident: Identification, lines: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Analyte signal at each analyte line: observed (shared) area of its group, else predicted; and the group."""
    g = ident.lines
    status = ident.species.set_index("species")["status"]
    sig = np.zeros(len(lines))
    grp = np.full(len(lines), -1)
    for i, row in enumerate(lines.itertuples()):
        sp_rows = g[(g["element"] == row.element) & (g["ion"] == int(row.ion))]
        if sp_rows.empty:
            continue
        d = np.abs(sp_rows["wavelength_nm"].to_numpy() - float(row.wavelength_nm))
        j = int(np.argmin(d))
        if d[j] > sp_rows["tolerance_nm"].iloc[j]:
            continue
        r = sp_rows.iloc[j]
        grp[i] = int(r.name)
        if r["observed_area"] > 0 and r["peak_id"] >= 0:
            sig[i] = float(r["observed_area"])
        elif r["predicted_area"] > 0 and status.get(r["species"], "not detected") != "not detected":
            sig[i] = float(r["predicted_area"])
    return sig, grp


def _flag(rel: np.ndarray, snr: np.ndarray, has_signal: np.ndarray, settings) -> np.ndarray:
    return np.where(has_signal, rel >= settings.interference_fraction, snr >= settings.interference_snr)


def interference_map(ident: Identification, analyte_lines, *, width_fwhm: float = 1.0) -> pd.DataFrame:
    """Interferences on each analyte line from the lines of other detected (or possible) elements.

    Parameters
    ----------
    ident : :class:`~compquant.identify.core.Identification` of the sample
    analyte_lines : the method's ``[[lines]]`` (``Method.lines``) or a DataFrame with
        ``line_id, element, ion, wavelength_nm``
    width_fwhm : search half-width in instrument FWHM (λ/R)

    Returns
    -------
    DataFrame (columns :data:`MAP_COLUMNS`), one row per (analyte line, interfering line group);
    an analyte line with no interferer has one row with empty interferer fields.  ``overlapped``
    is per analyte line (True on all its rows when any interferer passes the threshold);
    ``alternatives`` lists up to ``n_alternatives`` interference-free lines of the analyte element.
    """
    st = ident.settings
    lines = _analyte_frame(analyte_lines, float(np.median(np.diff(ident.wavelength))))
    if lines.empty:
        return pd.DataFrame(columns=MAP_COLUMNS)
    lam0 = lines["wavelength_nm"].to_numpy(float)
    el = lines["element"].to_numpy()
    signal, _ = _analyte_signal(ident, lines)
    pairs = _interferers_at(ident, lam0, el, width_fwhm)
    g = ident.lines
    sp_status = ident.species.set_index("species")["status"]
    if len(pairs):
        a = pairs["a"].to_numpy(int)
        with np.errstate(divide="ignore", invalid="ignore"):
            rel = np.where(signal[a] > 0, pairs["contrib"].to_numpy() / signal[a], np.inf)
        pairs["rel"] = rel
        pairs["flag"] = _flag(rel, pairs["snr"].to_numpy(), signal[a] > 0, st)
        # what the window integration of the analyte line would pick up: the interferer's area inside
        # the window over the analyte's own area inside it (Gaussian profiles of FWHM w)
        W = lines["window_nm"].to_numpy(float)[a]
        sw = pairs["w"].to_numpy(float) / _FWHM_PER_SIGMA
        sa = lam0[a] / ident.resolving_power / _FWHM_PER_SIGMA
        sep = pairs["sep"].to_numpy(float)
        f_i = ndtr((0.5 * W - sep) / sw) - ndtr((-0.5 * W - sep) / sw)
        f_a = 2.0 * ndtr(0.5 * W / sa) - 1.0
        with np.errstate(divide="ignore", invalid="ignore"):
            pairs["win"] = np.where(signal[a] > 0, pairs["area"].to_numpy(float) * f_i / (signal[a] * f_a), np.inf)
        pairs.loc[~np.isfinite(W), "win"] = np.nan
    overlapped = np.zeros(len(lines), bool)
    if len(pairs):
        overlapped[np.unique(pairs.loc[pairs["flag"], "a"].to_numpy(int))] = True
    alternatives = _alternatives(ident, lines, width_fwhm)
    rows = []
    for i, ln in lines.iterrows():
        base = {"line_id": ln["line_id"], "element": ln["element"], "ion": int(ln["ion"]),
                "wavelength_nm": float(ln["wavelength_nm"]), "analyte_signal": float(signal[i]),
                "window_nm": float(ln["window_nm"]),
                "overlapped": bool(overlapped[i]), "alternatives": alternatives[i] if overlapped[i] else ""}
        sub = pairs[pairs["a"] == i] if len(pairs) else pairs
        if len(sub) == 0:
            rows.append({**base, "interferer_line_id": "", "interferer_species": "", "interferer_status": "",
                         "separation_nm": np.nan, "interferer_contribution": 0.0, "relative_contribution": 0.0,
                         "interferer_snr": 0.0, "window_contribution": 0.0})
            continue
        for p in sub.sort_values("contrib", ascending=False).itertuples():
            gr = g.loc[p.grp]
            rows.append({**base, "interferer_line_id": gr["line_id"], "interferer_species": gr["species"],
                         "interferer_status": sp_status.get(gr["species"], ""), "separation_nm": float(p.sep),
                         "interferer_contribution": float(p.contrib), "relative_contribution": float(p.rel),
                         "interferer_snr": float(p.snr), "window_contribution": float(p.win)})
    return pd.DataFrame(rows, columns=MAP_COLUMNS)


def _alternatives(ident: Identification, lines: pd.DataFrame, width_fwhm: float) -> list[str]:
    """For each analyte line, up to n interference-free, strong lines of the same element (';'-joined)."""
    st = ident.settings
    g = ident.lines
    out = []
    cache: dict[str, pd.DataFrame] = {}
    for ln in lines.itertuples():
        el = ln.element
        if el not in cache:
            own = g[g["element"] == el].copy()
            if own.empty:
                cache[el] = own
            else:
                sig = np.where(own["observed_area"] > 0, own["observed_area"], own["predicted_area"])
                pairs = _interferers_at(ident, own["wavelength_nm"].to_numpy(float), own["element"].to_numpy(),
                                        width_fwhm)
                bad = np.zeros(len(own), bool)
                if len(pairs):
                    a = pairs["a"].to_numpy(int)
                    with np.errstate(divide="ignore", invalid="ignore"):
                        rel = np.where(sig[a] > 0, pairs["contrib"].to_numpy() / sig[a], np.inf)
                    fl = _flag(rel, pairs["snr"].to_numpy(), sig[a] > 0, st)
                    bad[np.unique(a[fl])] = True
                own["_free"] = ~bad
                own["_sig"] = sig
                cache[el] = own
        own = cache[el]
        if own.empty:
            out.append("")
            continue
        cand = own[own["_free"] & (np.abs(own["wavelength_nm"] - float(ln.wavelength_nm)) > own["tolerance_nm"])]
        if (cand["predicted_snr"] > 0).any():
            cand = cand[cand["predicted_snr"] >= st.expect_margin * st.k_sigma].sort_values(
                "predicted_snr", ascending=False)
        else:
            cand = cand.sort_values("rel_intensity", ascending=False)
        out.append("; ".join(cand["line_id"].head(st.n_alternatives)))
    return out


def overlapped_lines(imap: pd.DataFrame) -> pd.DataFrame:
    """One row per overlapped analyte line: ``line_id, interferers, max_relative_contribution, alternatives``."""
    ov = imap[imap["overlapped"] & (imap["interferer_line_id"] != "")]
    if ov.empty:
        return pd.DataFrame(columns=["line_id", "interferers", "max_relative_contribution", "alternatives"])
    return (ov.groupby("line_id", sort=False)
            .agg(interferers=("interferer_line_id", "; ".join),
                 max_relative_contribution=("relative_contribution", "max"),
                 alternatives=("alternatives", "first"))
            .reset_index())


__all__ = ["MAP_COLUMNS", "interference_map", "overlapped_lines"]
