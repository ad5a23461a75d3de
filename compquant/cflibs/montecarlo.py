"""Monte Carlo uncertainty of one analysis: intensities (with the shots' covariance), A_ki,
partition functions, response, self-absorption and nₑ inputs drawn together and solved in one
batch (docs/calibration-free.md §8; JCGM 101:2008 and JCGM 102:2011).
"""

from __future__ import annotations

import math

import numpy as np

from compquant.atomic import species_name

#: smallest degrees of freedom of the Student-t draws of the line means: ``t_nu`` has a finite
#: variance only for ``nu > 2`` (JCGM 101:2008 §6.4.9.4), and u is the draws' standard deviation
MIN_T_DOF = 3


def draw_line_means(rng, rng_t, eps, intensity, u_intensity, shot_dev):
    """Monte Carlo draws of a sample's line means: ``(I_d, nu)``, ``I_d`` of shape ``(n_draws, n_lines)``
    and ``nu`` the degrees of freedom of their Student t (``None``: normal draws).

    Without shot deviations every line is ``N(I, u_I)``, independently (``eps``: standard normal
    draws, ``(n_draws, n_lines)``).  With the relative deviations ``D`` (``(n, n_lines)``) of the
    sample's ``n`` accepted shots, the means share each shot's plasma and are drawn with the
    shots' covariance over ``n`` (GUM 5.2 and C.3.4; JCGM 102:2011 §6.4.3)::

        I_d = I (1 + z^T D / sqrt(n (n - 1)) * sqrt(nu / chi2_nu)) + u_rest eps,   nu = n - 1

    with ``z ~ N(0, 1)`` per shot and one ``chi2_nu`` per draw (``rng_t``): a multivariate
    Student t with ``nu = n - 1`` degrees of freedom, location ``I`` and scale matrix
    ``S / n`` (``S`` the shots' sample covariance), the normal divided by an independent
    ``sqrt(chi2_nu / nu)`` (Cornish 1954, Aust. J. Phys. 7, 531, from memory; Kotz & Nadarajah 2004,
    *Multivariate t distributions*, ch. 1).  Each line's marginal is then the scaled and shifted
    ``t_{n-1}(Ibar, s^2/n)`` that JCGM 101:2008 §6.4.9 assigns to the mean of ``n`` indications
    of unknown standard deviation: the draws' variance is ``(n-1)/(n-3) s^2/n`` (3 × for 4 shots,
    1.07 × for 30), so that ``U = 2u`` covers about 95 % however few the shots (GUM G.3: a
    normal draw of the estimate ``s/sqrt(n)`` covered 86 % with 4 shots, ``P(|t_3| <= 2)``).
    JCGM 102:2011 §6.4.3 states the joint PDF of ``N`` quantities from ``n`` indications with
    ``nu = n - N`` (from memory, verify), which needs more shots than lines; one ``chi2``
    shared by the lines keeps every marginal at JCGM 101's ``n - 1``.  ``nu`` is at least
    :data:`MIN_T_DOF` (3 shots: ``t_2`` has no variance; the caller warns).  The part of
    ``u_I`` the shot scatter does not explain (``u_rest``: a fitted profile's shape term, a
    blend correction) is a stated uncertainty, drawn normal and independently.
    """
    if shot_dev is None:
        return intensity[None, :] + u_intensity[None, :] * eps, None
    D = shot_dev
    k = D.shape[0]
    nu = max(k - 1, MIN_T_DOF)
    n = eps.shape[0]
    scale = np.sqrt(nu / rng_t.chisquare(nu, size=(n, 1)))
    rel = rng.standard_normal((n, k)) @ D / math.sqrt(k * (k - 1.0)) * scale
    u_shot = intensity * np.sqrt(np.sum(D**2, axis=0) / (k * (k - 1.0)))
    u_rest = np.sqrt(np.maximum(u_intensity**2 - u_shot**2, 0.0))
    return intensity[None, :] * (1.0 + rel) + u_rest[None, :] * eps, nu


class MonteCarlo:
    """Mixin of :class:`compquant.cflibs.analysis._Analysis`: Monte Carlo uncertainty."""

    def monte_carlo(self, n, seed):
        L = self.L
        rng = np.random.default_rng(seed)
        eps = rng.standard_normal((n, L.n))
        # the Student-t scale of the shot draws has its own stream, so that the normal draws
        # (and with many shots the result, t -> normal) stay those of the seed
        I_d, nu = draw_line_means(rng, np.random.default_rng([int(seed), 1]), eps, L.intensity,
                                  L.u_intensity, self.shot_dev)
        if nu is not None and nu > self.shot_dev.shape[0] - 1:
            self._warn(f"only {self.shot_dev.shape[0]} shots: the line means are drawn with a Student t of "
                       f"{nu} degrees of freedom instead of {self.shot_dev.shape[0] - 1} (whose variance is "
                       "infinite), so u and U understate the uncertainty; measure at least 4 shots")
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
