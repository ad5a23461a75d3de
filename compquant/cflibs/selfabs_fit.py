"""Self-absorbed Saha–Boltzmann fit of one analysis by nonlinear least squares, with a known or
fitted plasma length (columnar density, Cristoforetti & Tognoni 2013), and the removal of lines
too optically thick to correct (docs/calibration-free.md §4).
"""

from __future__ import annotations

import math

import numpy as np

from compquant.atomic.partition import dln_partition_functions_dln_t
from compquant.cflibs.fitting import paule_mandel_scatter
from compquant.cflibs.selfabs import dln_sa_dln_tau0, sa_slopes
from compquant.cflibs.selfabs_cog import _charges
from compquant.cflibs.solver import Model, Solution
from compquant.errors import AtomicDataError, PhysicsError
from compquant.plasma.constants import HC_EV_NM, LN_SAHA_PREFACTOR
from compquant.plasma.constants import KB_EV as K_B_EV


class SelfAbsFit:
    """Mixin of :class:`compquant.cflibs.analysis._Analysis`: the self-absorbed fit."""

    #: Jacobian of the fit: analytic intercept and ln L columns (see :meth:`_residual_fn`); False
    #: gives scipy's finite differences in every column (``benchmarks/cf_speed.py`` compares them)
    ANALYTIC_JACOBIAN = True
    #: T and ln nₑ columns in closed form (:meth:`_tn_partials`); False gives forward differences
    #: in those two columns only (the code before; ``benchmarks/cf_speed.py`` compares them)
    ANALYTIC_TN = True

    def sa_of_beta(self, beta, length_cm, ne_est, groups):
        """SA of every line implied by the fit parameters β (T, intercepts[, ln nₑ]) and L."""
        sa, _tau, T, ne, _sol = self._slab_state(beta, length_cm, ne_est, groups)
        return sa, T, ne

    def _slab_state(self, beta, length_cm, ne_est, groups):
        """SA and τ₀ of every line, T, nₑ and the (one-row) solution implied by β and L."""
        m = beta[0]
        T = np.array([-1.0 / (K_B_EV * m)])
        ne = np.exp(np.array([beta[-1]])) if ne_est is None else np.atleast_1d(ne_est(T))[:1]
        ln_n_el, ln_sp = self.model._composition(beta[None, :], groups, T, ne)
        fake = Solution(T=T, ne=ne, u_ln_ne_fit=None, slope=np.array([m]), u_slope=np.zeros(1), fit=None,
                        X=None, y=None, groups=groups, elements=self.model.elements, ln_n_el=ln_n_el,
                        ln_n_species=ln_sp, number_fraction=None, mass_fraction=None,
                        valid=np.ones(1, bool), iterations=0, ne_from_fit=ne_est is None)
        sa, tau = self.sa_cog(fake, length_cm, np.ones(self.L.n))
        return sa, tau, T[0], ne[0], fake

    def _species_columns(self, groups):
        """Column of β whose intercept scales each species' relative density in
        :meth:`compquant.cflibs.solver.Model._composition` (ln n_s = β_col + terms in T, nₑ only):
        ``{species: column}``, built once per ``groups``."""
        memo = getattr(self, "_sp_col_memo", None)
        if memo is not None and memo[0] is self.model and memo[1] == tuple(groups):
            return memo[2]
        stages = self.model._stages()
        _u3, _ie1, _ie2, idx1, idx2, has1, has2 = self.model._composition_indices(stages, groups)
        cols = {}
        for j, (s1, s2, s3, use3) in enumerate(stages):
            if self.model.mode == "saha-boltzmann":
                c1 = c2 = idx1[j]
            else:
                c1 = idx1[j] if has1[j] else idx2[j]
                c2 = idx2[j] if has2[j] else c1
            cols[s1], cols[s2] = c1, c2
            if use3:
                cols[s3] = c2
        self._sp_col_memo = (self.model, tuple(groups), cols)
        return cols

    def _dln_u(self, T: float):
        """∂ln U/∂T (K⁻¹) of the stages I, II, III per element (as :meth:`Model._ln_u_stages`;
        0 where stage III does not enter) and of each line's species (as :meth:`_u_per_line`).

        With the shipped data (:class:`compquant.cflibs.atomicdata.PackageAtomicData` evaluating
        :func:`compquant.atomic.partition_function`'s default path for every species) in closed
        form, :func:`compquant.atomic.partition.dln_partition_functions_dln_t` (⟨E⟩/kT of the level
        sums, the slope of the tables); for other atomic data by central differences in ln T with
        step h = 10⁻⁵ (truncation h²/6·∂³ln U/∂(ln T)³ and rounding ε·|ln U|/h, both ~10⁻¹⁰).  A
        Monte Carlo shift of ln U is constant in T and does not enter.
        """
        stages = self.model._stages()
        atomic = self.model.atomic
        plan = getattr(self, "_dlnu_plan", None)
        if plan is None or plan[0] is not self.model or plan[1] is not self.L:
            # the species, where each stage and line finds its own, and whether the closed form
            # applies; once per model and line set
            lines = tuple(str(sp) for sp in self.L.species)
            names = tuple(dict.fromkeys([r[0] for r in stages] + [r[1] for r in stages]
                                        + [r[2] for r in stages if r[3]] + list(lines)))
            ev = getattr(atomic, "_evaluator", None)
            closed = ev is not None and all(ev(sp) is not None for sp in names)
            pos = {sp: k for k, sp in enumerate(names)}
            idx = (np.array([pos[r[0]] for r in stages], dtype=np.intp),
                   np.array([pos[r[1]] for r in stages], dtype=np.intp),
                   np.array([pos[r[2]] if r[3] else 0 for r in stages], dtype=np.intp),
                   np.array([r[3] for r in stages], dtype=bool),
                   np.array([pos[sp] for sp in lines], dtype=np.intp))
            plan = (self.model, self.L, names, closed, idx)
            self._dlnu_plan = plan
        _m, _l, names, closed, (i1, i2, i3, use3, il) = plan
        if closed:
            d = dln_partition_functions_dln_t(names, T) / T
            return [d[i1], d[i2], np.where(use3, d[i3], 0.0)], d[il]
        h = 1e-5
        up, down = np.array([T * math.exp(h)]), np.array([T * math.exp(-h)])
        lu_up = self.model._ln_u_stages(stages, up)
        lu_dn = self.model._ln_u_stages(stages, down)
        d_st = [(a - b)[0] / (2.0 * h * T) for a, b in zip(lu_up, lu_dn)]
        d_line = (np.log(self._u_per_line(atomic, float(up[0]))) - np.log(self._u_per_line(atomic, float(down[0])))) / (
            2.0 * h * T)
        return d_st, d_line

    @staticmethod
    def _dln_ne_est_dt(ne_est, T: float) -> float:
        """d ln nₑ/dT (K⁻¹) of an nₑ estimator nₑ(T) (line widths with a Doppler or (T/T_ref)^a
        part): central differences in ln T, step 10⁻⁵ (error ~10⁻¹⁰ of the slope)."""
        h = 1e-5
        up = float(np.atleast_1d(ne_est(np.array([T * math.exp(h)])))[0])
        down = float(np.atleast_1d(ne_est(np.array([T * math.exp(-h)])))[0])
        if not (up > 0 and down > 0):
            return 0.0
        return (math.log(up) - math.log(down)) / (2.0 * h * T)

    def _electron_shares(self, sol, ne_) -> tuple[list, np.ndarray]:
        """Species of the solution and their shares of the electrons, π_c = z_c n_c/nₑ (0 for
        neutral species), from the absolute densities of charge neutrality."""
        nabs = self.absolute_species(sol)
        names = list(sol.ln_n_species)
        charged, ln_z = _charges(tuple(names))
        z = np.zeros(len(names))
        z[charged] = np.exp(ln_z)
        return names, np.array([z[k] * nabs[nm] / ne_ for k, nm in enumerate(names)])

    def _tn_partials(self, state, groups, ne_free, shares):
        """Partial derivatives of the non-linear part of the model ordinate,
        ŷ_i − x_iᵀβ = [ion] Σ(T, nₑ) + ln SA_i, with respect to T (K⁻¹, at fixed nₑ) and to ln nₑ
        (at fixed T), all intercepts and L fixed; also σ_i = ∂ln SA_i/∂ln τ₀ for the intercept and
        ln L columns; ``shares`` is :meth:`_electron_shares` of the state.  Returns ``(d_T, d_n, sig)``.

        Chain rule through the quantities of :meth:`_slab_state` (docs/calibration-free.md §6):

        * Saha shift of the ion rows, Σ = ln S₀ + 1.5 ln T + ΔE₁/kT [− ln nₑ when nₑ is not
          fitted], with the Debye–Hückel lowering ΔE ∝ √(nₑ/T) (Griem 1964 §6-3):
          ∂Σ/∂T = 1.5/T − 1.5 ΔE₁/(kT²), ∂Σ/∂ln nₑ = ΔE₁/(2kT) [− 1];
        * relative stage densities (:meth:`compquant.cflibs.solver.Model._composition`):
          ln n_I = β + ln U_I (or ln n_II − ln r₁ for an element seen only as ion, Boltzmann mode),
          ln n_II = ln n_I + ln r₁, ln n_III = ln n_II + ln r₂ with the Saha ratio
          ln r_z = ln S₀ + 1.5 ln T − ln nₑ + ln U_{z+1} − ln U_z − (E_z − ΔE_z)/kT, so
          ∂ln r_z/∂T = 1.5/T + ∂ln U_{z+1}/∂T − ∂ln U_z/∂T + (E_z − 1.5 ΔE_z)/(kT²) and
          ∂ln r_z/∂ln nₑ = −1 + ΔE_z/(2kT);
        * absolute densities by charge neutrality (:meth:`absolute_species`),
          ln n_s = ℓ_s + ln nₑ − ln Σ_c z_c e^{ℓ_c}: ∂ln n_s = ∂ℓ_s + ∂ln nₑ − Σ_c π_c ∂ℓ_c;
        * peak optical depth (:func:`compquant.cflibs.selfabs.tau0_slab`),
          ln τ₀ = ln n_s − ln U_s − E_i/kT + ln(1 − e^{−x}) + ln φ₀(w_G, w_L) + const,
          x = hc/λkT: ∂/∂T adds E_i/(kT²) − x/(T(eˣ − 1));
        * widths: w_G (Doppler) ∝ √T, w_L from :meth:`lorentz_thin_slopes`;
        * ln SA_i(τ₀, w_G, w_L) by :func:`compquant.cflibs.selfabs.sa_slopes`.

        ∂ln U/∂T from :meth:`_dln_u` (closed form for the shipped data); everything else is in
        closed form.
        """
        tau, T, ne_, sol = state
        model = self.model
        L = self.L
        kT = K_B_EV * T
        u_sp, wg, wlz = self._cog_widths(T, ne_, np.ones(L.n))
        s_tau, s_g, s_l, p_g, p_l = sa_slopes(tau, wg, wlz)
        # widths: ∂w/∂T and ∂w/∂ln nₑ
        wg_c = np.maximum(wg, 1e-12)
        dwg_t = np.where(wg > 1e-12, 0.5 * wg_c / T, 0.0)
        dwl_lt, dwl_n = self.lorentz_thin_slopes(T, ne_, wlz)
        dwl_t = np.where(wlz > 0, dwl_lt / T, 0.0)
        dwl_n = np.where(wlz > 0, dwl_n, 0.0)
        # relative stage densities per element
        stages = model._stages()
        use3, ie1, ie2, _i1, _i2, has1, has2 = model._composition_indices(stages, groups)
        ie1, ie2 = ie1[0], ie2[0]
        Ta, na = np.array([T]), np.array([ne_])
        low1 = model.lowering(Ta, na, 1)[0]
        low2 = model.lowering(Ta, na, 2)[0]
        (du1, du2, du3), du_line = self._dln_u(T)
        dr1_t = 1.5 / T + du2 - du1 + (ie1 - 1.5 * low1) / (kT * T)
        dr2_t = 1.5 / T + du3 - du2 + (ie2 - 1.5 * low2) / (kT * T)
        dr1_n = -1.0 + low1 / (2.0 * kT)
        dr2_n = -1.0 + low2 / (2.0 * kT)
        if model.mode == "saha-boltzmann":
            dn1_t, dn1_n = du1, np.zeros_like(du1)
            dn2_t, dn2_n = dn1_t + dr1_t, dn1_n + dr1_n
        else:
            dn1_t = np.where(has1, du1, du2 - dr1_t)
            dn1_n = np.where(has1, 0.0, -dr1_n)
            dn2_t = np.where(has2, du2, dn1_t + dr1_t)
            dn2_n = np.where(has2, 0.0, dn1_n + dr1_n)
        dn3_t, dn3_n = dn2_t + dr2_t, dn2_n + dr2_n
        dl_t, dl_n = {}, {}
        for j, (s1, s2, s3, u3) in enumerate(stages):
            dl_t[s1], dl_n[s1] = dn1_t[j], dn1_n[j]
            dl_t[s2], dl_n[s2] = dn2_t[j], dn2_n[j]
            if u3:
                dl_t[s3], dl_n[s3] = dn3_t[j], dn3_n[j]
        # charge neutrality: the electrons' shares π_c = z_c n_c/nₑ
        names, pi = shares
        mean_t = float(sum(pi[k] * dl_t[nm] for k, nm in enumerate(names)))
        mean_n = float(sum(pi[k] * dl_n[nm] for k, nm in enumerate(names)))
        dln_ns_t = np.array([dl_t[str(sp)] for sp in L.species]) - mean_t
        dln_ns_n = np.array([dl_n[str(sp)] for sp in L.species]) + 1.0 - mean_n
        # peak optical depth (the widths' share through φ₀ is added with the SA's own)
        x = HC_EV_NM / (L.wl * kT)  # hc/λkT
        dtau_t = dln_ns_t - du_line + L.ei / (kT * T) - x / (T * np.expm1(x))
        dtau_n = dln_ns_n
        g_w = s_g + s_tau * p_g  # total ∂ln SA/∂w_G through the SA and φ₀
        l_w = s_l + s_tau * p_l
        d_t = s_tau * dtau_t + g_w * dwg_t + l_w * dwl_t
        d_n = s_tau * dtau_n + l_w * dwl_n
        ion = model.is_ion
        d_t = d_t + np.where(ion, 1.5 / T - 1.5 * low1 / (kT * T), 0.0)
        d_n = d_n + np.where(ion, low1 / (2.0 * kT) - (0.0 if ne_free else 1.0), 0.0)
        return d_t, d_n, s_tau

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
        """Weighted residuals of the self-absorbed model for parameters θ = (β[, ln L]) and their
        Jacobian.  Returns ``(resid, jac, y_raw, bounds)``.

        Residual of line i (weights w_i = 1/(u_i² + s²), s the Paule–Mandel scatter, §2)::

            r_i = √w_i (y_i − ŷ_i),   ŷ_i = x_iᵀβ + [ion] Σ(T, nₑ) + ln SA_i(τ₀ᵢ, w_G,i, w_L,i)
            τ₀ᵢ = L n_s(i) φᵢ(λ₀) λ⁴/(8πc) g_k A_ki e^{−E_i/kT}(1 − e^{−hc/λkT}) / U_s(T)
            n_s = nₑ e^{ℓ_s} / Σ_c z_c e^{ℓ_c},   ℓ_s = β_col(s) + f_s(T, nₑ)  (closure, charge balance)

        with Σ the Saha shift of the ion rows (docs/calibration-free.md §2, §6).  The widths
        depend on T and nₑ only, so for an intercept q_j and for ln L (Cristoforetti & Tognoni
        2013: only the column density n·L enters)::

            ∂r_i/∂q_j  = −√w_i [X_ij + σ_i (δ_col(s(i)),j − Σ_c π_c δ_col(c),j)]
            ∂r_i/∂ln L = −√w_i σ_i

        where σ_i = ∂ln SA/∂ln τ₀ at fixed widths (:func:`compquant.cflibs.selfabs.dln_sa_dln_tau0`)
        and π_c = z_c n_c/nₑ the share of charged species c in the electrons.  The slope (θ₀ = m =
        −1/kT, so dT/dm = kT²) and ln nₑ columns, which also move the widths, U(T), the Saha and
        lowering terms, are in closed form too (:meth:`_tn_partials`; ∂ln U/∂T and the slope of an
        nₑ estimator nₑ(T) by central differences of those cheap functions alone), so a Jacobian
        costs no evaluation of the model beyond its base point; with :attr:`ANALYTIC_TN` off they
        are forward differences with scipy's step (√ε·max(1, |θ|), turned back at a bound).  The
        tests compare the whole Jacobian with central differences.
        """
        s = self.s
        ne_free = ne_est is None
        ion = self.model.is_ion
        y_raw = np.log(self.L.intensity) + self.model.y0 - self.ln_zeta
        sw = np.sqrt(self.w)
        p = X.shape[1]
        n_par = p + fit_length
        big = np.full(self.L.n, 1e3)
        kept = {}  # the last few points: the base of a Jacobian and its difference points

        def evaluate(theta):
            key = theta.tobytes()
            hit = kept.get(key)
            if hit is not None:
                return hit
            beta = theta[:p]
            L_cm = math.exp(theta[-1]) if fit_length else length_cm
            m = beta[0]
            out = (big, None)
            if m < 0:
                T = -1.0 / (K_B_EV * m)
                try:
                    sa_i, tau, _T, ne_, sol = self._slab_state(beta, L_cm, ne_est, groups)
                except (PhysicsError, FloatingPointError, ValueError):
                    sa_i = None
                if sa_i is not None:
                    shift = LN_SAHA_PREFACTOR + 1.5 * math.log(T) + float(
                        self.model.lowering(np.array([T]), np.array([ne_]), 1)[0]) / (K_B_EV * T)
                    if not ne_free:
                        shift -= math.log(ne_)
                    pred = X @ beta + np.where(ion, shift, 0.0) + np.log(np.maximum(sa_i, 1e-300))
                    r = sw * (y_raw - pred)
                    if np.all(np.isfinite(r)):
                        out = (r, (tau, T, ne_, sol))
            if len(kept) >= 4:
                kept.clear()
            kept[key] = out
            return out

        def resid(theta):
            return evaluate(theta)[0]

        lo = np.full(n_par, -np.inf)
        hi = np.full(n_par, np.inf)
        lo[0], hi[0] = -1.0 / (K_B_EV * 0.5 * s.t_min_k), -1.0 / (K_B_EV * 2.0 * s.t_max_k)
        if ne_free:
            lo[p - 1], hi[p - 1] = math.log(1e13), math.log(1e20)
        if fit_length:
            lo[-1], hi[-1] = math.log(1e-6), math.log(10.0)
        fd_cols = [0] + ([p - 1] if ne_free else [])
        q_cols = [j for j in range(1, p) if j not in fd_cols]

        def jac(theta):
            theta = np.asarray(theta, dtype=float)
            r0, state = evaluate(theta)
            J = np.zeros((self.L.n, n_par))
            if state is None:
                return J  # the constant residual of an invalid point
            tau, T, ne_, sol = state
            names, pi = shares = self._electron_shares(sol, ne_)
            if self.ANALYTIC_TN:
                d_t, d_n, sig = self._tn_partials(state, groups, ne_free, shares)
            else:
                u_sp, wg, wlz = self._cog_widths(T, ne_, np.ones(self.L.n))
                sig = dln_sa_dln_tau0(tau, wg, wlz)
            cols = self._species_columns(groups)
            share = {}  # Σ_c π_c δ_col(c),j per column j
            for k, nm in enumerate(names):
                if pi[k] > 0:
                    share[cols[nm]] = share.get(cols[nm], 0.0) + pi[k]
            col_of_line = np.array([cols[str(sp)] for sp in self.L.species])
            for j in q_cols:
                dln_n = (col_of_line == j).astype(float) - share.get(j, 0.0)
                J[:, j] = -sw * (X[:, j] + sig * dln_n)
            if fit_length:
                J[:, -1] = -sw * sig
            if self.ANALYTIC_TN:
                # θ₀ = m = −1/kT: dT/dm = kT²; nₑ from an estimator ne_est(T) moves with T
                g = 0.0 if ne_free else self._dln_ne_est_dt(ne_est, T)
                J[:, 0] = -sw * (X[:, 0] + K_B_EV * T * T * (d_t + g * d_n))
                if ne_free:
                    J[:, p - 1] = -sw * (X[:, p - 1] + d_n)
                return J
            eps = np.finfo(float).eps ** 0.5
            for j in fd_cols:
                h = eps * max(1.0, abs(theta[j])) * (1.0 if theta[j] >= 0 else -1.0)
                if not (lo[j] <= theta[j] + h <= hi[j]):
                    h = -h
                th = theta.copy()
                th[j] = theta[j] + h
                h = th[j] - theta[j]
                J[:, j] = (evaluate(th)[0] - r0) / h
            return J

        return resid, jac, y_raw, (lo, hi)

    def _lsq(self, resid, theta0, bounds, coarse, jac="2-point", tol=None):
        """:func:`scipy.optimize.least_squares` (trf, bounded, ``x_scale="jac"``) from ``theta0``
        moved inside the bounds; ``xtol = ftol = tol`` when given, else 10⁻⁶ (``coarse``) or
        xtol 10⁻¹⁰, ftol 10⁻¹².  Returns ``(chi2, theta)``, None when scipy refuses the start."""
        from scipy.optimize import least_squares

        lo, hi = bounds
        span = np.where(np.isfinite(hi - lo), hi - lo, 1.0)
        th0 = np.clip(theta0, np.where(np.isfinite(lo), lo + 1e-6 * span, -np.inf),
                      np.where(np.isfinite(hi), hi - 1e-6 * span, np.inf))
        try:
            res = least_squares(resid, th0, jac=jac if self.ANALYTIC_JACOBIAN else "2-point", method="trf",
                                bounds=(lo, hi), x_scale="jac",
                                max_nfev=60 if coarse else 200,
                                xtol=tol if tol is not None else 1e-6 if coarse else 1e-10,
                                ftol=tol if tol is not None else 1e-6 if coarse else 1e-12)
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
                chi2, beta, L_cm = self._fit_free_length(X, groups, ne_est, b0, coarse)
                chi2, th = self._consistent_weights_sa(X, groups, ne_est, True, None,
                                                       np.concatenate([beta, [math.log(L_cm)]]), chi2, coarse)
                beta, L_cm = th[:-1], math.exp(th[-1])
            else:
                chi2, beta = self._fit_known_length(X, groups, ne_est, b0, length_cm, coarse)
                chi2, beta = self._consistent_weights_sa(X, groups, ne_est, False, length_cm, beta, chi2, coarse)
            sa_new = np.maximum(self.sa_of_beta(beta, L_cm, ne_est, groups)[0], 1e-300)
            step = float(np.max(np.abs(np.log(sa_new) - np.log(sa))))
            sa = sa_new
            if step < 1e-4 or ne_est is None:  # nₑ from the Saha balance does not depend on SA
                break
        ne_name, ne_est = ne_pick(sa)
        try:
            sol = self.solve_central(np.maximum(sa, s.sa_min_factor), ne_name, ne_est)
        except PhysicsError:
            if not self.u_model or getattr(self, "_pm_off", False):
                raise
            # the Paule–Mandel weights leave the linear solve without a temperature: fit again
            # with the stated u alone (the s it needed stays in sa_info, and fit_quality judges
            # the stated χ², which then refuses the solution)
            self._pm_off = True
            self.u_model = 0.0
            self.w = 1.0 / self.u_y**2
            self.sa_info.update(scatter_weights_dropped=True)
            return self.nls_selfabs(length_cm, ne_pick, fit_length, coarse)
        _, tau = self.sa_cog(sol, L_cm, sa)
        return sa, sol, tau, ne_name, ne_est, L_cm, chi2

    def _consistent_weights_sa(self, X, groups, ne_est, fit_length, length_cm, theta, chi2, coarse):
        """Paule–Mandel weights for the self-absorbed fit (docs/calibration-free.md §2, §6).

        The thin modes' estimator (:func:`compquant.cflibs.fitting.paule_mandel_scatter`, Paule
        & Mandel 1982) applied to the fit linearised at its optimum θ̂ (Gauss–Newton): design
        X_lin = ∂ŷ/∂θ (the fit's Jacobian, :meth:`_residual_fn`, divided by −√w) and ordinate
        y_lin = y − ŷ(θ̂) + X_lin θ̂, so ν = n − dim θ counts T, the intercepts, ln nₑ and ln L.
        The extra variance s² (ln intensity) is the one for which χ² = Σ (y_i − ŷ_i)²/(u_i² + s²)
        equals ν; the fit is then refined with the weights 1/(u_i² + s²) from θ̂ (twice at most,
        as in the thin modes).  s (``self.u_model``) is drawn in the Monte Carlo (§8) and judged
        by the ``fit_quality`` check (§4a): blends and atomic-data errors move lines by 10–30 %,
        a slab model that needs much more has not found the plasma.  Returns ``(chi2, theta)``
        with χ² under the final weights.  Skipped once the weights have been dropped because the
        linear solve at the weighted fit's SA had no temperature (:meth:`nls_selfabs`).
        """
        if getattr(self, "_pm_off", False):
            return chi2, theta
        for _ in range(2):
            resid, jac, _y, bounds = self._residual_fn(X, groups, ne_est, fit_length, length_cm)
            r = resid(theta)
            J = jac(theta)
            if not np.any(J):
                break  # an invalid point: nothing to weigh
            sw = np.sqrt(self.w)
            x_lin = -J / sw[:, None]
            y_lin = r / sw + x_lin @ theta
            s_new = paule_mandel_scatter(x_lin, y_lin, self.u_y)
            if abs(s_new - self.u_model) <= 1e-4 * max(s_new, 1e-12):
                break
            self.u_model = s_new
            self.w = 1.0 / (self.u_y**2 + s_new**2)
            resid, jac, _y, bounds = self._residual_fn(X, groups, ne_est, fit_length, length_cm)
            out = self._lsq(resid, theta, bounds, coarse, jac=jac)
            chi2, theta = out if out is not None else (float(np.sum(resid(theta) ** 2)), theta)
        self.sa_info.update(model_scatter_ln=float(self.u_model), dof_selfabs=int(self.L.n - theta.size))
        return chi2, theta

    #: the length continuation stops once χ² has stayed above the best grid point's on this many
    #: successive grid points (the minimum is bracketed); None follows the whole grid to 1 cm
    GRID_STOP_AFTER_RISES: int | None = 2
    #: xtol = ftol of the grid points' fits (10⁻⁶ before 2026-12-03): they only choose the start
    #: of the refinement with L free, which keeps xtol 10⁻¹⁰, ftol 10⁻¹²
    GRID_TOL = 1e-4

    def _fit_free_length(self, X, groups, ne_est, b0, coarse):
        """Fit with the plasma length L free: continuation along a logarithmic grid of L (cm) from
        nearly thin to 1 cm, each step warm-started from the previous one, then the best grid point
        refined with L free (see :meth:`nls_selfabs`).  Returns ``(chi2, beta, length_cm)``.

        The continuation stops early once the minimum of the profile χ²(L) is bracketed: when
        :attr:`GRID_STOP_AFTER_RISES` (2) successive grid points after the best one have a larger
        χ² (a factor 10 in L on the 11-point grid).  The refinement starts from the best grid point
        either way, so on a profile with one minimum the result is the same as with the whole
        grid; a second, deeper minimum at a greater length behind such a rise is no longer looked
        for (the continuation's purpose is the first, physical branch from the thin side).  All 113
        profiles of the demo's samples and the cflibs tests had one minimum (2026-12-03).

        The grid points are fitted to xtol = ftol = :attr:`GRID_TOL` (10⁻⁴): their χ² only ranks
        them and their parameters only start the next point and the refinement, whose own
        tolerances (xtol 10⁻¹⁰, ftol 10⁻¹²) decide the result.  Against 10⁻⁶ the results moved by
        ≤ 10⁻⁹ relative (T, nₑ, mass fractions, u) on the demo and the tests, no flag changed.
        """
        best = None
        beta = b0
        n_grid = 7 if coarse else 11
        rises = 0
        for L_try in np.geomspace(1e-5, 1.0, n_grid):  # cm; a grid point's fit to GRID_TOL
            resid_g, jac_g, _, bounds_g = self._residual_fn(X, groups, ne_est, False, float(L_try))
            out = self._lsq(resid_g, beta, bounds_g, coarse=True, jac=jac_g, tol=self.GRID_TOL)
            if out is None:
                continue
            chi_g, beta = out
            if best is None or chi_g < best[0]:
                best = (chi_g, beta.copy(), float(L_try))
                rises = 0
            else:
                rises += 1
                if self.GRID_STOP_AFTER_RISES is not None and rises >= self.GRID_STOP_AFTER_RISES:
                    break
        if best is None:
            raise PhysicsError("the self-absorbed Saha–Boltzmann fit found no solution",
                               where=f"{self.where}: self-absorption correction",
                               fix="use weaker lines, or set self_absorption = 'detect'")
        resid, jac, _, bounds = self._residual_fn(X, groups, ne_est, True, None)
        th0 = np.concatenate([best[1], [math.log(best[2])]])
        out = self._lsq(resid, th0, bounds, coarse, jac=jac)
        chi2, th = out if out is not None and out[0] <= best[0] else (best[0], th0)
        return chi2, th[:-1], math.exp(th[-1])

    def _fit_known_length(self, X, groups, ne_est, b0, length_cm, coarse):
        """Fit at a given plasma length (cm) from the start ``b0`` and starts with the slope fixed
        at 1, 0.75 and 1.35 × ``t_start_k``; the lowest χ² wins.  Returns ``(chi2, beta)``."""
        s = self.s
        resid, jac, _, bounds = self._residual_fn(X, groups, ne_est, False, length_cm)
        cands = [b0] + [self.initial_beta(T0, ne_est, X, np.log(self.L.intensity) + self.model.y0
                                          - self.ln_zeta) for T0 in (s.t_start_k, 0.75 * s.t_start_k,
                                                                      1.35 * s.t_start_k)]
        best = None
        for c in cands[: 2 if coarse else None]:
            out = self._lsq(resid, c, bounds, coarse, jac=jac)
            if out is not None and (best is None or out[0] < best[0]):
                best = out
            # a start that fits within the noise (χ²/ν ≤ 2) needs no other start
            if best is not None and best[0] <= 2.0 * max(self.L.n - X.shape[1], 1):
                break
        if best is None:
            raise PhysicsError("the self-absorbed Saha–Boltzmann fit found no solution",
                               where=f"{self.where}: self-absorption correction",
                               fix="check the plasma length or use weaker lines")
        return best

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
