"""Monte Carlo uncertainty of one analysis: intensities (with the shots' covariance), A_ki,
partition functions, response, self-absorption and nₑ inputs drawn together and solved in one
batch (docs/calibration-free.md §8; JCGM 101:2008 and JCGM 102:2011).
"""

from __future__ import annotations

import math

import numpy as np

from compquant.atomic import species_name


class MonteCarlo:
    """Mixin of :class:`compquant.cflibs.analysis._Analysis`: Monte Carlo uncertainty."""

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
