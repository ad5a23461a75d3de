"""Self-absorption of one analysis by the curve of growth of a homogeneous slab: absolute
densities, absorption widths, the slab SA, the linearised detection test, the fixed-point
correction at a known or fitted length, and the internal reference line method
(docs/calibration-free.md §4; the slab model is :mod:`compquant.cflibs.selfabs`).
"""

from __future__ import annotations

import functools
import math

import numpy as np
from scipy.optimize import minimize_scalar

from compquant.cflibs.electron_density import _p as _stark_p
from compquant.cflibs.electron_density import doppler_fwhm_nm, lorentz_from_voigt, stark_width_linear
from compquant.cflibs.fitting import wls_batch
from compquant.cflibs.selfabs import EL_SHERBINI_ALPHA, sa_factor, sa_reference_line, tau0_slab
from compquant.cflibs.solver import Model, Solution
from compquant.errors import PhysicsError
from compquant.plasma.constants import KB_EV as K_B_EV

_COG_MEMO_SIZE = 8


@functools.lru_cache(maxsize=64)
def _charges(names: tuple[str, ...]):
    """Charged species of ``names`` ("Cu II" → charge 1, …) and ln of their charges."""
    z = np.array([int(len(k.split()[1]) if k.split()[1] != "IV" else 4) - 1 for k in names])
    charged = z > 0
    ln_z = np.log(z[charged])
    charged.flags.writeable = False
    ln_z.flags.writeable = False
    return charged, ln_z


@functools.lru_cache(maxsize=64)
def _species_columns(species: tuple[str, ...]):
    """The distinct species of ``species`` (first-seen order) and each entry's column among them."""
    names = tuple(dict.fromkeys(species))
    pos = {sp: k for k, sp in enumerate(names)}
    col = np.array([pos[sp] for sp in species], dtype=np.intp)
    col.flags.writeable = False
    return names, col


_STARK_MEMO: dict = {}


def _stark_columns(L):
    """The lines of ``L`` with Stark parameters and their columns (``have``, w_ref, nₑ,ref,
    finite-T_ref flags, T_ref, exponent), kept for the last few line sets while ``L`` holds the
    same arrays (read-only, exactly the values indexed each time before)."""
    src = (L, L.stark_w, L.stark_ne, L.stark_t, L.stark_p)
    hit = _STARK_MEMO.get(id(L))
    if hit is not None and all(a is b for a, b in zip(hit[0], src)):
        return hit[1]
    have = np.isfinite(L.stark_w) & (L.stark_w > 0) & np.isfinite(L.stark_ne) & (L.stark_ne > 0)
    t = L.stark_t[have]
    out = (have, L.stark_w[have], L.stark_ne[have], np.isfinite(t), t, L.stark_p[have])
    for a in out:
        a.flags.writeable = False
    if len(_STARK_MEMO) >= 8:
        _STARK_MEMO.clear()
    _STARK_MEMO[id(L)] = (src, out)
    return out


class CurveOfGrowth:
    """Mixin of :class:`compquant.cflibs.analysis._Analysis`: curve-of-growth self-absorption."""

    def absolute_species(self, sol: Solution, j: int = 0):
        """Absolute number density (cm⁻³) per species from nₑ and charge neutrality."""
        sp = sol.ln_n_species
        names = list(sp)
        lns = np.array([sp[k][j] for k in names])
        charged, ln_z = _charges(tuple(names))
        ln_e = np.logaddexp.reduce(lns[charged] + ln_z)
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
        have, w_ref, ne_ref, t_fin, t_have, p_have = _stark_columns(L)
        t_ref = np.where(t_fin, t_have, T)  # the line's T_ref, else T
        wl[have] = stark_width_linear(ne, w_ref, ne_ref, T, t_ref, self.s.stark_t_exponent, p_have)
        if self.s.stark_fallback_fwhm_nm:
            # assumed Stark FWHM for lines without data, linear in nₑ ([cf] stark_fallback_*)
            wl[~have] = self.s.stark_fallback_fwhm_nm * ne / self.s.stark_fallback_ne_cm3
            return wl
        meas = ~have & np.isfinite(L.fwhm) & (L.fwhm > 0) & bool(self.s.sa_width_from_measured)
        if np.any(meas):
            wg = np.sqrt(w_ins[meas] ** 2 + doppler_fwhm_nm(L.wl[meas], T, mass_line[meas]) ** 2)
            wl[meas] = lorentz_from_voigt(L.fwhm[meas], wg) * sa[meas] ** (-EL_SHERBINI_ALPHA)
        return wl

    def lorentz_thin_slopes(self, T: float, ne: float, wl: np.ndarray):
        """∂w_L/∂ln T and ∂w_L/∂ln nₑ (nm) of :meth:`lorentz_thin` at SA = 1 (as the
        self-absorption fit uses it), per line, given its value ``wl`` there.

        Lines with Stark data: w_L = w_ref (nₑ/n_ref)^p (T/T_ref)^a
        (:func:`compquant.cflibs.electron_density.stark_width_linear`), so ∂ln w_L/∂ln nₑ = p and
        ∂ln w_L/∂ln T = a where the line has a finite T_ref > 0 (else (T/T)^a = 1: 0).  The
        fallback width is linear in nₑ (∂ln w_L/∂ln nₑ = 1, none in T).  Lines whose width comes
        from the measured FWHM (``sa_width_from_measured``) depend on T through the Doppler
        width: central differences of :meth:`lorentz_thin` in ln T (step 10⁻⁴, error O(10⁻⁸)
        relative); nₑ does not enter them.
        """
        L = self.L
        d_t, d_n = np.zeros(L.n), np.zeros(L.n)
        have, _w_ref, _ne_ref, t_fin, t_have, p_have = _stark_columns(L)
        a = float(self.s.stark_t_exponent)
        d_n[have] = _stark_p(p_have) * wl[have]
        if a != 0.0:
            d_t[have] = np.where(t_fin & (t_have > 0), a, 0.0) * wl[have]
        if self.s.stark_fallback_fwhm_nm:
            d_n[~have] = wl[~have]
            return d_t, d_n
        meas = ~have & np.isfinite(L.fwhm) & (L.fwhm > 0) & bool(self.s.sa_width_from_measured)
        if np.any(meas):
            h = 1e-4
            ones = np.ones(L.n)
            up = self.lorentz_thin(T * math.exp(h), ne, ones)
            down = self.lorentz_thin(T * math.exp(-h), ne, ones)
            d_t[meas] = ((up - down) / (2.0 * h))[meas]
        return d_t, d_n

    def _u_per_line(self, atomic, T: float) -> np.ndarray:
        """U(T) of each line's species (one partition-function call for all the species where the
        atomic data offers it, else one per species; the same numbers)."""
        species = self.L.species
        names, col = _species_columns(tuple(species))
        many = getattr(atomic, "partition_functions", None)
        if many is not None:
            return many(names, np.array([T]))[0][col]
        u = {sp: float(atomic.partition_function(sp, np.array([T]))[0]) for sp in names}
        return np.array([u[sp] for sp in species])

    def _cog_widths(self, T: float, ne: float, sa_prev):
        """U(T) per line, Doppler and thin Lorentzian FWHM per line at (T, nₑ, SA) for
        :meth:`sa_cog`.  The self-absorption fit asks again at the same (T, nₑ) for every
        parameter of a finite-difference Jacobian but T and nₑ, so the last few results are kept
        (read-only, exactly what the calls return); the memo starts afresh when the lines,
        masses, instrumental widths or model change."""
        owner = (self.L, self.mass_line, self.w_instr, self.model)
        memo = getattr(self, "_cog_memo", None)
        if memo is None or any(a is not b for a, b in zip(memo[0], owner)):
            memo = (owner, {})
            self._cog_memo = memo
        sa_prev = np.asarray(sa_prev, dtype=float)
        key = (T, ne, sa_prev.tobytes())
        hit = memo[1].get(key)
        if hit is not None:
            return hit
        out = (self._u_per_line(self.model.atomic, T), doppler_fwhm_nm(self.L.wl, T, self.mass_line),
               self.lorentz_thin(T, ne, sa_prev))
        for a in out:
            a.flags.writeable = False
        if len(memo[1]) >= _COG_MEMO_SIZE:
            memo[1].clear()
        memo[1][key] = out
        return out

    def sa_cog(self, sol: Solution, length_cm: float, sa_prev):
        """Curve-of-growth SA of every line for a slab of length ``length_cm``."""
        L = self.L
        T = float(sol.T[0])
        ne = float(sol.ne[0])
        nabs = self.absolute_species(sol)
        n_sp = np.array([nabs[s] for s in L.species])
        u_sp, wg, wlz = self._cog_widths(T, ne, sa_prev)
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
