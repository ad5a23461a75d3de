"""Self-absorbed Saha–Boltzmann fit of one analysis by nonlinear least squares, with a known or
fitted plasma length (columnar density, Cristoforetti & Tognoni 2013), and the removal of lines
too optically thick to correct (docs/calibration-free.md §4).
"""

from __future__ import annotations

import math

import numpy as np

from compquant.cflibs.solver import Model, Solution
from compquant.errors import AtomicDataError, PhysicsError
from compquant.plasma.constants import KB_EV as K_B_EV
from compquant.plasma.constants import LN_SAHA_PREFACTOR


class SelfAbsFit:
    """Mixin of :class:`compquant.cflibs.analysis._Analysis`: the self-absorbed fit."""

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
                chi2, beta, L_cm = self._fit_free_length(X, groups, ne_est, b0, coarse)
            else:
                chi2, beta = self._fit_known_length(X, groups, ne_est, b0, length_cm, coarse)
            sa_new = np.maximum(self.sa_of_beta(beta, L_cm, ne_est, groups)[0], 1e-300)
            step = float(np.max(np.abs(np.log(sa_new) - np.log(sa))))
            sa = sa_new
            if step < 1e-4 or ne_est is None:  # nₑ from the Saha balance does not depend on SA
                break
        ne_name, ne_est = ne_pick(sa)
        sol = self.solve_central(np.maximum(sa, s.sa_min_factor), ne_name, ne_est)
        _, tau = self.sa_cog(sol, L_cm, sa)
        return sa, sol, tau, ne_name, ne_est, L_cm, chi2

    def _fit_free_length(self, X, groups, ne_est, b0, coarse):
        """Fit with the plasma length L free: continuation along a logarithmic grid of L (cm) from
        nearly thin to 1 cm, each step warm-started from the previous one, then the best grid point
        refined with L free (see :meth:`nls_selfabs`).  Returns ``(chi2, beta, length_cm)``."""
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
        return chi2, th[:-1], math.exp(th[-1])

    def _fit_known_length(self, X, groups, ne_est, b0, length_cm, coarse):
        """Fit at a given plasma length (cm) from the start ``b0`` and starts with the slope fixed
        at 1, 0.75 and 1.35 × ``t_start_k``; the lowest χ² wins.  Returns ``(chi2, beta)``."""
        s = self.s
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
