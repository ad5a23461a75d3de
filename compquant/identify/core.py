"""Element identification: match detected peaks to the line database and score each species.

The rules (tolerance, expected lines, scoring, classes, evidence sharing) are
set out with their sources in ``docs/identification.md``; in short:

* **Tolerance.**  A line at λ matches the nearest peak whose centre lies within
  ``tol(λ) = sqrt((t_f · λ/R)² + (k · u_cal)²)`` — ``t_f`` = 0.5 instrument
  FWHM (two lines closer than about one FWHM are not resolved, Rayleigh-type
  criterion, common practice) combined in quadrature with ``k`` = 2 times the
  standard uncertainty of the wavelength calibration (GUM, JCGM 100:2008,
  coverage factor 2).
* **Blends.**  Lines of one species closer than ``tol`` are merged into one
  *group* (their predicted intensities add; the strongest member names it).
* **LTE estimate.**  Within a species, line *i* has the relative integrated
  intensity ``r_i ∝ g_k A_ki / λ · exp(-E_k / kT)`` (energy units,
  docs/architecture.md), computed by
  :func:`compquant.plasma.emission.line_emissivity_lte` at unit density and
  partition function (both cancel within a species).
* **Scale.**  For species *s* the observed areas fix one amplitude ``a_s``
  (area per unit r); each matched group proposes ``a = area / r`` and the one
  that maximises (found − missing) is kept (a consensus fit that a single
  coincidence cannot drive).  With ``a_s`` every group has a predicted peak
  SNR ``a_s r / (1.0645 · w · σ(λ))`` (``w`` the line width, ``σ`` the local
  noise).
* **Found / missing.**  A group is *expected* when its predicted SNR ≥ k_sigma
  and *strong* when ≥ expect_margin · k_sigma.  It is *found* when expected and
  matched by a peak not weaker than predicted by more than ``intensity_factor``;
  *missing* when strong and not found.
* **Score.**  ``score = f · q · c`` with ``f = found/(found + missing)``,
  ``q = exp(-½ (rms / ln F)²)`` the agreement of relative intensities (rms of
  the log residual ln(observed/predicted) over found groups after refitting
  ``a_s``; F = intensity_factor) and ``c = found/(found + 1)`` the weight of
  the number of lines.  Spearman's rank correlation of observed vs predicted
  intensities is reported beside it.
* **Classes.**  *detected*: found ≥ min_lines_detected and score ≥
  detected_score; *possible*: found > 0 and score ≥ possible_score;
  otherwise *not detected*.
* **Coincidences.**  A peak matched by lines of several species is shared in
  proportion to each species' predicted contribution ``a_s r``; a species'
  evidence is its share-weighted count of found lines, and its share of the
  area is what enters its scale fit.  Species that are not (yet) detected or
  possible do not take evidence away from the others.  The sharing is iterated
  to a fixed point (``iterations`` passes).  A strong expected line with no peak
  of its own is *hidden* rather than missing when active lines of other
  elements within 1.5 FWHM are predicted to put more intensity at its position
  than it would have.
* **Explaining lines.**  Only the ``max_lines_per_species`` strongest lines of
  a species are scored, but every other database line in range of a detected
  or possible species takes part in the sharing with its predicted
  contribution ``a_s r``: a peak that a weak matrix line accounts for (Fe I
  429.412 nm) is not evidence for an absent element whose line lies within the
  tolerance (W I 429.461 nm).  A species' own lines never compete with each
  other for a peak.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy.stats import spearmanr

from compquant.errors import AtomicDataError, DataQualityError, InputError
from compquant.identify.peaks import GAUSS_AREA_FACTOR, find_peaks, local_noise_sigma, noise_sigma
from compquant.identify.settings import IdentifySettings
from compquant.plasma.emission import line_emissivity_lte

STATUSES = ("detected", "possible", "not detected")
_STATUS_RANK = {"detected": 0, "possible": 1, "not detected": 2}

LINE_COLUMNS = ["species", "element", "ion", "group", "line_id", "members", "wavelength_nm", "rel_intensity",
                "ek_ev", "tolerance_nm", "peak_id", "peak_centre_nm", "delta_nm", "share", "observed_area",
                "predicted_area", "predicted_snr", "expected", "strong", "found", "missing", "scored"]

SPECIES_COLUMNS = ["element", "ion", "species", "status", "score", "lines_found", "lines_expected",
                   "lines_missing", "rms_log_residual", "rank_correlation", "scale", "best_lines",
                   "missing_lines", "temperature_k"]


@dataclass
class Identification:
    """Result of :func:`identify_spectrum`.

    Attributes
    ----------
    species : DataFrame
        One row per candidate species (columns :data:`SPECIES_COLUMNS`), sorted by status then score.
    lines : DataFrame
        One row per line group of every candidate species: ``species, element, ion, group,
        line_id, members, wavelength_nm, rel_intensity, ek_ev, tolerance_nm, peak_id,
        peak_centre_nm, delta_nm, share, observed_area, predicted_area, predicted_snr, expected,
        strong, found, missing, scored``; ``scored`` is False for the weaker lines of a detected
        or possible species that only explain peaks (never found or missing).
    peaks : DataFrame
        The peaks of :func:`compquant.identify.peaks.find_peaks` plus ``explained_by`` (species
        with a share of at least 10 %, detected or possible) and ``unexplained``.
    temperature_k : excitation temperature used for the LTE estimate
    temperature_fitted : whether it was fitted
    resolving_power : R used; ``resolving_power_source`` says where it came from
    settings : the :class:`IdentifySettings` used
    noise : (n_pixels,) local noise σ
    wavelength, spectrum : the input arrays (kept for plots)
    """

    species: pd.DataFrame
    lines: pd.DataFrame
    peaks: pd.DataFrame
    temperature_k: float
    temperature_fitted: bool
    resolving_power: float
    resolving_power_source: str
    settings: IdentifySettings
    noise: np.ndarray = field(repr=False)
    wavelength: np.ndarray = field(repr=False)
    spectrum: np.ndarray = field(repr=False)

    def elements(self) -> pd.DataFrame:
        """One row per element: its best species' status and score (see :func:`element_summary`)."""
        return element_summary(self.species)

    @property
    def unexplained_peaks(self) -> pd.DataFrame:
        """Peaks that no detected or possible species explains."""
        return self.peaks[self.peaks["unexplained"]].reset_index(drop=True)

    def scale_of(self, species: str) -> float:
        row = self.species[self.species["species"] == species]
        return float(row["scale"].iloc[0]) if len(row) else 0.0


def element_summary(species: pd.DataFrame) -> pd.DataFrame:
    """Collapse the species table to elements: ``element, status, score, species, lines_found,
    lines_expected, best_lines``; the element takes the best status (then score) of its ion stages,
    ``species`` lists the stages with their status."""
    if species.empty:
        return pd.DataFrame(columns=["element", "status", "score", "species", "lines_found", "lines_expected",
                                     "best_lines"])
    sp = species.assign(_rank=species["status"].map(_STATUS_RANK))
    rows = []
    for el, grp in sp.groupby("element", sort=False):
        grp = grp.sort_values(["_rank", "score"], ascending=[True, False])
        best = grp.iloc[0]
        rows.append({
            "element": el,
            "status": best["status"],
            "score": float(best["score"]),
            "species": "; ".join(f"{r.species} ({r.status})" for r in grp.itertuples()),
            "lines_found": float(grp["lines_found"].sum()),
            "lines_expected": int(grp["lines_expected"].sum()),
            "best_lines": best["best_lines"],
        })
    out = pd.DataFrame(rows)
    out["_rank"] = out["status"].map(_STATUS_RANK)
    return out.sort_values(["_rank", "score"], ascending=[True, False]).drop(columns="_rank").reset_index(drop=True)


# --------------------------------------------------------------------------- helpers


def relative_line_strength(lines: pd.DataFrame, temperature_k) -> np.ndarray:
    """LTE integrated intensity of each line per unit species density and partition function.

    ``∝ g_k A_ki exp(-E_k/kT) / λ`` (energy units, docs/architecture.md) from
    :func:`compquant.plasma.emission.line_emissivity_lte` with n_s = U_s = 1, so
    values compare only within one species.  ``temperature_k`` may be an array
    of shape (n_T, 1) to get (n_T, n_lines).
    """
    return line_emissivity_lte(lines["wavelength_nm"].to_numpy(float), lines["aki"].to_numpy(float),
                               lines["gk"].to_numpy(float), lines["ek_ev"].to_numpy(float), 1.0, 1.0,
                               temperature_k)


def matching_tolerance(wavelength_nm, resolving_power: float, settings: IdentifySettings) -> np.ndarray:
    """``sqrt((t_f λ/R)² + (k u_cal)²)`` in nm (see the module docstring)."""
    lam = np.asarray(wavelength_nm, float)
    return np.hypot(settings.tolerance_fwhm * lam / resolving_power,
                    settings.tolerance_k * settings.wavelength_uncertainty_nm)


def estimate_resolving_power(peaks: pd.DataFrame, min_snr: float = 20.0) -> float | None:
    """Median ``λ / FWHM`` of the clean peaks (SNR ≥ ``min_snr``), or None with fewer than 3.

    An upper bound of the instrument's R is not what this gives: physical broadening
    (Stark, Doppler) only widens lines, so the estimate is a lower bound of R, which
    makes the matching tolerance conservative (wider).
    """
    good = peaks[(peaks["snr"] >= min_snr) & (peaks["fwhm_nm"] > 0)]
    if len(good) < 3:
        good = peaks[peaks["fwhm_nm"] > 0]
    if len(good) < 3:
        return None
    return float(np.median(good["centre_nm"] / good["fwhm_nm"]))


def _candidate_lines(line_list: pd.DataFrame, wl_lo: float, wl_hi: float, settings: IdentifySettings,
                     medium: str) -> pd.DataFrame:
    need = {"element", "ion", "wavelength_nm", "aki", "ek_ev", "gk", "species", "line_id"}
    missing = sorted(need - set(line_list.columns))
    if missing:
        raise AtomicDataError(f"line list lacks column(s) {', '.join(missing)}", where="identification",
                              fix="load it with compquant.atomic.load_line_list")
    df = line_list.loc[:, sorted(need)].copy()
    if medium == "vacuum":
        from compquant.atomic import air_to_vacuum

        df["wavelength_nm"] = air_to_vacuum(df["wavelength_nm"].to_numpy(float))
    ok = (np.isfinite(df["wavelength_nm"]) & (df["aki"] > 0) & (df["gk"] > 0) & np.isfinite(df["ek_ev"])
          & (df["wavelength_nm"] >= wl_lo) & (df["wavelength_nm"] <= wl_hi))
    if settings.elements:
        ok &= df["element"].isin(settings.elements)
    if settings.exclude_elements:
        ok &= ~df["element"].isin(settings.exclude_elements)
    return df[ok].reset_index(drop=True)


def _group_lines(df: pd.DataFrame, tol: np.ndarray, strength: np.ndarray):
    """Merge lines of one species closer than ``tol`` into groups (blends)."""
    df = df.assign(_s=strength, _tol=tol).sort_values(["species", "wavelength_nm"]).reset_index(drop=True)
    wl = df["wavelength_nm"].to_numpy()
    sp = df["species"].to_numpy()
    new = np.ones(len(df), bool)
    if len(df) > 1:
        new[1:] = (sp[1:] != sp[:-1]) | (np.diff(wl) > df["_tol"].to_numpy()[1:])
    df["group"] = np.cumsum(new) - 1
    return df


# --------------------------------------------------------------------------- the scoring core


class _Problem:
    """Arrays of the grouped candidate lines and the peaks, shared by all passes."""

    def __init__(self, members: pd.DataFrame, peaks: pd.DataFrame, noise_at, fwhm_instr_fn, settings,
                 n_scored: int | None = None):
        self.members = members
        self.settings = settings
        g = members.groupby("group", sort=True)
        first = g.head(1).set_index("group").sort_index()
        self.n_groups = len(first)
        # groups 0 .. n_scored-1 are scored (the species' strongest lines); the others only
        # explain peaks (see _explaining_lines)
        self.scored = np.arange(self.n_groups) < (self.n_groups if n_scored is None else n_scored)
        self.species = first["species"].to_numpy()
        self.element = first["element"].to_numpy()
        self.ion = first["ion"].to_numpy().astype(int)
        self.species_codes, self.sp_index = np.unique(self.species, return_inverse=True)
        self.member_group = members["group"].to_numpy()
        peak_c = peaks["centre_nm"].to_numpy(float)
        # one sentinel 0 at the end: index -1 (no peak) reads 0
        self.peak_area = np.append(peaks["area"].to_numpy(float), 0.0)
        self.peak_fwhm = np.append(peaks["fwhm_nm"].to_numpy(float), 0.0)
        self.n_peaks = len(peaks)
        self.tol = g["_tol"].max().to_numpy()
        self._peak_c = peak_c
        self.members_wl = members["wavelength_nm"].to_numpy(float)
        self.set_strength(members["_s"].to_numpy(float))
        self.sigma = noise_at(self.wl)
        self.fwhm_instr = fwhm_instr_fn(self.wl)

    def set_strength(self, s_members: np.ndarray):
        """Group strengths (sum of members) and the strength-weighted group wavelength; re-match."""
        r = np.bincount(self.member_group, weights=s_members, minlength=self.n_groups)
        wl = np.bincount(self.member_group, weights=s_members * self.members_wl, minlength=self.n_groups) / r
        self.r = r
        self.wl = wl
        # nearest peak within tolerance
        pk = np.full(self.n_groups, -1)
        delta = np.full(self.n_groups, np.nan)
        if self.n_peaks:
            j = np.searchsorted(self._peak_c, wl)
            lo = np.clip(j - 1, 0, self.n_peaks - 1)
            hi = np.clip(j, 0, self.n_peaks - 1)
            dlo = np.abs(self._peak_c[lo] - wl)
            dhi = np.abs(self._peak_c[hi] - wl)
            best = np.where(dlo <= dhi, lo, hi)
            d = self._peak_c[best] - wl
            m = np.abs(d) <= self.tol
            pk[m] = best[m]
            delta[m] = d[m]
        self.peak = pk
        self.delta = delta

    def width(self, s: int, share: np.ndarray) -> np.ndarray:
        """Line width used for predicted heights: instrument FWHM, or wider if the species' peaks are."""
        idx = np.flatnonzero((self.sp_index == s) & self.scored)
        w = self.fwhm_instr[idx]
        m = (self.peak[idx] >= 0) & (share[idx] >= 0.5)
        if m.any():
            ratio = np.median(self.peak_fwhm[self.peak[idx[m]]] / self.fwhm_instr[idx[m]])
            w = w * max(1.0, float(ratio))
        return w


def _evaluate_species(prob: _Problem, s: int, share: np.ndarray, mask: np.ndarray | None = None):
    """Best scale and found/missing bookkeeping for species index ``s`` (vectorised over candidates)."""
    st = prob.settings
    idx = np.flatnonzero((prob.sp_index == s) & prob.scored)
    r = prob.r[idx]
    pk = prob.peak[idx]
    matched = pk >= 0
    obs = share[idx] * prob.peak_area[pk]  # 0 where unmatched (sentinel)
    kappa = 1.0 / (GAUSS_AREA_FACTOR * prob.width(s, share) * prob.sigma[idx])
    n = idx.size
    out = {"idx": idx, "scale": 0.0, "found": np.zeros(n, bool), "missing": np.zeros(n, bool),
           "expected": np.zeros(n, bool), "strong": np.zeros(n, bool), "pred": np.zeros(n), "snr": np.zeros(n),
           "obs": obs}
    cand_mask = matched & (obs > 0)
    if not cand_mask.any():
        return out
    cands = obs[cand_mask] / r[cand_mask]                      # (n_c,)
    pred = cands[:, None] * r[None, :]                         # (n_c, n)
    snr = pred * kappa[None, :]
    expected = snr >= st.k_sigma
    strong = snr >= st.expect_margin * st.k_sigma
    total = prob.peak_area[pk]  # whole peak, before sharing
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = obs[None, :] / pred
        ratio_total = total[None, :] / pred
    # a line is there when its whole peak is not weaker than predicted by more than F; a peak
    # shared with other species still shows the line (it is hidden, not missing), but then
    # counts as evidence only with its share
    ok = matched[None, :] & (ratio_total >= 1.0 / st.intensity_factor)
    found = expected & ok
    hidden = np.zeros_like(ok) if mask is None else (mask[idx][None, :] >= pred)
    missing = strong & ~ok & ~hidden
    w = share[idx][None, :]
    objective = (found * w).sum(1) - missing.sum(1)
    with np.errstate(divide="ignore", invalid="ignore"):
        lres = np.where(found, np.log(np.where(found, ratio, 1.0)), 0.0)
    nf = np.maximum(found.sum(1), 1)
    spread = np.sqrt((lres**2).sum(1) / nf)
    # best objective; ties -> smaller spread, then larger scale (more lines tested)
    order = np.lexsort((-cands, spread, -objective))
    b = int(order[0])
    out.update(scale=float(cands[b]), found=found[b], missing=missing[b], expected=expected[b], strong=strong[b],
               pred=pred[b], snr=snr[b])
    return out


def _score(prob: _Problem, ev: dict, share: np.ndarray, final: bool = False) -> dict:
    st = prob.settings
    idx, found, missing = ev["idx"], ev["found"], ev["missing"]
    sh = share[idx]
    n_found = float((sh * found).sum())
    n_missing = int(missing.sum())
    rms = np.nan
    rho = np.nan
    scale = ev["scale"]
    if found.any():
        use = found & (sh >= 0.5)
        if not use.any():
            use = found
        lr = np.log(ev["obs"][use] / prob.r[idx][use])
        la = float(np.mean(lr))
        rms = float(np.sqrt(np.mean((lr - la) ** 2)))
        if final and found.sum() >= 3:
            rho = float(spearmanr(ev["obs"][found], prob.r[idx][found]).statistic)
    f = n_found / (n_found + n_missing) if (n_found + n_missing) > 0 else 0.0
    q = float(np.exp(-0.5 * (rms / np.log(st.intensity_factor)) ** 2)) if np.isfinite(rms) else 0.0
    c = n_found / (n_found + 1.0)
    score = f * q * c
    if n_found >= st.min_lines_detected and score >= st.detected_score:
        status = "detected"
    elif n_found > 0 and score >= st.possible_score:
        status = "possible"
    else:
        status = "not detected"
    return {"lines_found": n_found, "lines_missing": n_missing, "lines_expected": int(found.sum()) + n_missing,
            "rms_log_residual": rms, "rank_correlation": rho, "score": float(score), "status": status,
            "scale": scale}


def _share(prob: _Problem, scale_of_group: np.ndarray, active_group: np.ndarray) -> np.ndarray:
    """Share of each matched group in its peak: own contribution over itself plus the active others."""
    share = np.zeros(prob.n_groups)
    m = prob.peak >= 0
    if not m.any():
        return share
    contrib = np.where(m, scale_of_group * prob.r, 0.0)
    act = np.where(m & active_group, contrib, 0.0)
    total_active = np.bincount(prob.peak[m], weights=act[m], minlength=prob.n_peaks)
    # others = active total at the peak minus the active part of my own species (its strongest
    # lines and its weaker, explaining lines do not compete with each other)
    n_sp = len(prob.species_codes)
    key = prob.peak[m] * n_sp + prob.sp_index[m]
    own_species = np.bincount(key, weights=act[m], minlength=prob.n_peaks * n_sp)
    others = np.maximum(total_active[prob.peak[m]] - own_species[key], 0.0)
    own = contrib[m]
    with np.errstate(divide="ignore", invalid="ignore"):
        sh = np.where(own + others > 0, own / (own + others), 1.0)
    share[m] = sh
    return share


def _masking(prob: _Problem, scale_of_group: np.ndarray, active_group: np.ndarray) -> np.ndarray:
    """Predicted area that active groups of *other elements* put at each group's position.

    ``Σ a_h r_h exp(-4 ln 2 (Δλ / w)²)`` over groups h of other elements within 1.5 instrument
    FWHM ``w`` (Gaussian instrument profile).  A line predicted weaker than this is hidden under
    its neighbour, so its absence as a separate peak is no evidence against its species.
    """
    n = prob.n_groups
    mask = np.zeros(n)
    src = np.flatnonzero(active_group & (scale_of_group > 0))
    if src.size == 0:
        return mask
    order = src[np.argsort(prob.wl[src])]
    swl = prob.wl[order]
    w = prob.fwhm_instr
    tgt = np.flatnonzero(prob.scored)  # only scored lines can be missing
    lo = np.searchsorted(swl, prob.wl[tgt] - 1.5 * w[tgt], "left")
    hi = np.searchsorted(swl, prob.wl[tgt] + 1.5 * w[tgt], "right")
    cnt = hi - lo
    if cnt.sum() == 0:
        return mask
    g = np.repeat(tgt, cnt)
    h = order[np.concatenate([np.arange(a, b) for a, b in zip(lo, hi) if b > a])]
    other = prob.element[g] != prob.element[h]
    g, h = g[other], h[other]
    contrib = scale_of_group[h] * prob.r[h] * np.exp(-4.0 * np.log(2.0) * ((prob.wl[h] - prob.wl[g]) / w[g]) ** 2)
    np.add.at(mask, g, contrib)
    return mask


def _solve(prob: _Problem, settings: IdentifySettings):
    """Independent pass, then evidence sharing (and masking) iterated to a fixed point."""
    n_sp = len(prob.species_codes)
    share = np.where(prob.peak >= 0, 1.0, 0.0)
    mask = np.zeros(prob.n_groups)
    results = [None] * n_sp
    evals = [None] * n_sp
    for it in range(settings.iterations + 1):
        for s in range(n_sp):
            evals[s] = _evaluate_species(prob, s, share, mask)
            results[s] = _score(prob, evals[s], share)
        scale_sp = np.array([results[s]["scale"] for s in range(n_sp)])
        active_sp = np.array([results[s]["status"] != "not detected" for s in range(n_sp)])
        new_share = _share(prob, scale_sp[prob.sp_index], active_sp[prob.sp_index])
        new_mask = _masking(prob, scale_sp[prob.sp_index], active_sp[prob.sp_index])
        converged = np.allclose(new_share, share, atol=1e-3) and np.allclose(new_mask, mask, rtol=1e-3)
        share, mask = new_share, new_mask
        if it == settings.iterations or converged:
            for s in range(n_sp):  # final bookkeeping with the converged shares
                evals[s] = _evaluate_species(prob, s, share, mask)
                results[s] = _score(prob, evals[s], share, final=True)
            break
    return results, evals, share


def _fit_temperature(prob: _Problem, members: pd.DataFrame, results, evals, share, settings) -> float | None:
    """Grid search of T minimising the pooled weighted log residual of the found lines (≥ 3 per species).

    For each T the group strengths are recomputed from the member lines and each
    species' amplitude is refitted as the weighted mean log ratio, so only the
    *relative* intensities within a species (the Boltzmann slope) decide T.
    """
    lo, hi, step = settings.temperature_grid_k
    grid = np.arange(lo, hi + 0.5 * step, step)
    use_groups = []
    for s, (res, ev) in enumerate(zip(results, evals)):
        if res["status"] == "detected" and ev["found"].sum() >= 3:
            sel = ev["idx"][ev["found"] & (share[ev["idx"]] >= 0.5)]
            if sel.size >= 3:
                use_groups.append((s, sel))
    if not use_groups:
        return None
    s_all = relative_line_strength(members, grid[:, None])       # (n_T, n_members)
    gidx = members["group"].to_numpy()
    r_T = np.stack([np.bincount(gidx, weights=row, minlength=prob.n_groups) for row in s_all])
    ssr = np.zeros(grid.size)
    dof = 0
    for _s, sel in use_groups:
        obs = share[sel] * prob.peak_area[prob.peak[sel]]
        lr = np.log(obs)[None, :] - np.log(r_T[:, sel])         # (n_T, n_sel)
        la = lr.mean(1, keepdims=True)
        ssr += ((lr - la) ** 2).sum(1)
        dof += sel.size - 1
    if dof < 2:
        return None
    return float(grid[int(np.argmin(ssr))])


# --------------------------------------------------------------------------- public entry


def identify_spectrum(wavelength, spectrum, line_list: pd.DataFrame | None = None, *,
                      settings: IdentifySettings | None = None, resolving_power: float | None = None,
                      medium: str = "air", peaks: pd.DataFrame | None = None) -> Identification:
    """Detect peaks in one preprocessed mean spectrum and identify the elements behind them.

    Peaks are detected above ``k_sigma`` times the local noise ``sigma = 1.4826 MAD(dy) / sqrt(2)``
    (``dy`` the first difference); a database line at ``lambda`` (nm) matches the nearest peak
    within ``tol(lambda) = sqrt((t_f lambda / R)^2 + (k u_cal)^2)`` (``t_f`` = 0.5 instrument FWHM,
    ``k = 2``, ``u_cal`` the wavelength-calibration standard uncertainty, nm).  Within a species the
    relative integrated intensities follow the LTE estimate ``r_i ∝ g_k A_ki / lambda
    exp(-E_k / kT)``; each species is scored ``score = f q c`` (found fraction, agreement of
    relative intensities, number of lines) and classed detected, possible or not detected
    (module docstring and docs/identification.md).

    Parameters
    ----------
    wavelength : (n_pixels,) nm; ``medium`` says whether air or vacuum
    spectrum : (n_pixels,) baseline-free mean spectrum (energy units, docs/architecture.md)
    line_list : line database (columns of :func:`compquant.atomic.load_line_list`); default the shipped one
    settings : :class:`IdentifySettings` (defaults if None)
    resolving_power : R of the instrument (e.g. ``run.instrument["resolving_power"]``);
        ``settings.resolving_power`` wins; estimated from the peak widths when neither is given
    peaks : precomputed peaks (columns of :func:`find_peaks`); detected here when None
    medium : ``"air"`` or ``"vacuum"``, the medium of ``wavelength`` (the database's air
        wavelengths are converted for a vacuum axis)

    Returns
    -------
    :class:`Identification`
        Species, line groups and peaks with their status, score and evidence; the temperature
        (K) and resolving power used.

    Raises
    ------
    InputError
        ``spectrum`` not on the wavelength axis, or an unknown ``medium``.

    See Also
    --------
    compquant.mean_spectrum : the input spectrum of one sample.
    compquant.identify.peaks.find_peaks : the peak detection alone.

    References
    ----------
    .. [1] Rousseeuw & Croux, J. Am. Stat. Assoc. 88 (1993) 1273 (the factor
       1/Phi^-1(3/4) = 1.4826 of the noise estimate).
    .. [2] JCGM 100:2008, Evaluation of measurement data -- Guide to the expression of uncertainty
       in measurement (GUM) (coverage factor 2 of the matching tolerance).
    .. [3] Griem, Plasma Spectroscopy (1964) (Boltzmann distribution of the LTE estimate).
    .. [4] Morton, Astrophys. J. Suppl. Ser. 130 (2000) 403 (air-vacuum conversion).
    .. [5] van Hoof, Galaxies 6 (2018) 63, Atomic Line List v3.00b4 (the shipped line
       database, docs/atomic-data.md).
    .. [6] compquant documentation: docs/identification.md (every rule with its source).

    Examples
    --------
    Every element of the standard HRM-CA-101 (Cu 61 %, Zn 35 %, Pb, Fe, Sn, Ni, Al, Mn; the demo's
    invented certificate) is detected on the demo run, simulated from the shipped database
    (docs/identification.md, section 7, "The matrix on the demo run").

    >>> from compquant import Run, load_method, mean_spectrum, identify_spectrum
    >>> with Run.open("demo_runs/demo-day1.h5") as run:
    ...     wl, mean, _ = mean_spectrum(run, load_method("demo_runs/method.toml"), "HRM-CA-101")
    ...     ident = identify_spectrum(wl, mean, resolving_power=run.instrument.get("resolving_power"))
    >>> ident.elements().query("status == 'detected'").element.tolist()
    ['Zn', 'Ni', 'Cu', 'Fe', 'Sn', 'Mn', 'Pb', 'Al']
    """
    st = settings or IdentifySettings()
    wl = np.asarray(wavelength, float)
    y = np.asarray(spectrum, float)
    if wl.ndim != 1 or y.shape != wl.shape:
        raise InputError(f"spectrum shape {y.shape} does not match the wavelength axis {wl.shape}",
                         where="identification", fix="pass one mean spectrum on its wavelength axis")
    if medium not in ("air", "vacuum"):
        raise InputError(f"medium {medium!r} is not 'air' or 'vacuum'", where="identification",
                         fix="use the run's wavelength medium")
    if line_list is None:
        from compquant.atomic import load_line_list

        line_list = load_line_list()

    # noise and peaks
    y_f = np.where(np.isfinite(y), y, 0.0)
    if st.noise_window and st.noise_window < wl.size:
        sig = local_noise_sigma(y_f, window=int(st.noise_window) | 1)
    else:
        sig = np.full(wl.size, float(noise_sigma(y_f, clip=3.5)))
    if not np.any(sig > 0):
        raise DataQualityError("the spectrum has no noise at all (constant or synthetic without noise)",
                               where="identification",
                               fix="identify a measured mean spectrum, or add the detector noise to a model spectrum")
    sig = np.where(sig > 0, sig, np.max(sig))
    R = st.resolving_power or resolving_power
    source = "method [identify]" if st.resolving_power else ("given (run instrument)" if resolving_power else "")
    if peaks is None:
        peaks = find_peaks(wl, y_f, k_sigma=st.k_sigma, resolving_power=R, min_width_frac=st.min_width_frac,
                           noise=sig, noise_window=st.noise_window or None)
    peaks = peaks.sort_values("centre_nm").reset_index(drop=True)
    if not R:
        R = estimate_resolving_power(peaks)
        source = "estimated from peak widths"
        if R is None:
            pitch = float(np.median(np.diff(wl)))
            R = float(np.median(wl)) / (3.0 * pitch)
            source = "assumed 3-pixel FWHM (too few peaks to estimate)"

    def noise_at(x):
        return np.interp(x, wl, sig)

    def fwhm_instr(x):
        return np.asarray(x, float) / R

    lines0 = _candidate_lines(line_list, float(wl[0]), float(wl[-1]), st, medium)
    T0 = st.temperature_k or st.default_temperature_k
    species_cols = SPECIES_COLUMNS
    if lines0.empty:
        species = pd.DataFrame(columns=species_cols)
        groups = pd.DataFrame(columns=LINE_COLUMNS)
        peaks = peaks.assign(explained_by="", unexplained=True)
        return Identification(species, groups, peaks, float(T0), False, float(R), source, st, sig, wl, y)

    tol = matching_tolerance(lines0["wavelength_nm"].to_numpy(), R, st)
    # keep lines that are strong at either end of the temperature range
    lo_t, hi_t, _ = st.temperature_grid_k
    s_lo = relative_line_strength(lines0, lo_t)
    s_hi = relative_line_strength(lines0, hi_t)
    tmp = lines0.assign(_a=s_lo, _b=s_hi)
    keep = ((tmp.groupby("species")["_a"].rank(ascending=False) <= st.max_lines_per_species)
            | (tmp.groupby("species")["_b"].rank(ascending=False) <= st.max_lines_per_species))
    keep = keep.to_numpy()
    # the strongest lines are scored; every other line of the database in range only *explains*
    # peaks: a weak matrix line (e.g. Fe I 429.412 nm, outside Fe I's 40 strongest) takes its
    # predicted share of its peak, so an absent element's line at the same place is not counted
    # as found on a peak the matrix already accounts for (docs/identification.md, section 4)
    scored = _group_lines(lines0[keep].reset_index(drop=True), tol[keep],
                          relative_line_strength(lines0[keep], T0))
    explain = _group_lines(lines0[~keep].reset_index(drop=True), tol[~keep],
                           relative_line_strength(lines0[~keep], T0))
    n_scored = int(scored["group"].max()) + 1
    members = pd.concat([scored, explain.assign(group=explain["group"] + n_scored)], ignore_index=True)
    prob = _Problem(members, peaks, noise_at, fwhm_instr, st, n_scored=n_scored)
    results, evals, share = _solve(prob, st)
    T = T0
    fitted = False
    if st.temperature_k is None:
        T_fit = _fit_temperature(prob, members, results, evals, share, st)
        if T_fit is not None:
            T = T_fit
            fitted = True
            members["_s"] = relative_line_strength(members, T)
            prob.set_strength(members["_s"].to_numpy(float))
            results, evals, share = _solve(prob, st)

    species, groups = _tables(prob, members, results, evals, share, peaks, T)
    peaks = _explain_peaks(peaks, groups, species)
    return Identification(species, groups, peaks, float(T), fitted, float(R), source, st, sig, wl, y)


def _tables(prob: _Problem, members, results, evals, share, peaks, T):
    n = prob.n_groups
    pred = np.zeros(n)
    snr = np.zeros(n)
    obs = np.zeros(n)
    flags = {k: np.zeros(n, bool) for k in ("expected", "strong", "found", "missing")}
    for ev in evals:
        i = ev["idx"]
        pred[i], snr[i], obs[i] = ev["pred"], ev["snr"], ev["obs"]
        for k in flags:
            flags[k][i] = ev[k]
    # explaining (not scored) lines: predicted with their species' scale, observed = their share
    expl = ~prob.scored
    scale_sp = np.array([res["scale"] for res in results])
    active_sp = np.array([res["status"] != "not detected" for res in results])
    pred[expl] = scale_sp[prob.sp_index[expl]] * prob.r[expl]
    snr[expl] = pred[expl] / (GAUSS_AREA_FACTOR * prob.fwhm_instr[expl] * prob.sigma[expl])
    obs[expl] = share[expl] * prob.peak_area[prob.peak[expl]]
    # group labels: strongest member's line id, all members
    mem = members.sort_values("_s", ascending=False)
    label = mem.groupby("group")["line_id"].first().reindex(range(n)).to_numpy()
    ek = mem.groupby("group")["ek_ev"].first().reindex(range(n)).to_numpy()
    allm = members.sort_values("wavelength_nm").groupby("group")["line_id"].agg(" + ".join).reindex(range(n))
    rmax = pd.Series(prob.r).groupby(prob.species).transform("max").to_numpy()
    pc = peaks["centre_nm"].to_numpy()
    groups = pd.DataFrame({
        "species": prob.species, "element": prob.element, "ion": prob.ion, "group": np.arange(n),
        "line_id": label, "members": allm.to_numpy(), "wavelength_nm": prob.wl, "rel_intensity": prob.r / rmax,
        "ek_ev": ek, "tolerance_nm": prob.tol, "peak_id": prob.peak,
        "peak_centre_nm": np.where(prob.peak >= 0, pc[np.maximum(prob.peak, 0)] if len(pc) else np.nan, np.nan),
        "delta_nm": prob.delta, "share": share, "observed_area": obs, "predicted_area": pred,
        "predicted_snr": snr, **flags, "scored": prob.scored,
    })
    # the explaining lines of species that are not detected or possible explain nothing: left out
    groups = groups[prob.scored | active_sp[prob.sp_index]].reset_index(drop=True)
    top_found = (groups[groups["found"]].sort_values("observed_area", ascending=False)
                 .groupby("species")["line_id"].agg(lambda x: "; ".join(x.head(3))))
    top_missing = (groups[groups["missing"]].sort_values("predicted_snr", ascending=False)
                   .groupby("species")["line_id"].agg(lambda x: "; ".join(x.head(3))))
    rows = []
    for s, res in enumerate(results):
        sp = prob.species_codes[s]
        i0 = evals[s]["idx"][0]
        rows.append({
            "element": prob.element[i0], "ion": int(prob.ion[i0]), "species": sp,
            "status": res["status"], "score": round(res["score"], 4), "lines_found": round(res["lines_found"], 2),
            "lines_expected": res["lines_expected"], "lines_missing": res["lines_missing"],
            "rms_log_residual": res["rms_log_residual"], "rank_correlation": res["rank_correlation"],
            "scale": res["scale"], "best_lines": top_found.get(sp, ""),
            "missing_lines": top_missing.get(sp, ""), "temperature_k": T,
        })
    species = pd.DataFrame(rows, columns=SPECIES_COLUMNS)
    species["_rank"] = species["status"].map(_STATUS_RANK)
    species = species.sort_values(["_rank", "score", "species"], ascending=[True, False, True])
    return species.drop(columns="_rank").reset_index(drop=True), groups


def _explain_peaks(peaks: pd.DataFrame, groups: pd.DataFrame, species: pd.DataFrame) -> pd.DataFrame:
    active = set(species.loc[species["status"] != "not detected", "species"])
    g = groups[(groups["peak_id"] >= 0) & groups["species"].isin(active) & (groups["share"] >= 0.1)]
    expl = g.sort_values("share", ascending=False).groupby("peak_id")["line_id"].agg("; ".join)
    out = peaks.copy()
    out["explained_by"] = out.index.map(expl).fillna("").astype(str) if len(out) else pd.Series(dtype=str)
    out["unexplained"] = out["explained_by"] == ""
    return out


__all__ = ["Identification", "SPECIES_COLUMNS", "STATUSES", "element_summary", "estimate_resolving_power",
           "identify_spectrum", "matching_tolerance", "relative_line_strength"]
