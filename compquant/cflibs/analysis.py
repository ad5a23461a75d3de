"""``analyse_cf``: calibration-free composition of one sample from its line table.

Steps (equations and sources in docs/calibration-free.md):

1. join the line table with the atomic data, drop flagged / unusable lines;
2. electron density from H-alpha, Stark lines, a fixed value, or the Saha balance
   (fitted jointly with T);
3. joint Saha–Boltzmann (or Boltzmann) fit: one T, one intercept per element (species);
4. self-absorption: detection, and optionally curve-of-growth correction (known plasma
   length or fitted columnar density) or the internal-reference-line method;
5. closure → number fractions → mass fractions (optionally one element fixed);
6. LTE checks (McWhirter; transient and inhomogeneity where timing/lengths are known);
7. Monte Carlo over intensities, A_ki and the nₑ inputs, batched in one solve.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
from scipy.optimize import minimize_scalar
from scipy.special import chdtrc

from compquant.atomic import species_name
from compquant.cflibs.atomicdata import default_atomic_data
from compquant.cflibs.capture import window_capture_fraction
from compquant.cflibs.consistency import plasma_checks
from compquant.cflibs.electron_density import (
    FixedNe,
    HAlphaNe,
    StarkLinesNe,
    doppler_fwhm_nm,
    lorentz_from_voigt,
    stark_width_linear,
)
from compquant.cflibs.fitting import paule_mandel_scatter, wls_batch
from compquant.cflibs.lineset import LineSet, prepare_lines
from compquant.cflibs.lte import check_lte
from compquant.cflibs.result import CFResult, ElementResult
from compquant.cflibs.screening import nondetection_conflicts, outlier_lines, too_few_lines
from compquant.cflibs.selfabs import (
    EL_SHERBINI_ALPHA,
    sa_factor,
    sa_from_width,
    sa_reference_line,
    tau0_slab,
)
from compquant.cflibs.settings import CFSettings
from compquant.cflibs.solver import Model, Solution
from compquant.errors import AtomicDataError, DataQualityError, InputError, PhysicsError
from compquant.plasma.constants import KB_EV as K_B_EV  # one constant; the body keeps its local name
from compquant.plasma.constants import LN_SAHA_PREFACTOR


class CFWarning(UserWarning):
    """A calibration-free result was produced with a caveat (also stored in the result)."""


#: smallest window capture fraction corrected for (a line that much wider than its window is
#: measured mostly as background; its correction would rest on the assumed widths alone)
CAPTURE_MIN = 0.3

_INSTR_KEYS = ("instrument_fwhm_nm", "resolution_fwhm_nm", "fwhm_nm", "resolution_nm")


def _instrument_width(settings, instrument, warn):
    """Instrumental FWHM as a function of wavelength (nm → nm).

    From ``[cf] instrument_fwhm_nm`` or ``[cf] resolving_power`` (FWHM = λ/R), else the
    run's instrument attributes (same names), else 0 with a warning.
    """
    if settings.instrument_fwhm_nm is not None:
        v = float(settings.instrument_fwhm_nm)
        return lambda wl: np.full(np.shape(wl), v)
    if settings.resolving_power is not None:
        r = float(settings.resolving_power)
        return lambda wl: np.asarray(wl, float) / r
    instrument = instrument or {}
    for k in _INSTR_KEYS:
        if k in instrument:
            try:
                v = float(instrument[k])
            except (TypeError, ValueError):
                continue
            if math.isfinite(v) and v >= 0:
                return lambda wl, v=v: np.full(np.shape(wl), v)
    if "resolving_power" in instrument:
        try:
            r = float(instrument["resolving_power"])
        except (TypeError, ValueError):
            r = float("nan")
        if math.isfinite(r) and r > 0:
            return lambda wl: np.asarray(wl, float) / r
    warn("instrumental FWHM unknown ([cf] instrument_fwhm_nm / resolving_power or run instrument "
         "attrs): width-based nₑ assumes 0")
    return lambda wl: np.zeros(np.shape(wl))


def _gate_delay_s(acquisition) -> float | None:
    if not acquisition:
        return None
    for key, scale in (("gate_delay_s", 1.0), ("gate_delay_us", 1e-6), ("gate_delay_ns", 1e-9),
                       ("delay_s", 1.0), ("delay_us", 1e-6), ("delay_ns", 1e-9)):
        if key in acquisition:
            try:
                v = float(acquisition[key]) * scale
            except (TypeError, ValueError):
                continue
            if math.isfinite(v) and v > 0:
                return v
    return None


def _select_sample(line_table: pd.DataFrame, sample_id, where):
    if not isinstance(line_table, pd.DataFrame):
        raise InputError("line table must be a pandas DataFrame", where=where,
                         fix="pass the table from compquant.lines.measure_run")
    if "sample_id" in line_table.columns:
        ids = list(dict.fromkeys(line_table["sample_id"].astype(str)))
        if sample_id is None:
            if len(ids) != 1:
                raise InputError(f"line table holds {len(ids)} samples", where=where,
                                 fix="pass sample_id=..., or use analyse_cf_samples")
            sample_id = ids[0]
        rows = line_table[line_table["sample_id"].astype(str) == str(sample_id)]
        if rows.empty:
            raise InputError(f"sample {sample_id!r} not in the line table", where=where,
                             fix=f"choose one of {', '.join(ids[:10])}")
    else:
        rows = line_table
        sample_id = "sample" if sample_id is None else sample_id
    return str(sample_id), rows


class _Analysis:
    """State of one analysis; methods are the steps."""

    def __init__(self, rows, sample_id, settings, atomic, acquisition, instrument, one_point, where,
                 elements=None, drop=None, basis="energy", windows=None, measurement=None):
        self.s = settings
        self.atomic = atomic
        self.where = where
        self.sample_id = sample_id
        self.warnings: list[str] = []
        self.flags: list[str] = []
        self.w_instr_fn = _instrument_width(settings, instrument or {}, self._warn)
        self.elements_requested = settings.elements_for(sample_id) if elements is None else elements
        self.L, self.excluded, self.h_alpha, self.nd = prepare_lines(
            rows, atomic, settings, where, w_instr_fn=self.w_instr_fn, elements=self.elements_requested,
            drop=drop)
        if basis == "photon":  # photon radiance → energy radiance: I_E ∝ I_ph · hc/λ (§1)
            f = 500.0 / self.L.wl
            self.L.intensity, self.L.u_intensity = self.L.intensity * f, self.L.u_intensity * f
            self.nd.intensity = self.nd.intensity * 500.0 / self.nd.wl
        self.basis = basis
        self.windows = dict(windows) if windows else None
        self.ln_capture = np.zeros(self.L.n)  # ln of each line's window capture fraction (§1a)
        self.dln_capture = np.zeros(self.L.n)  # its change for a +u_rel change of the Stark widths
        self.undetermined: dict[str, list[str]] = {}
        self.rejected: list[dict] = []
        self.upper_limit_checks: list[dict] = []
        self.acq = acquisition or {}
        self.w_instr = self.w_instr_fn(self.L.wl)  # per line
        self.one_point = one_point
        self._apply_one_point()
        L = self.L
        rel = np.where(L.intensity > 0, L.u_intensity / L.intensity, 0.0)
        self.u_y = np.sqrt(rel**2 + L.u_ln_a**2 + 0.0)
        self.u_y = np.maximum(self.u_y, settings.u_rel_floor)
        self.w = 1.0 / self.u_y**2
        self.u_model = 0.0  # Paule–Mandel scatter of the ordinates beyond their u (§2)
        self.shot_dev = _shot_deviations(measurement, sample_id, self.L.line_id)
        self.model = Model(L, atomic, settings)
        self.mass_line = np.array([atomic.mass_u(e) for e in L.element])
        self.sa = np.ones(L.n)
        self.sa_info: dict = {"method": settings.self_absorption}

    def _warn(self, msg):
        if msg in self.warnings:
            return
        self.warnings.append(msg)
        warnings.warn(f"{self.where}: {msg}", CFWarning, stacklevel=3)

    # -- one-point calibration ---------------------------------------------------------
    def _apply_one_point(self):
        self.ln_zeta = np.zeros(self.L.n)
        self.no_factor = set()
        if self.one_point is None:
            return
        f = self.one_point.factors
        for i, lid in enumerate(self.L.line_id):
            if lid in f:
                self.ln_zeta[i] = math.log(f[lid])
            else:
                self.no_factor.add(self.L.element[i])
        if self.no_factor:
            self._warn("one-point factors missing for lines of " + ", ".join(sorted(self.no_factor)))

    # -- nₑ ------------------------------------------------------------------------------
    def ne_candidates(self, T, sa=None):
        """All width/fixed estimators available (name → estimator)."""
        out = {}
        if self.h_alpha is not None:
            h = HAlphaNe(self.h_alpha, float(self.w_instr_fn(self.h_alpha["wavelength_nm"])), self.s)
            if h.usable(T):
                out["h_alpha"] = h
            else:
                self._warn("H-alpha width not above instrumental + Doppler width: not used for nₑ")
        ok = StarkLinesNe.eligible(self.L, self.w_instr, T, self.mass_line)
        if sa is not None and np.any(ok & (sa >= self.s.sa_flag_below)):
            ok &= sa >= self.s.sa_flag_below  # prefer lines that are nearly thin
        if np.any(ok):
            out["stark"] = StarkLinesNe(self.L, self.mass_line, self.w_instr, self.s, sa=sa,
                                        idx=np.flatnonzero(ok))
        if self.s.ne_fixed_cm3 is not None:
            out["fixed"] = FixedNe(self.s.ne_fixed_cm3, self.s.ne_fixed_u_rel)
        return out

    def choose_ne(self, cands):
        m = self.s.ne_method
        if m == "auto":
            for k in ("h_alpha", "stark"):
                if k in cands:
                    return k, cands[k]
            if self.s.fit == "boltzmann" or Model(self.L, self.atomic, self.s).both_stage_elements:
                return "saha", None
            if "fixed" in cands:
                self._warn("electron density from the method's fixed value: " + self.ne_missing())
                return "fixed", cands["fixed"]
            raise PhysicsError("electron density cannot be found: " + self.ne_missing(), where=self.where,
                               fix="measure H I 656.28 nm or lines with Stark parameters, add ion lines of "
                               "an element with neutral lines, or give [cf] ne_fixed_cm3")
        if m == "saha":
            return "saha", None
        if m not in cands:
            raise PhysicsError(f"electron density method {m!r} has no usable data", where=self.where,
                               fix="use ne_method = 'auto' or measure the needed line widths")
        return m, cands[m]

    def ne_missing(self) -> str:
        """What each electron-density route lacks, in words (for messages)."""
        L = self.L
        parts = []
        parts.append("no usable H I 656.28 nm width" if self.h_alpha is None else
                     "H I 656.28 nm not broader than instrument + Doppler")
        have = np.isfinite(L.stark_w) & (L.stark_w > 0)
        parts.append("no line with Stark parameters" if not np.any(have) else
                     "no line with Stark parameters has a measured width above instrument + Doppler")
        stages = {e: sorted(set(L.ion[L.element == e])) for e in sorted(set(L.element))}
        both = [e for e, z in stages.items() if z == [1, 2]]
        if not both:
            desc = ", ".join(f"{e} {'/'.join('I' * z for z in zz)}" for e, zz in stages.items())
            parts.append(f"no element with both neutral and ion lines ({desc})")
        if self.s.ne_fixed_cm3 is None:
            parts.append("no [cf] ne_fixed_cm3")
        return "; ".join(parts)

    # -- central solve -----------------------------------------------------------------
    def solve_central(self, sa, ne_name, ne_est, T0=None) -> Solution:
        ln_i = np.log(self.L.intensity) - np.log(sa) - self.ln_zeta
        T0 = getattr(self, "_T_warm", None) if T0 is None else T0
        sol = self.model.solve(ln_i[None, :], 0.0, self.w, ne_est, strict=True,
                               T0=None if T0 is None else np.array([T0]))
        self._T_warm = float(sol.T[0])
        return sol

    def absolute_species(self, sol: Solution, j: int = 0):
        """Absolute number density (cm⁻³) per species from nₑ and charge neutrality."""
        sp = sol.ln_n_species
        names = list(sp)
        lns = np.array([sp[k][j] for k in names])
        z = np.array([int(len(k.split()[1]) if k.split()[1] != "IV" else 4) - 1 for k in names])
        charged = z > 0
        ln_e = np.logaddexp.reduce(lns[charged] + np.log(z[charged]))
        lnK = math.log(sol.ne[j]) - ln_e
        return {k: math.exp(v + lnK) for k, v in zip(names, lns)}

    def lorentz_thin(self, T, ne, sa, lines=None, mass=None, w_instr=None):
        """Thin-line Stark FWHM per line for the absorption profile.

        From the line's Stark parameters at nₑ; lines without them get ``[cf]
        stark_fallback_fwhm_nm`` at ``stark_fallback_ne_cm3`` (scaled linearly with nₑ) when
        given, else none (Doppler-only absorption profile) unless ``[cf] sa_width_from_measured``
        asks to take the Lorentzian part of the measured FWHM (less the El Sherbini
        broadening by self-absorption) — measured widths of self-absorbed Doppler-dominated
        lines are broadened in a way no Lorentzian explains, so this is off by default.
        """
        L = self.L if lines is None else lines
        mass_line = self.mass_line if mass is None else mass
        w_ins = self.w_instr if w_instr is None else w_instr
        wl = np.zeros(L.n)
        have = np.isfinite(L.stark_w) & (L.stark_w > 0) & np.isfinite(L.stark_ne) & (L.stark_ne > 0)
        t_ref = np.where(np.isfinite(L.stark_t), L.stark_t, T)
        wl[have] = stark_width_linear(ne, L.stark_w[have], L.stark_ne[have], T, t_ref[have],
                                      self.s.stark_t_exponent, L.stark_p[have])
        if self.s.stark_fallback_fwhm_nm:
            # assumed Stark FWHM for lines without data, linear in nₑ ([cf] stark_fallback_*)
            wl[~have] = self.s.stark_fallback_fwhm_nm * ne / self.s.stark_fallback_ne_cm3
            return wl
        meas = ~have & np.isfinite(L.fwhm) & (L.fwhm > 0) & bool(self.s.sa_width_from_measured)
        if np.any(meas):
            wg = np.sqrt(w_ins[meas] ** 2 + doppler_fwhm_nm(L.wl[meas], T, mass_line[meas]) ** 2)
            wl[meas] = lorentz_from_voigt(L.fwhm[meas], wg) * sa[meas] ** (-EL_SHERBINI_ALPHA)
        return wl

    def _u_per_line(self, atomic, T: float) -> np.ndarray:
        """U(T) of each line's species (one partition-function call per species)."""
        species = self.L.species
        u = {sp: float(atomic.partition_function(sp, np.array([T]))[0]) for sp in dict.fromkeys(species)}
        return np.array([u[sp] for sp in species])

    def sa_cog(self, sol: Solution, length_cm: float, sa_prev):
        """Curve-of-growth SA of every line for a slab of length ``length_cm``."""
        L = self.L
        T = float(sol.T[0])
        ne = float(sol.ne[0])
        nabs = self.absolute_species(sol)
        n_sp = np.array([nabs[s] for s in L.species])
        u_sp = self._u_per_line(self.model.atomic, T)
        wg = doppler_fwhm_nm(L.wl, T, self.mass_line)
        wlz = self.lorentz_thin(T, ne, sa_prev)
        tau = tau0_slab(L.wl, L.gA, L.ei, T, n_sp, u_sp, length_cm, wg, wlz)
        return sa_factor(tau, wg, wlz), tau

    def detect_linear_cog(self, sol):
        """Curve-of-growth departure test (detection only, one extra linear parameter).

        To first order in the optical depth, ln SA_i ≈ −κ_i τ_i with τ_i = L·t_i (t_i the peak
        optical depth per cm from the thin solution's densities) and κ_i = −d ln SA/dτ at
        τ → 0 of the line's profile; so adding the column −κ_i t_i to the thin fit's design
        estimates the plasma length L (columnar density) with its standard uncertainty.
        L/u(L) > 2 counts as detected self-absorption; the per-line SA is then the full curve
        of growth at that L.
        """
        L = self.L
        T = float(sol.T[0])
        ne = float(sol.ne[0])
        wg = doppler_fwhm_nm(L.wl, T, self.mass_line)
        wlz = self.lorentz_thin(T, ne, np.ones(L.n))
        nabs = self.absolute_species(sol)
        n_sp = np.array([nabs[s] for s in L.species])
        u_sp = self._u_per_line(self.atomic, T)
        t = tau0_slab(L.wl, L.gA, L.ei, T, n_sp, u_sp, 1.0, wg, wlz)  # per cm
        eps = 1e-4
        kappa = -np.log(sa_factor(np.full(L.n, eps), wg, wlz)) / eps
        a = kappa * t
        X = np.column_stack([sol.X, -a])
        fit = wls_batch(X, sol.y, self.w, scale_by_chi2=self.s.scale_by_chi2)
        L_est, u_L = float(fit.beta[0, -1]), float(np.sqrt(fit.cov[0, -1, -1]))
        detected = L_est > 0 and L_est > 2.0 * u_L
        self.sa_info.update(plasma_length_mm=max(L_est, 0.0) * 10.0, u_plasma_length_mm=u_L * 10.0,
                            fitted=True, test="linearised curve of growth", detected=bool(detected),
                            chi2_thin=float(sol.fit.chi2[0]), chi2_fitted=float(fit.chi2[0]))
        if detected:
            self.sa_detect_cog = sa_factor(L_est * t, wg, wlz)
            self.sa_detect_cog_u = np.abs(self.sa_detect_cog - sa_factor(max(L_est - u_L, 0.0) * t, wg, wlz))

    def drop_lines(self, mask, reason: str):
        """Remove lines (e.g. too optically thick to correct) and rebuild the model."""
        keep = ~np.asarray(mask)
        for lid, el in zip(self.L.line_id[~keep], self.L.element[~keep]):
            self.excluded.append({"line_id": str(lid), "element": str(el), "reason": reason})
        if not np.any(keep):
            raise DataQualityError("no line left after removing " + reason, where=self.where,
                                   fix="use weaker lines or a shorter plasma length")
        gone = set(self.L.element) - set(self.L.element[keep])
        self.L = self.L.subset(keep)
        for name in ("u_y", "w", "ln_zeta", "mass_line", "w_instr", "sa", "ln_capture", "dln_capture"):
            setattr(self, name, getattr(self, name)[keep])
        if self.shot_dev is not None:
            self.shot_dev = self.shot_dev[:, keep]
        self.model = Model(self.L, self.atomic, self.s)
        for e in sorted(gone):
            self._warn(f"element {e}: no line left after removing lines ({reason})")
            self.undetermined.setdefault(e, []).append(f"no line left after removing lines ({reason})")

    def iterate_cog(self, length_cm, ne_pick, max_iter=60, tol=1e-6, allow_drop=False):
        """Fixed point SA → (T, nₑ, composition) → τ₀ → SA for a slab of length ``length_cm``.

        With ``allow_drop``, lines whose converged SA is below ``[cf] sa_min_factor`` are
        removed (their correction would be unreliable) and the iteration restarts.
        """
        while True:
            sa = np.ones(self.L.n)
            tau = np.zeros(self.L.n)
            for _ in range(max_iter if length_cm > 0 else 0):
                ne_name, ne_est = ne_pick(sa)
                sol = self.solve_central(sa, ne_name, ne_est)
                raw, tau = self.sa_cog(sol, length_cm, sa)
                new = np.maximum(raw, self.s.sa_min_factor)
                step = np.max(np.abs(np.log(new) - np.log(sa)))
                sa = np.exp(0.5 * np.log(sa) + 0.5 * np.log(new))  # damped fixed point
                if step < tol:
                    break
            thick = raw < self.s.sa_min_factor if length_cm > 0 else np.zeros(self.L.n, bool)
            if allow_drop and np.any(thick) and self.L.n > 1:
                # remove the thickest line only, then re-solve: the others may look thinner once
                # the worst line no longer biases T and the composition
                worst = np.zeros(self.L.n, bool)
                worst[int(np.argmin(raw))] = True
                self.sa = np.ones(self.L.n)
                self.drop_lines(worst, f"too optically thick (SA < {self.s.sa_min_factor})")
                continue
            break
        ne_name, ne_est = ne_pick(sa)
        sol = self.solve_central(sa, ne_name, ne_est)
        return sa, sol, tau, ne_name, ne_est

    def sa_of_beta(self, beta, length_cm, ne_est, groups):
        """SA of every line implied by the fit parameters β (T, intercepts[, ln nₑ]) and L."""
        m = beta[0]
        T = np.array([-1.0 / (K_B_EV * m)])
        ne = np.exp(np.array([beta[-1]])) if ne_est is None else np.atleast_1d(ne_est(T))[:1]
        ln_n_el, ln_sp = self.model._composition(beta[None, :], groups, T, ne)
        fake = Solution(T=T, ne=ne, u_ln_ne_fit=None, slope=np.array([m]), u_slope=np.zeros(1), fit=None,
                        X=None, y=None, groups=groups, elements=self.model.elements, ln_n_el=ln_n_el,
                        ln_n_species=ln_sp, number_fraction=None, mass_fraction=None,
                        valid=np.ones(1, bool), iterations=0, ne_from_fit=ne_est is None)
        return self.sa_cog(fake, length_cm, np.ones(self.L.n))[0], T[0], ne[0]

    def initial_beta(self, T0, ne_est, X, y_raw):
        """Fit parameters with the slope fixed at −1/kT0 (a start that needs no negative slope)."""
        m0 = -1.0 / (K_B_EV * T0)
        ne0 = 1e17 if ne_est is None else float(np.atleast_1d(ne_est(np.array([T0])))[0])
        shift = LN_SAHA_PREFACTOR + 1.5 * math.log(T0) + float(
            self.model.lowering(np.array([T0]), np.array([ne0]), 1)[0]) / (K_B_EV * T0)
        if ne_est is not None:
            shift -= math.log(ne0)
        r = y_raw - np.where(self.model.is_ion, shift, 0.0) - m0 * X[:, 0]
        A = X[:, 1:] * np.sqrt(self.w)[:, None]
        rest, *_ = np.linalg.lstsq(A, r * np.sqrt(self.w), rcond=None)
        return np.concatenate([[m0], rest])

    def _residual_fn(self, X, groups, ne_est, fit_length, length_cm):
        """Weighted residuals of the self-absorbed model for parameters θ (β[, ln L])."""
        s = self.s
        ne_free = ne_est is None
        ion = self.model.is_ion
        y_raw = np.log(self.L.intensity) + self.model.y0 - self.ln_zeta
        sw = np.sqrt(self.w)
        p = X.shape[1]
        big = np.full(self.L.n, 1e3)

        def resid(theta):
            beta = theta[:p]
            L_cm = math.exp(theta[-1]) if fit_length else length_cm
            m = beta[0]
            if not (m < 0):
                return big
            T = -1.0 / (K_B_EV * m)
            try:
                sa_i, _T, ne_ = self.sa_of_beta(beta, L_cm, ne_est, groups)
            except (PhysicsError, FloatingPointError, ValueError):
                return big
            shift = LN_SAHA_PREFACTOR + 1.5 * math.log(T) + float(
                self.model.lowering(np.array([T]), np.array([ne_]), 1)[0]) / (K_B_EV * T)
            if not ne_free:
                shift -= math.log(ne_)
            pred = X @ beta + np.where(ion, shift, 0.0) + np.log(np.maximum(sa_i, 1e-300))
            r = sw * (y_raw - pred)
            return r if np.all(np.isfinite(r)) else big

        lo = np.full(p + fit_length, -np.inf)
        hi = np.full(p + fit_length, np.inf)
        lo[0], hi[0] = -1.0 / (K_B_EV * 0.5 * s.t_min_k), -1.0 / (K_B_EV * 2.0 * s.t_max_k)
        if ne_free:
            lo[p - 1], hi[p - 1] = math.log(1e13), math.log(1e20)
        if fit_length:
            lo[-1], hi[-1] = math.log(1e-6), math.log(10.0)
        return resid, y_raw, (lo, hi)

    def _lsq(self, resid, theta0, bounds, coarse):
        from scipy.optimize import least_squares

        lo, hi = bounds
        span = np.where(np.isfinite(hi - lo), hi - lo, 1.0)
        th0 = np.clip(theta0, np.where(np.isfinite(lo), lo + 1e-6 * span, -np.inf),
                      np.where(np.isfinite(hi), hi - 1e-6 * span, np.inf))
        try:
            res = least_squares(resid, th0, method="trf", bounds=(lo, hi), x_scale="jac",
                                max_nfev=60 if coarse else 200, xtol=1e-6 if coarse else 1e-10,
                                ftol=1e-6 if coarse else 1e-12)
        except (ValueError, FloatingPointError):
            return None
        return float(np.sum(res.fun**2)), res.x

    def nls_selfabs(self, length_cm, ne_pick, fit_length: bool, coarse: bool = False):
        """Self-absorbed Saha–Boltzmann fit by nonlinear least squares.

        The model ordinate of line i is the optically thin one plus ln SA_i, where SA_i
        follows from the curve of growth of a homogeneous slab whose densities are those of
        the current parameters (T, intercepts → closure, nₑ → absolute scale by charge
        neutrality) and whose length L is given or fitted (columnar density n·L,
        Cristoforetti & Tognoni 2013).  Minimises Σ w_i (y_i − ŷ_i)² with
        :func:`scipy.optimize.least_squares` (bounded T, nₑ, L).  When L is fitted, the fit
        is first followed by continuation along a logarithmic grid of L from nearly thin to
        1 cm, each step warm-started from the previous one, which keeps it on the physical
        branch (a free start can settle on a hot, dense, thin false minimum); the best grid
        point is then refined with L free.  Returns ``(sa, sol, tau, ne_name, ne_est,
        length_cm, chi2)``.
        """
        s = self.s
        sa = np.ones(self.L.n)
        L_cm = length_cm
        chi2 = float("nan")
        for _outer in range(2):
            ne_name, ne_est = ne_pick(sa)
            X, groups = self.model.design(ne_est is None)
            # a start: the plain fit of the current SA, else a fit with the slope fixed at T_start
            try:
                b0 = self.solve_central(sa, ne_name, ne_est).fit.beta[0].copy()
            except PhysicsError:
                y_raw = np.log(self.L.intensity) + self.model.y0 - self.ln_zeta
                b0 = self.initial_beta(s.t_start_k, ne_est, X, y_raw)
            if fit_length:
                resid_f, _, bounds_f = self._residual_fn(X, groups, ne_est, False, None)
                best = None
                beta = b0
                n_grid = 7 if coarse else 11
                for L_try in np.geomspace(1e-5, 1.0, n_grid):  # cm
                    resid_g, _, bounds_g = self._residual_fn(X, groups, ne_est, False, float(L_try))
                    out = self._lsq(resid_g, beta, bounds_g, coarse=True)
                    if out is None:
                        continue
                    chi_g, beta = out
                    if best is None or chi_g < best[0]:
                        best = (chi_g, beta.copy(), float(L_try))
                if best is None:
                    raise PhysicsError("the self-absorbed Saha–Boltzmann fit found no solution",
                                       where=f"{self.where}: self-absorption correction",
                                       fix="use weaker lines, or set self_absorption = 'detect'")
                resid, _, bounds = self._residual_fn(X, groups, ne_est, True, None)
                th0 = np.concatenate([best[1], [math.log(best[2])]])
                out = self._lsq(resid, th0, bounds, coarse)
                chi2, th = out if out is not None and out[0] <= best[0] else (best[0], th0)
                L_cm = math.exp(th[-1])
                beta = th[:-1]
            else:
                resid, _, bounds = self._residual_fn(X, groups, ne_est, False, length_cm)
                cands = [b0] + [self.initial_beta(T0, ne_est, X, np.log(self.L.intensity) + self.model.y0
                                                  - self.ln_zeta) for T0 in (s.t_start_k, 0.75 * s.t_start_k,
                                                                              1.35 * s.t_start_k)]
                best = None
                for c in cands[: 2 if coarse else None]:
                    out = self._lsq(resid, c, bounds, coarse)
                    if out is not None and (best is None or out[0] < best[0]):
                        best = out
                    # a start that fits within the noise (χ²/ν ≤ 2) needs no other start
                    if best is not None and best[0] <= 2.0 * max(self.L.n - X.shape[1], 1):
                        break
                if best is None:
                    raise PhysicsError("the self-absorbed Saha–Boltzmann fit found no solution",
                                       where=f"{self.where}: self-absorption correction",
                                       fix="check the plasma length or use weaker lines")
                chi2, beta = best
            sa_new = np.maximum(self.sa_of_beta(beta, L_cm, ne_est, groups)[0], 1e-300)
            step = float(np.max(np.abs(np.log(sa_new) - np.log(sa))))
            sa = sa_new
            if step < 1e-4 or ne_est is None:  # nₑ from the Saha balance does not depend on SA
                break
        ne_name, ne_est = ne_pick(sa)
        sol = self.solve_central(np.maximum(sa, s.sa_min_factor), ne_name, ne_est)
        _, tau = self.sa_cog(sol, L_cm, sa)
        return sa, sol, tau, ne_name, ne_est, L_cm, chi2

    def _can_drop(self, mask, ne_free: bool) -> bool:
        """Would the fit still determine T (and nₑ when fitted) without the lines in ``mask``?"""
        keep = ~np.asarray(mask)
        if keep.sum() < 2:
            return False
        try:
            sub = Model(self.L.subset(keep), self.atomic, self.s)
            if ne_free and self.s.fit == "saha-boltzmann" and not sub.both_stage_elements:
                return False
            sub.design(ne_free)
        except (PhysicsError, AtomicDataError):
            return False
        return True

    def selfabs_corrected(self, length_cm, ne_pick, fit_length: bool):
        """:meth:`nls_selfabs`, removing the thickest line while any SA < sa_min_factor.

        A line is kept (its correction capped and flagged) when removing it would leave the fit
        unable to determine T or nₑ.
        """
        kept: set[str] = set()
        while True:
            out = self.nls_selfabs(length_cm, ne_pick, fit_length)
            sa = out[0]
            ne_free = out[4] is None
            thick = (sa < self.s.sa_min_factor) & ~np.isin(self.L.line_id, list(kept))
            if not np.any(thick):
                return out
            # hopeless lines (SA < sa_min/3) go at once if the fit survives; else the worst one only
            mask = thick & (sa < self.s.sa_min_factor / 3.0)
            if not np.any(mask) or not self._can_drop(mask, ne_free):
                mask = np.zeros(self.L.n, bool)
                for i in np.argsort(np.where(thick, sa, np.inf)):
                    if not thick[i]:
                        break
                    trial = np.zeros(self.L.n, bool)
                    trial[i] = True
                    if self._can_drop(trial, ne_free):
                        mask = trial
                        break
                    kept.add(str(self.L.line_id[i]))
                if not np.any(mask):
                    if kept:
                        self._warn("lines kept although too optically thick for a reliable correction "
                                   "(the fit needs them): " + ", ".join(sorted(kept)))
                    return out
            self.sa = np.ones(self.L.n)
            self.drop_lines(mask, f"too optically thick (SA < {self.s.sa_min_factor})")

    def run(self, mc_draws, seed) -> CFResult:
        self.solve()
        return self.build(mc_draws, seed)

    def solve(self):
        """Plasma and line solution (T, nₑ, SA factors) of the current lines; no closure yet."""
        s = self.s

        def ne_pick(sa):
            T_guess = self._T_guess
            cands = self.ne_candidates(T_guess, sa=sa if s.self_absorption != "none" else None)
            return self.choose_ne(cands)

        self._T_guess = s.t_start_k
        if self.windows:
            self.apply_window_capture(ne_pick)
        # first pass without self-absorption correction
        ne_name, ne_est = ne_pick(None)
        try:
            sol = self.solve_central(self.sa, ne_name, ne_est)
            for _ in range(3):  # T-dependence of the width estimators (Doppler part) is weak
                self._T_guess = float(sol.T[0])
                ne_name, ne_est = ne_pick(None)
                sol = self.solve_central(self.sa, ne_name, ne_est)
        except PhysicsError:
            if s.self_absorption not in ("curve_of_growth", "columnar"):
                raise
            sol = None  # strongly self-absorbed: the corrected fit below starts without it
        if sol is not None and s.self_absorption in ("detect", "none", "reference_line"):
            sol = self.consistent_weights(sol, ne_pick)
        tau = None
        length_cm = None
        mode = s.self_absorption
        if mode == "curve_of_growth":
            length_cm = s.plasma_length_mm / 10.0
            self.sa, sol, tau, ne_name, ne_est, _, _ = self.selfabs_corrected(length_cm, ne_pick, False)
            self.sa_info.update(plasma_length_mm=s.plasma_length_mm, fitted=False)
        elif mode == "columnar":
            chi_thin = float(sol.fit.chi2[0]) if sol is not None else float("inf")
            self.sa, sol, tau, ne_name, ne_est, length_cm, chi = self.selfabs_corrected(None, ne_pick, True)
            self.sa_info.update(plasma_length_mm=length_cm * 10.0, fitted=True,
                                chi2_thin=chi_thin, chi2_fitted=chi)
            if not (1.01e-6 < length_cm < 0.99 * 10.0):
                self.flags.append("sa_length_at_bound")
                self._warn(f"fitted plasma length {length_cm * 10:.3g} mm is at the limit of the search: "
                           "the self-absorption model does not describe these lines well (check the "
                           "Stark widths assumed for the absorption profile)")
        elif mode == "detect":
            self.detect_linear_cog(sol)
        elif mode == "reference_line":
            self.sa, sol, ne_name, ne_est = self.reference_line(sol, ne_pick)
        self._T_guess = float(sol.T[0])
        self.sol = sol
        self.ne_name, self.ne_est = ne_name, ne_est
        self.tau = tau
        return sol

    def consistent_weights(self, sol, ne_pick):
        """Give every ordinate the extra variance s² of :func:`paule_mandel_scatter` and re-solve
        (twice: T moves the ion rows a little).

        The ordinates' u (intensity, A_ki grade) does not hold blends, side-band interference or
        other unstated effects; in line-rich spectra these move lines by 10–30 % while a grade-A
        line claims 2 %, and the few smallest-u lines then decide T and nₑ alone.  With
        u_i² + s² the weights follow the scatter actually seen (Paule & Mandel 1982); s enters
        the Monte Carlo as independent extra noise on every line (§8) and is reported as
        ``fit.model_scatter_ln``.  Thin modes only: in the self-absorption fits the scatter of
        the thin solution is the self-absorption being fitted.
        """
        for _ in range(2):
            s_new = paule_mandel_scatter(sol.X, sol.y[0], self.u_y)
            if abs(s_new - self.u_model) <= 1e-4 * max(s_new, 1e-12):
                break
            self.u_model = s_new
            self.w = 1.0 / (self.u_y**2 + s_new**2)
            ne_name, ne_est = ne_pick(None)
            sol = self.solve_central(self.sa, ne_name, ne_est)
        return sol

    def _capture_ln(self, L, T, ne, mass, w_instr, stark_scale=1.0):
        """ln f of each line of ``L`` (:func:`compquant.cflibs.capture.window_capture_fraction`):
        Gaussian part √(instrument² + Doppler²), Lorentzian part the thin-line Stark FWHM at nₑ
        (line-list parameters, else ``stark_fallback_fwhm_nm``) times ``stark_scale``; 0 for
        lines without a window (fitted profiles measure the whole area)."""
        out = np.zeros(L.n)
        geo = np.array([self.windows.get(str(x), (np.nan, np.nan, np.nan)) for x in L.line_id], float).reshape(-1, 3)
        have = np.all(np.isfinite(geo), axis=1) & (geo[:, 0] > 0)
        if not np.any(have):
            return out
        wg = np.sqrt(w_instr**2 + doppler_fwhm_nm(L.wl, T, mass) ** 2)
        wlz = self.lorentz_thin(T, ne, np.ones(L.n), lines=L, mass=mass, w_instr=w_instr) * stark_scale
        ok = have & ((wg > 0) | (wlz > 0))
        f = window_capture_fraction(geo[ok, 0], geo[ok, 1], geo[ok, 2], wg[ok], wlz[ok])
        out[ok] = np.log(np.clip(f, CAPTURE_MIN, 1.0))
        return out

    def apply_window_capture(self, ne_pick):
        """Divide every window-integrated intensity by its capture fraction f (§1a).

        A fixed window with side-band background keeps a fraction f of a line's area that
        depends on the line's width (instrument λ/R, Doppler, Stark), so lines of one plot are
        measured with different f; uncorrected, this tilts the Boltzmann plot.  f is taken at
        the plasma of a first, uncorrected solution (it changes slowly with T and nₑ); in the
        self-absorption fits, and without such a solution, at ``t_start_k`` and
        ``stark_fallback_ne_cm3`` (an uncorrected fit of thick lines can be a hot, dense false
        solution whose Stark widths would swamp every window); the
        non-detection limits are scaled alike.  The relative u of the intensities is unchanged;
        the Stark widths' own uncertainty (``stark_param_u_rel``) enters the Monte Carlo as one
        common relative change per draw (``dln_capture``).
        """
        T, ne = float(self.s.t_start_k), float(self.s.stark_fallback_ne_cm3)
        if self.s.self_absorption not in ("curve_of_growth", "columnar"):
            # the self-absorption fits keep the start plasma: their uncorrected first solution can be
            # a hot, dense false one whose Stark widths would swamp every window
            try:
                ne_name, ne_est = ne_pick(None)
                sol = self.solve_central(self.sa, ne_name, ne_est)
                T, ne = float(sol.T[0]), float(sol.ne[0])
            except PhysicsError:
                pass
        L = self.L
        self.ln_capture = self._capture_ln(L, T, ne, self.mass_line, self.w_instr)
        u_st = float(self.s.stark_param_u_rel)
        self.dln_capture = self._capture_ln(L, T, ne, self.mass_line, self.w_instr, 1.0 + u_st) - self.ln_capture
        f = np.exp(-self.ln_capture)
        L.intensity, L.u_intensity = L.intensity * f, L.u_intensity * f
        nd = self.nd
        if nd.n:
            m_nd = np.array([self.atomic.mass_u(e) for e in nd.element])
            nd.intensity = nd.intensity * np.exp(-self._capture_ln(nd, T, ne, m_nd, self.w_instr_fn(nd.wl)))
        self._T_warm = None

    def fit_length(self, ne_pick, coarse: bool = False):
        """Columnar density fit: plasma length L minimising the fit's χ² (Cristoforetti &
        Tognoni 2013 use the columnar density n·L as the free parameter; with nₑ and the
        closure fixing the densities, fitting L is the same)."""
        def chi2_of(ln_l):
            try:
                sa, sol, *_ = self.iterate_cog(math.exp(ln_l), ne_pick, max_iter=15 if coarse else 40,
                                               tol=1e-3 if coarse else 1e-6)
            except PhysicsError:
                return 1e300
            return float(sol.fit.chi2[0])

        lo, hi = math.log(1e-5), math.log(10.0)
        res = minimize_scalar(chi2_of, bounds=(lo, hi), method="bounded",
                              options={"xatol": 0.15 if coarse else 0.02, "maxiter": 15 if coarse else 40})
        chi_thin = float(self.solve_central(np.ones(self.L.n), *ne_pick(None)).fit.chi2[0])
        best = float(res.fun)
        if best >= chi_thin * (1 - 1e-9):
            return 0.0, chi_thin, chi_thin  # no sign of self-absorption: thin
        return math.exp(res.x), chi_thin, best

    def reference_line(self, sol, ne_pick):
        """Internal reference line method (Sun & Yu 2009, Talanta 79, 388)."""
        L = self.L
        sa = np.ones(L.n)
        refs = {}
        for _ in range(30):
            T = float(sol.T[0])
            proxy = L.wl**3 * L.gA * np.exp(-L.ei / (K_B_EV * T))
            new = np.ones(L.n)
            for sp in sorted(set(L.species)):
                idx = np.flatnonzero(L.species == sp)
                if len(idx) < 2:
                    continue
                r = idx[np.argmin(proxy[idx])]
                refs[str(sp)] = str(L.line_id[r])
                new[idx] = sa_reference_line(L.intensity[idx] / np.exp(self.ln_zeta[idx]), L.wl[idx],
                                             L.gA[idx], L.ek[idx], int(np.flatnonzero(idx == r)[0]), T)
            new = np.clip(new, self.s.sa_min_factor, 1.0)
            # T from the nearly thin lines: the reference lines, lines whose SA relative to them is
            # ≥ sa_flag_below, and single-line species
            is_ref = (np.isin(L.line_id, list(refs.values())) | ~np.isin(L.species, list(refs))
                      | (new >= self.s.sa_flag_below))
            ne_name, ne_est = ne_pick(new)
            try:
                sub = Model(L.subset(is_ref), self.atomic, self.s)
                ln_i = (np.log(L.intensity) - self.ln_zeta)[is_ref]
                sol_ref = sub.solve(ln_i[None], 0.0, self.w[is_ref], ne_est, strict=True)
                T_ref = sol_ref.T
            except PhysicsError:
                T_ref = sol.T
            step = np.max(np.abs(np.log(new) - np.log(sa)))
            sa = new
            sol = self.solve_central(sa, ne_name, ne_est)
            sol.T[:] = T_ref
            if step < 1e-6:
                break
        self.sa_info.update(reference_lines=refs)
        ne_name, ne_est = ne_pick(sa)
        return sa, self.solve_central(sa, ne_name, ne_est), ne_name, ne_est

    # -- robust closure ------------------------------------------------------------------
    def screen(self):
        """Rules 2 and 3 of :mod:`compquant.cflibs.screening` on the current solution:
        ``(line_drops, element_drops)``, each mapping id → reason."""
        sol = self.sol
        ne_free = self.ne_est is None

        def can_drop(mask):
            return self._can_drop(mask, ne_free)

        lines = outlier_lines(self.L, sol, self.u_y, self.s, can_drop)
        checks, els = nondetection_conflicts(self.L, self.nd, self.model, sol, self.s)
        self.upper_limit_checks = checks
        return lines, els

    # -- detection -----------------------------------------------------------------------
    def detection(self, sol):
        """Per-line SA estimates that do not change the result, each with a standard
        uncertainty so that only significant departures (> 3u) are flagged (docs: detection).

        * ``sa_ratio``: intensity ratio to the species' most nearly thin line (smallest
          λ³ g_k A_ki e^{−E_i/kT} among lines measured to ≤ 10 %) over the optically thin
          ratio at the fitted T (Sun & Yu 2009); u from both lines' ordinate u;
        * ``sa_width``: El Sherbini et al. 2005 from the Stark width expected at nₑ (only when
          nₑ came from another method); u from the width and Stark-parameter accuracy;
        * ``sa_cog``: curve of growth at the plasma length of :meth:`detect_linear_cog`, only
          when that length is significant (> 2u).
        """
        L = self.L
        T = float(sol.T[0])
        ne = float(sol.ne[0])
        nan = np.full(L.n, np.nan)
        out = {"sa_ratio": nan.copy(), "u_sa_ratio": nan.copy(), "sa_width": nan.copy(),
               "u_sa_width": nan.copy(), "sa_cog": nan.copy(), "u_sa_cog": np.zeros(L.n),
               "ref_line": [""] * L.n}
        corrected_i = L.intensity / self.sa / np.exp(self.ln_zeta)
        proxy = L.wl**3 * L.gA * np.exp(-L.ei / (K_B_EV * T))
        rel_i = np.where(L.intensity > 0, L.u_intensity / L.intensity, np.inf)
        for sp in sorted(set(L.species)):
            idx = np.flatnonzero(L.species == sp)
            if len(idx) < 2:
                continue
            good = idx[rel_i[idx] <= 0.1]
            pool = good if len(good) else idx
            ref = pool[int(np.argmin(proxy[pool]))]
            r = int(np.flatnonzero(idx == ref)[0])
            out["sa_ratio"][idx] = sa_reference_line(corrected_i[idx], L.wl[idx], L.gA[idx], L.ek[idx], r, T)
            out["u_sa_ratio"][idx] = out["sa_ratio"][idx] * np.sqrt(self.u_y[idx] ** 2 + self.u_y[ref] ** 2)
            out["u_sa_ratio"][ref] = 0.0
            for i in idx:
                out["ref_line"][i] = str(L.line_id[ref])
        have = np.isfinite(L.stark_w) & (L.stark_w > 0) & np.isfinite(L.fwhm) & (L.fwhm > 0)
        if np.any(have) and self.ne_name not in ("stark",):
            t_ref = np.where(np.isfinite(L.stark_t), L.stark_t, T)
            w_thin_l = stark_width_linear(ne, L.stark_w, L.stark_ne, T, t_ref, self.s.stark_t_exponent,
                                          L.stark_p)
            wg = np.sqrt(self.w_instr**2 + doppler_fwhm_nm(L.wl, T, self.mass_line) ** 2)
            with np.errstate(invalid="ignore", divide="ignore"):
                w_obs_l = lorentz_from_voigt(L.fwhm, wg)
                est = sa_from_width(np.maximum(w_obs_l, 1e-12), w_thin_l)
            ok = have & (w_obs_l > 0)
            out["sa_width"] = np.where(ok, est, np.nan)
            u_ln_ne = self.ne_est.u_ln(np.array([T])) if self.ne_est is not None else (
                float(sol.u_ln_ne_fit[0]) if sol.u_ln_ne_fit is not None else 0.0)
            u_ln_w = math.sqrt(self.s.u_rel_fwhm**2 + self.s.stark_param_u_rel**2 + u_ln_ne**2)
            out["u_sa_width"] = np.where(ok, est * u_ln_w / abs(EL_SHERBINI_ALPHA), np.nan)
        cog = getattr(self, "sa_detect_cog", None)
        if cog is not None:
            out["u_sa_cog"] = np.asarray(self.sa_detect_cog_u, dtype=float)
        if self.s.self_absorption in ("curve_of_growth", "columnar", "reference_line"):
            cog = self.sa
        if cog is not None:
            out["sa_cog"] = np.asarray(cog, dtype=float)
        return out

    # -- Monte Carlo -------------------------------------------------------------------
    def monte_carlo(self, n, seed):
        L = self.L
        rng = np.random.default_rng(seed)
        eps = rng.standard_normal((n, L.n))
        if self.shot_dev is None:
            I_d = L.intensity[None, :] + L.u_intensity[None, :] * eps
        else:
            # the line means of one set of shots share every shot's plasma (T, nₑ, ablated mass):
            # draw them from the shots' own covariance / n_shots (GUM 5.2 and C.3.4, correlation of
            # input estimates from simultaneous observations; JCGM 102:2011 §6.4.3), the part of
            # u_I not explained by the shot scatter independently
            D = self.shot_dev
            k = D.shape[0]
            rel = rng.standard_normal((n, k)) @ D / math.sqrt(k * (k - 1.0))
            u_shot = L.intensity * np.sqrt(np.sum(D**2, axis=0) / (k * (k - 1.0)))
            u_rest = np.sqrt(np.maximum(L.u_intensity**2 - u_shot**2, 0.0))
            I_d = L.intensity[None, :] * (1.0 + rel) + u_rest[None, :] * eps
        I_d = np.maximum(I_d, 1e-3 * L.intensity[None, :])
        dln_a = L.u_ln_a[None, :] * rng.standard_normal((n, L.n))
        if not self.s.mc_include_aki:
            dln_a = np.zeros_like(dln_a)
        birge = float(self.sol.fit.birge[0]) if self.sol.fit.dof > 0 else float("nan")
        extra = 0.0
        if self.s.scale_by_chi2 and np.isfinite(birge) and birge > 1:
            # scatter beyond the stated u: spread it over the lines as extra ordinate noise
            extra = math.sqrt(birge - 1.0)
        ln_sa = np.log(self.sa)[None, :]
        if self.s.self_absorption in ("curve_of_growth", "columnar", "reference_line") and self.s.mc_sa_u_rel:
            # self-absorption model parameters (slab length, assumed widths, reference lines):
            # one relative error per draw on every line's ln SA, correlated across lines
            ln_sa = ln_sa * (1.0 + self.s.mc_sa_u_rel * rng.standard_normal((n, 1)))
        ln_i = np.log(I_d) - ln_sa - self.ln_zeta[None, :]
        if self.s.response_u_rel:
            # spectral response within its stated relative u: an offset and a tilt across the lines
            span = max(float(np.ptp(L.wl)), 1e-9)
            t = 2.0 * (L.wl - float(np.min(L.wl))) / span - 1.0
            e = rng.standard_normal((n, 2))
            ln_i = ln_i + self.s.response_u_rel * (e[:, :1] + e[:, 1:2] * t[None, :]) / math.sqrt(2.0)
        if extra:
            ln_i = ln_i + extra * self.u_y[None, :] * rng.standard_normal((n, L.n))
        if self.u_model > 0:
            # scatter of the lines beyond their stated u (Paule–Mandel, §2): independent per line
            ln_i = ln_i + self.u_model * rng.standard_normal((n, L.n))
        if np.any(self.dln_capture):
            # window capture fractions (§1a): the assumed Stark widths within stark_param_u_rel,
            # one relative change per draw shared by every line
            ln_i = ln_i - rng.standard_normal((n, 1)) * self.dln_capture[None, :]
        ne_f = None if self.ne_est is None else self.ne_est.sampler(rng, n)
        if self.s.mc_partition_u_rel:
            self.model.ln_u_shift = {sp: self.s.mc_partition_u_rel * rng.standard_normal(n)
                                     for e in self.model.elements for sp in
                                     (species_name(e, 1), species_name(e, 2), species_name(e, 3))}
        try:
            sol = self.model.solve(ln_i, dln_a, self.w[None, :], ne_f,
                                   T0=np.full(n, float(self.sol.T[0])), strict=False)
        finally:
            self.model.ln_u_shift = None
        return sol

    # -- result --------------------------------------------------------------------------
    def _mc_summary(self, mc_draws, seed, u_T, u_ne):
        """Monte Carlo standard deviations and intervals: ``(u_T, u_ne, u_w, u_x, summary, ok)``."""
        s, sol = self.s, self.sol
        mc = {"draws": int(mc_draws), "seed": int(seed), "aki_perturbed": bool(s.mc_include_aki)}
        u_w = np.full(len(sol.elements), np.nan)
        u_x = np.full(len(sol.elements), np.nan)
        mc_ok = mc_draws >= 10
        if mc_ok:
            msol = self.monte_carlo(mc_draws, seed)
            v = msol.valid
            mc["valid"] = int(v.sum())
            if v.sum() < 0.95 * mc_draws:
                self.flags.append("mc_draws_invalid")
                self._warn(f"{mc_draws - int(v.sum())} of {mc_draws} Monte Carlo draws gave no "
                           "physical solution")
            if v.sum() >= 10:
                wm = self._apply_fixed(msol.mass_fraction[v], sol.elements)[0]
                u_T = float(np.std(msol.T[v], ddof=1))
                u_ne = float(np.std(msol.ne[v], ddof=1))
                u_w = np.std(wm, axis=0, ddof=1)
                u_x = np.std(msol.number_fraction[v], axis=0, ddof=1)
                mc.update(
                    T_sd_k=u_T, ne_sd_cm3=u_ne,
                    T_interval_95=[float(x) for x in np.percentile(msol.T[v], [2.5, 97.5])],
                    ne_interval_95=[float(x) for x in np.percentile(msol.ne[v], [2.5, 97.5])],
                    mass_fraction_interval_95={e: [float(a), float(b)] for e, a, b in zip(
                        sol.elements, *np.percentile(wm, [2.5, 97.5], axis=0))},
                )
            else:
                mc_ok = False
        return u_T, u_ne, u_w, u_x, mc, mc_ok

    def build(self, mc_draws, seed) -> CFResult:
        s, L, sol = self.s, self.L, self.sol
        T = float(sol.T[0])
        ne = float(sol.ne[0])
        k_b = K_B_EV
        u_T_fit = float(sol.u_slope[0] / (k_b * sol.slope[0] ** 2))
        if sol.ne_from_fit:
            u_ln_ne_c = float(sol.u_ln_ne_fit[0])
        else:
            u_ln_ne_c = float(self.ne_est.u_ln(np.array([T])))
        fixed_el = next(iter(s.fixed), None)
        u_T, u_ne, u_w, u_x, mc, mc_ok = self._mc_summary(mc_draws, seed, u_T_fit, ne * u_ln_ne_c)
        if not mc_ok:
            mc["note"] = "no Monte Carlo: u from the fit covariance for T and nₑ only"
            self.flags.append("no_concentration_uncertainty")
        wfrac, closure_sum = self._apply_fixed(sol.mass_fraction, sol.elements)
        wfrac = wfrac[0]
        share = float(sum(getattr(self, "missing_share", {}).values()))
        if share > 0 and not fixed_el and mc_ok:
            # elements removed from the closure: the others are high by their share, at most
            # `share`; rectangular over [0, share] read with half-width `share` (GUM 4.3.7),
            # a conservative term added to every u
            u_w = np.sqrt(u_w**2 + (wfrac * share / math.sqrt(3.0)) ** 2)
            mc["missing_share_bound"] = dict(self.missing_share)
        # LTE
        dE = float(np.max(L.ek - L.ei))
        lte = check_lte(T, ne, dE, gate_delay_s=_gate_delay_s(self.acq),
                        lightest_mass_u=float(np.min(self.model.masses)),
                        gradient_length_mm=s.gradient_length_mm, f=s.lte_f, gaunt=s.lte_gaunt,
                        transient_ratio=s.lte_transient_ratio, diffusion_ratio=s.lte_diffusion_ratio)
        self.flags.extend(lte.flags)
        # fit quality
        fit = sol.fit
        chi2, dof = float(fit.chi2[0]), fit.dof
        p = float(chdtrc(dof, chi2)) if dof > 0 else float("nan")  # χ² survival function
        # the flag judges the lines against their stated u (before any Paule–Mandel scatter)
        chi2_stated = float(np.sum(fit.residuals[0] ** 2 / self.u_y**2)) if self.u_model > 0 else chi2
        p_stated = float(chdtrc(dof, chi2_stated)) if dof > 0 else float("nan")
        if dof > 0 and p_stated < 1e-3:
            self.flags.append("cf_fit_poor")
        det = self.detection(sol)
        lines = self._line_rows(sol, det)
        sa_flag_lines = {r["line_id"] for r in lines if "self_absorbed" in r["flags"]}
        # per-element
        elements = []
        for j, e in enumerate(sol.elements):
            idx = np.flatnonzero(L.element == e)
            fl = []
            if len(idx) == 1:
                fl.append("single_line")
            if any(L.line_id[i] in sa_flag_lines for i in idx):
                fl.append("self_absorption_corrected" if s.self_absorption in
                          ("curve_of_growth", "columnar", "reference_line") else "self_absorbed")
            if e in self.no_factor:
                fl.append("no_one_point_factor")
            if e == fixed_el:
                fl.append("fixed_content")
            er = ElementResult(
                element=e, mass_fraction=float(wfrac[j]), u=float(u_w[j]) if e != fixed_el else 0.0,
                number_fraction=float(sol.number_fraction[0, j]), u_number_fraction=float(u_x[j]),
                n_lines=int(len(idx)), lines=[str(x) for x in L.line_id[idx]], flags=fl,
                fixed=e == fixed_el)
            if e in self.undetermined and e != fixed_el:
                er.uncertified_mass_fraction = er.mass_fraction
                er.mass_fraction, er.u = float("nan"), float("nan")
                er.determined, er.reasons = False, list(self.undetermined[e])
                er.flags.append("not_determined")
            elements.append(er)
        elements += self._undetermined_rows(sol, fixed_el)
        if fixed_el:
            self.sa_info.setdefault("note", "")
        ne_estimates = self._ne_estimates(T)
        species_rows = self._species_rows(sol)
        checks, failed, ne_agreement = self._certify(T, u_T_fit, ne, u_ne, ne_estimates, lte, species_rows,
                                                     elements, p, fit, dof)
        return CFResult(
            sample_id=self.sample_id, temperature_k=T, u_temperature_k=float(u_T),
            electron_density_cm3=ne, u_electron_density_cm3=float(u_ne),
            ne_method={"saha": "saha_balance", "h_alpha": "h_alpha_stark_width",
                       "stark": "stark_widths", "fixed": "fixed"}[self.ne_name],
            fit_mode=s.fit, elements=elements, ne_estimates=ne_estimates, lte=lte.to_dict(),
            species=species_rows, lines=lines, excluded_lines=list(self.excluded),
            self_absorption=dict(self.sa_info),
            fit={"mode": s.fit, "slope_per_ev": float(sol.slope[0]), "u_slope_per_ev": float(sol.u_slope[0]),
                 "u_temperature_fit_k": u_T_fit, "chi2": chi2, "dof": dof, "p_value": p,
                 "birge_ratio": float(fit.birge[0]) if dof > 0 else None,
                 "groups": [str(g) for g in sol.groups],
                 "intercepts": [float(x) for x in fit.beta[0, 1:1 + len(sol.groups)]],
                 "iterations": sol.iterations, "closure_sum": float(closure_sum[0]),
                 "model_scatter_ln": float(self.u_model)},
            monte_carlo=mc,
            one_point=None if self.one_point is None else self.one_point.summary(),
            flags=list(dict.fromkeys(self.flags)), warnings=list(self.warnings),
            settings=s.to_dict(), plasma_consistent=not failed, plasma_checks=checks,
            rejected_lines=list(self.rejected), upper_limits=list(self.upper_limit_checks),
            ne_agreement=ne_agreement, intensity_basis=self.basis,
        )

    def _certify(self, T, u_T_fit, ne, u_ne, ne_estimates, lte, species_rows, elements, p, fit, dof):
        """Plasma checks (§4a); a failed one un-determines every element. Returns
        ``(checks, failed, ne_agreement)``."""
        s = self.s
        # the temperature checks compare line sets of one solution: the joint T's own fit u, not
        # the Monte Carlo u that also carries the model inputs those line sets share
        checks, failed = plasma_checks(T=T, u_T=u_T_fit, ne=ne, u_ln_ne=u_ne / ne if ne > 0 else float("nan"),
                                       ne_used=self.ne_name, ne_estimates=ne_estimates, lte=lte.to_dict(),
                                       species=species_rows, sa_info=self.sa_info, settings=s,
                                       fit={"birge_ratio": float(fit.birge[0]) if dof > 0 else None,
                                            "p_value": p},
                                       thin=self.thin_subset_temperature())
        if any(c["check"] == "species_temperatures" and c["checked"] and not c["passed"] for c in checks):
            self.flags.append("species_temperatures_disagree")
        if failed:
            self.flags.append("plasma_inconsistent")
            notes = "; ".join(f"{c['check']}: {c['note'] or c['value']}" for c in checks if c["check"] in failed)
            self._warn(f"plasma solution failed {', '.join(failed)} ({notes}): no mass fraction certified")
            for el in elements:
                if el.determined and not el.fixed:
                    el.uncertified_mass_fraction = el.mass_fraction
                    el.mass_fraction, el.u = float("nan"), float("nan")
                    el.determined = False
                    el.reasons.append("plasma solution failed: " + ", ".join(failed))
                    el.flags.append("not_determined")
        route = next(c for c in checks if c["check"] == "ne_routes")
        ne_agreement = {"routes": [{"method": x["method"], "ne_cm3": x.get("ne_cm3"), "u_ne_cm3": x.get("u_ne_cm3"),
                                    "used": x.get("used")} for x in ne_estimates],
                        "compared": route["checked"], "consistent": route["passed"],
                        "max_ratio": route["value"], "note": route["note"]}
        return checks, failed, ne_agreement

    def _undetermined_rows(self, sol, fixed_el):
        """Rows of requested, fixed, rejected or all-lines-failed elements not in the closure."""
        s = self.s
        requested = list(self.elements_requested or []) + ([fixed_el] if fixed_el else [])
        requested += list(self.undetermined)
        failed_el: dict[str, list[str]] = {}
        for x in self.excluded:
            el = x.get("element")
            if (el and el not in sol.elements and el not in s.exclude_elements
                    and (self.elements_requested is None or el in self.elements_requested)):
                failed_el.setdefault(el, []).append(f"{x['line_id']}: {x['reason']}")
        requested += list(failed_el)
        out = []
        nan = float("nan")
        for e in dict.fromkeys(requested):
            if e in sol.elements or e in s.exclude_elements:
                continue
            if e == fixed_el:
                out.append(ElementResult(e, float(s.fixed[e]), 0.0, nan, nan, 0, [], ["fixed_content"], True))
                continue
            reasons = list(self.undetermined.get(e, []))
            flags = ["not_determined"]
            if not reasons:
                if s.missing == "error":
                    raise DataQualityError(f"element {e} has no usable lines", where=self.where,
                                           fix="add lines for it, or set [cf] missing = 'omit'")
                why = failed_el.get(e, [])
                self._warn(f"element {e} has no usable lines: left out of the closure")
                reasons = ["no usable line" + (": " + "; ".join(why[:6]) if why else " in the line table")]
                flags.append("no_usable_lines")
            out.append(ElementResult(e, nan, nan, nan, nan, 0, [], flags, False, determined=False,
                                     reasons=reasons))
        return out

    def _apply_fixed(self, wfrac, elements):
        """Fixed content of one element: scale (element measured) or close to 1 − w_fixed."""
        wfrac = np.atleast_2d(wfrac)
        if not self.s.fixed:
            return wfrac, wfrac.sum(axis=1)
        el, val = next(iter(self.s.fixed.items()))
        if el in elements:
            j = elements.index(el)
            out = wfrac * (val / wfrac[:, j:j + 1])
        else:
            out = wfrac * (1.0 - val)
        total = out.sum(axis=1) + (0.0 if el in elements else val)
        return out, total

    def _line_rows(self, sol, det):
        L = self.L
        X, y = sol.X, sol.y[0]
        beta = sol.fit.beta[0]
        yfit = X @ beta
        if sol.ne_from_fit and self.s.fit == "saha-boltzmann":
            # report the Saha–Boltzmann ordinate y* (ion rows with the fitted ln nₑ put back)
            y = y - X[:, -1] * beta[-1]
            yfit = X[:, :-1] @ beta[:-1]
        rows = []
        for i in range(L.n):
            fl = []
            lim = self.s.sa_flag_below
            significant = [v for v, u in ((det["sa_cog"][i], det["u_sa_cog"][i]),
                                          (det["sa_ratio"][i], det["u_sa_ratio"][i]),
                                          (det["sa_width"][i], det["u_sa_width"][i]))
                           if np.isfinite(v) and v < lim and (1.0 - v) > 3.0 * (u if np.isfinite(u) else 0.0)]
            if self.sa[i] < lim or (significant and self.s.self_absorption in ("detect", "none")):
                fl.append("self_absorbed")
            if self.sa[i] <= self.s.sa_min_factor + 1e-12:
                fl.append("sa_correction_capped")
            rows.append({
                "line_id": str(L.line_id[i]), "species": str(L.species[i]), "element": str(L.element[i]),
                "ion": int(L.ion[i]), "wavelength_nm": float(L.wl[i]), "intensity": float(L.intensity[i]),
                "u_intensity": float(L.u_intensity[i]), "gk_aki": float(L.gA[i]), "ek_ev": float(L.ek[i]),
                "ei_ev": float(L.ei[i]), "u_ordinate": float(self.u_y[i]),
                "ordinate": float(np.log(L.intensity[i] * L.wl[i] / L.gA[i])),
                "x_ev": float(X[i, 0]), "y": float(y[i]), "y_fit": float(yfit[i]),
                "residual": float(y[i] - yfit[i]),
                "sa_factor": float(self.sa[i]), "correction_factor": float(1.0 / self.sa[i]),
                "one_point_factor": float(math.exp(self.ln_zeta[i])),
                "tau0": None if self.tau is None else float(self.tau[i]),
                "window_fraction": float(math.exp(self.ln_capture[i])),
                "sa_cog": float(det["sa_cog"][i]), "sa_ratio": float(det["sa_ratio"][i]),
                "u_sa_ratio": float(det["u_sa_ratio"][i]), "sa_width": float(det["sa_width"][i]),
                "u_sa_width": float(det["u_sa_width"][i]), "reference_line": det["ref_line"][i],
                "flags": fl,
            })
        return rows

    def _ne_estimates(self, T):
        out = []
        cands = self.ne_candidates(T, sa=self.sa if self.s.self_absorption != "none" else None)
        for name, est in cands.items():
            if name == "fixed" and self.s.ne_method != "fixed":
                continue
            v = float(np.ravel(est(np.array([T])))[0])
            out.append({"method": name, "ne_cm3": v, "u_ne_cm3": v * est.u_ln(np.array([T])),
                        "lines": list(est.lines), "used": name == self.ne_name})
            if name == "stark":
                each, u_each = est.each(T)
                out[-1]["per_line"] = [{"line_id": str(a), "ne_cm3": float(b), "u_ne_cm3": float(b * c)}
                                       for a, b, c in zip(est.ids, each, u_each)]
        if self.model.both_stage_elements:
            try:
                ln_i = np.log(self.L.intensity) - np.log(self.sa) - self.ln_zeta
                sb = self.model.solve(ln_i[None], 0.0, self.w, None, T0=np.array([T]), strict=True)
                out.append({"method": "saha", "ne_cm3": float(sb.ne[0]),
                            "u_ne_cm3": float(sb.ne[0] * sb.u_ln_ne_fit[0]),
                            "lines": [str(x) for x in self.L.line_id[np.isin(self.L.element,
                                                                         self.model.both_stage_elements)]],
                            "used": self.ne_name == "saha", "temperature_k": float(sb.T[0])})
            except PhysicsError as exc:
                out.append({"method": "saha", "ne_cm3": None, "u_ne_cm3": None, "lines": [],
                            "used": False, "note": exc.what})
        return out

    def thin_subset_temperature(self):
        """T (and its fit u) from the nearly thin lines alone (SA ≥ ``sa_flag_below``), for the
        self-absorption fits: evidence that does not rest on the slab model (§4a); ``None``
        when those lines cannot determine T."""
        if self.s.self_absorption not in ("columnar", "curve_of_growth"):
            return None
        keep = self.sa >= self.s.sa_flag_below
        if keep.sum() < 3 or keep.all():
            return None
        try:
            sub = Model(self.L.subset(keep), self.atomic, self.s)
            ln_i = (np.log(self.L.intensity) - np.log(self.sa) - self.ln_zeta)[keep]
            sol = sub.solve(ln_i[None], 0.0, self.w[keep], self.ne_est, strict=True,
                            T0=np.array([float(self.sol.T[0])]))
        except (PhysicsError, AtomicDataError):
            return None
        T = float(sol.T[0])
        u = float(sol.u_slope[0] / (K_B_EV * sol.slope[0] ** 2))
        return {"temperature_k": T, "u_temperature_k": u, "n_lines": int(keep.sum()),
                "lines": [str(x) for x in self.L.line_id[keep]]}

    def _species_rows(self, sol):
        """Per-species Boltzmann plots (own slope) as a diagnostic beside the joint fit."""
        L = self.L
        ln_i = np.log(L.intensity) - np.log(self.sa) - self.ln_zeta
        y = ln_i + np.log(L.wl) - np.log(L.gA)
        rows = []
        for sp in sorted(set(L.species)):
            idx = np.flatnonzero(L.species == sp)
            row = {"species": sp, "element": sp.split()[0], "n_lines": int(len(idx)),
                   "lines": [str(x) for x in L.line_id[idx]],
                   "e_k_range_ev": [float(L.ek[idx].min()), float(L.ek[idx].max())],
                   "temperature_k": None, "u_temperature_k": None}
            if len(idx) >= 2 and np.ptp(L.ek[idx]) > 0.05:
                X = np.column_stack([L.ek[idx], np.ones(len(idx))])
                f = wls_batch(X, y[idx], self.w[idx], scale_by_chi2=self.s.scale_by_chi2)
                m, um = float(f.beta[0, 0]), float(np.sqrt(f.cov[0, 0, 0]))
                if m < 0:
                    row["temperature_k"] = -1.0 / (K_B_EV * m)
                    row["u_temperature_k"] = um / (K_B_EV * m**2)
                row["slope_per_ev"], row["intercept"] = m, float(f.beta[0, 1])
            rows.append(row)
        return rows


def analyse_cf(
    line_table: pd.DataFrame,
    *,
    sample_id: str | None = None,
    settings: CFSettings | dict | None = None,
    atomic=None,
    acquisition: dict | None = None,
    instrument: dict | None = None,
    one_point=None,
    mc_draws: int | None = None,
    seed: int | None = None,
    where: str | None = None,
    intensity_basis: str | None = None,
    windows: dict | None = None,
    measurement=None,
) -> CFResult:
    """Calibration-free composition of one sample.

    Parameters
    ----------
    line_table : the line table of a run (docs/architecture.md); rows of other samples are
        ignored.  Atomic columns (``aki``, ``gk``, ``ek_ev``, ``ei_ev``, ``aki_grade``,
        Stark parameters) are taken from the table if present, else joined from the line
        list by ``line_id``.
    sample_id : which sample (needed when the table holds several).
    settings : :class:`CFSettings` or the ``[cf]`` dict of a method file.
    atomic : atomic-data provider (default: the shipped tables, compquant.atomic).
    acquisition, instrument : the run's attribute dicts (gate delay for the transient LTE
        check; instrumental FWHM for width-based nₑ).
    one_point : a :class:`~compquant.cflibs.onepoint.OnePointCalibration` to apply.
    mc_draws, seed : override the settings' Monte Carlo draws and seed.
    intensity_basis : ``"energy"`` or ``"photon"``: the basis of the run's response curve (run
        attribute ``response_basis``); ``[cf] response_basis`` overrides it; ``"unknown"`` is
        refused.  Photon-basis intensities are converted to energy (× hc/λ).
    windows : ``line_id → (window_nm, side_nm, gap_nm)`` of the window-integrated lines
        (:func:`compquant.cflibs.capture.method_windows`); each such line is divided by the
        fraction of its area the window measures (docs/calibration-free.md §1a).  Without it
        the intensities are taken as whole line areas.
    measurement : the :class:`~compquant.lines.LineMeasurement` the line table came from; its
        per-shot intensities give the Monte Carlo the correlation of the line means (every line
        of a shot sees the same plasma; §8).  Without it the line means are drawn independently.
    """
    s = CFSettings.from_section(settings) if not isinstance(settings, CFSettings) else settings
    sid, rows = _select_sample(line_table, sample_id, where or "line table")
    where = where or f"sample {sid}"
    atomic = atomic if atomic is not None else default_atomic_data()
    double = one_point is not None and s.self_absorption in ("curve_of_growth", "columnar", "reference_line")
    if double:  # the one-point factors already hold the self-absorption at the standard's conditions
        import dataclasses

        s = dataclasses.replace(s, self_absorption="detect")
    basis = _intensity_basis(s, intensity_basis, where)
    if one_point is not None:
        windows = None  # the one-point factors already carry each line's window capture fraction
    a = _robust_solution(rows, sid, s, atomic, acquisition, instrument, one_point, where, basis, windows,
                         measurement)
    if double:
        a._warn("one-point calibration applied: self-absorption correction switched to detection only "
                "(the factors already carry the standard's self-absorption)")
    return a.build(s.mc_draws if mc_draws is None else int(mc_draws), s.seed if seed is None else int(seed))


def _shot_deviations(measurement, sample_id, line_ids) -> np.ndarray | None:
    """Relative deviations I_k/Ī − 1 of the accepted shots of one sample, (n_shots, n_lines) in the
    order of ``line_ids`` (0 for a line the measurement lacks or a shot without a value); ``None``
    without a measurement or with fewer than 3 shots."""
    if measurement is None:
        return None
    try:
        s_idx = list(map(str, measurement.sample_ids)).index(str(sample_id))
    except ValueError:
        return None
    rows = (np.asarray(measurement.shot_sample) == s_idx) & np.asarray(measurement.shot_accepted, bool)
    if rows.sum() < 3:
        return None
    col = {str(x): j for j, x in enumerate(measurement.line_ids)}
    M = np.asarray(measurement.shot_intensity)[rows]
    out = np.zeros((M.shape[0], len(line_ids)))
    for i, lid in enumerate(line_ids):
        j = col.get(str(lid))
        if j is None:
            continue
        v = M[:, j]
        ok = np.isfinite(v)
        if ok.sum() < 3 or not np.all(ok):
            continue  # incomplete shots: independent draws for this line
        mean = float(np.mean(v))
        if mean > 0:
            out[:, i] = v / mean - 1.0
    return out


def _missing_share_bound(e, w_est, checks, s) -> float:
    """Upper bound (g/g) of the share of an element removed from the closure.

    Contradicted non-detections scale the element's estimate down by its largest
    predicted/limit ratio (its content cannot exceed what keeps every non-detected line below
    its limit; the estimate is scaled relative to the rest of the sample, w/(1 − w), as the
    closure does); otherwise (a weak element removed for its size) ``weak_element_closure_max``.
    """
    ratios = [c["ratio"] for c in checks if c["element"] == e and c["contradicted"]]
    if ratios and 0.0 < w_est < 1.0:
        # the lines scale with the element's content relative to the rest of the sample
        x = w_est / (1.0 - w_est) / max(ratios)
        return float(x / (1.0 + x))
    return float(s.weak_element_closure_max)


def _intensity_basis(s, given, where) -> str:
    """Basis of the line intensities: ``[cf] response_basis`` wins over the run's attribute.

    ``None`` (the run does not say) is taken as energy — compquant's convention — when the run
    carries no response curve; a run whose response curve has no stated basis is refused
    (``"unknown"``): a photon-basis curve read as energy biases T by tens of per cent."""
    basis = s.response_basis or given or "energy"
    if basis not in ("energy", "photon"):
        raise InputError(f"the run's response curve has an unknown basis ({basis!r})", where=where,
                         fix="record response_basis = 'photon' or 'energy' in the run (compquant convert "
                         "--response-basis), or set [cf] response_basis in the method")
    return basis


def _robust_solution(rows, sid, s, atomic, acquisition, instrument, one_point, where, basis, windows=None,
                     measurement=None):
    """Solve, apply the robust-closure rules, re-solve until nothing changes (≤ 12 rounds)."""
    drop: dict[str, str] = {}
    undetermined: dict[str, list[str]] = {}
    rejected: list[dict] = []
    limits: dict[str, dict] = {}  # non-detection checks of every round (dropped elements keep theirs)
    missing: dict[str, float] = {}  # upper bound of the share of each element removed from the closure
    elements = s.elements_for(sid)
    for _ in range(12):
        a = _Analysis(rows, sid, s, atomic, acquisition, instrument, one_point, where,
                      elements=elements, drop=drop, basis=basis, windows=windows, measurement=measurement)
        few = too_few_lines(a.L, s)
        a.solve()
        line_drops, el_drops = a.screen()
        limits.update({c["line_id"]: c for c in a.upper_limit_checks})
        # rule 1: a weakly measured element stays in the closure (value not reported) unless the
        # non-detections contradict it or its estimate is too large for a weak signal
        w_now = dict(zip(a.sol.elements, a.sol.mass_fraction[0]))
        for e, why in few.items():
            if e not in el_drops and w_now.get(e, 0.0) > s.weak_element_closure_max \
                    and len(few) < len(set(a.L.element)):
                el_drops[e] = (f"{why}; its unreported estimate {w_now[e]:.3g} g/g is above "
                               f"weak_element_closure_max = {s.weak_element_closure_max:g}: removed from the closure")
        if not line_drops and not el_drops:
            break
        for lid, why in line_drops.items():
            drop[lid] = why
            rejected.append({"line_id": lid, "element": str(a.L.element[a.L.line_id == lid][0]), "reason": why})
        for e, why in el_drops.items():
            undetermined.setdefault(e, []).append(why)
            for lid in a.L.line_id[a.L.element == e]:
                drop[str(lid)] = f"element {e} not determined (non-detections)"
            missing[e] = _missing_share_bound(e, w_now.get(e, 0.0), a.upper_limit_checks, s)
    else:
        a._warn("robust closure did not settle in 12 rounds")
    for e, why in few.items():
        if e not in undetermined:
            undetermined[e] = [why + "; kept in the closure, its value not reported"]
    for e, why in undetermined.items():
        a.undetermined[e] = list(dict.fromkeys(why))
    gone = sorted(e for e in undetermined if e not in set(a.L.element))
    if gone:  # their share is missing from the closure: every other value is an upper estimate
        a.flags.append("closure_incomplete")
        a.missing_share = {e: missing[e] for e in gone if e in missing}
        a._warn("closure without " + ", ".join(gone) + " (not determined): the other mass fractions "
                "are too high by their share, at most " + ", ".join(
                    f"{e} {v:.3g}" for e, v in a.missing_share.items()) + " g/g (in their U)")
    a.rejected = rejected
    a.upper_limit_checks = list(limits.values())
    return a


def run_intensity_basis(method, run) -> str | None:
    """Basis of a run's response-corrected line intensities, for ``analyse_cf(intensity_basis=...)``:
    ``"photon"``, ``"energy"``, ``None`` (no response correction: counts, taken as compquant's
    energy convention) or ``"unknown"``
    (a response is applied whose basis nobody recorded — refused by the analysis unless
    ``[cf] response_basis`` says it)."""
    pre = method.preprocess
    if not pre.response:
        return None
    if pre.response_file:
        return "unknown"
    if run.response() is None:
        return None
    return run.response_basis or "unknown"


def analyse_cf_samples(line_table: pd.DataFrame, *, sample_ids=None, roles=("unknown", "check"), progress=None,
                       **kwargs) -> tuple[list[CFResult], dict[str, str]]:
    """Run :func:`analyse_cf` for several samples; returns ``(results, failures)``.

    ``failures`` maps sample id → one-line reason for samples with no valid solution
    (a :class:`~compquant.errors.CompquantError`), so one bad sample does not stop a run.
    ``progress``: callable ``(done, total)``, called before the first sample and after each.
    """
    from compquant.errors import CompquantError

    if sample_ids is None:
        t = line_table
        if roles is not None and "role" in t.columns:
            t = t[t["role"].isin(roles)]
        sample_ids = list(dict.fromkeys(t["sample_id"].astype(str)))
    results, failures = [], {}
    sample_ids = list(sample_ids)
    for k, sid in enumerate(sample_ids):
        if progress is not None:
            progress(k, len(sample_ids))
        try:
            results.append(analyse_cf(line_table, sample_id=sid, **kwargs))
        except CompquantError as exc:
            failures[sid] = exc.one_line()
    if progress is not None:
        progress(len(sample_ids), len(sample_ids))
    return results, failures


__all__ = ["CFWarning", "LineSet", "analyse_cf", "analyse_cf_samples", "run_intensity_basis", "species_name"]
