"""Certification of one analysis and its :class:`~compquant.cflibs.result.CFResult`: LTE
criteria, fit quality, per-line self-absorption detection and flags, the plasma checks that
decide whether any mass fraction is certified, and the nₑ agreement (docs/calibration-free.md
§4a, §6, §7; the checks are :mod:`compquant.cflibs.consistency`).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import chdtrc

from compquant.cflibs.consistency import plasma_checks
from compquant.cflibs.electron_density import gaussian_fwhm_nm, lorentz_from_voigt, stark_width_linear
from compquant.cflibs.inputs import _gate_delay_s
from compquant.cflibs.linewidths import line_width_check
from compquant.cflibs.lte import check_lte
from compquant.cflibs.result import CFResult
from compquant.cflibs.selfabs import EL_SHERBINI_ALPHA, sa_from_width, sa_reference_line
from compquant.plasma.constants import KB_EV as K_B_EV


class Certification:
    """Mixin of :class:`compquant.cflibs.analysis._Analysis`: checks, flags and the result."""


    def build(self, mc_draws, seed) -> CFResult:
        """The :class:`~compquant.cflibs.result.CFResult` of the current solution: Monte Carlo u,
        closure, LTE, fit quality, line and element rows, nₑ routes and the plasma checks."""
        s, sol = self.s, self.sol
        T = float(sol.T[0])
        ne = float(sol.ne[0])
        u_T_fit = float(sol.u_slope[0] / (K_B_EV * sol.slope[0] ** 2))
        if sol.ne_from_fit:
            u_ln_ne_c = float(sol.u_ln_ne_fit[0])
        else:
            u_ln_ne_c = float(self.ne_est.u_ln(np.array([T])))
        fixed_el = next(iter(s.fixed), None)
        u_T, u_ne, u_w, u_x, mc, mc_ok = self._mc_summary(mc_draws, seed, u_T_fit, ne * u_ln_ne_c)
        if not mc_ok:
            mc["note"] = "no Monte Carlo: u from the fit covariance for T and nₑ only"
            self.flags.append("no_concentration_uncertainty")
        wfrac, closure_sum, u_w = self._closed_fractions(sol, u_w, mc, mc_ok, fixed_el)
        lte = self._lte_check(T, ne)
        chi2, dof, p = self._fit_quality(sol.fit)
        det = self.detection(sol)
        lines = self._line_rows(sol, det)
        elements = self._element_rows(sol, wfrac, u_w, u_x, lines, fixed_el)
        elements += self._undetermined_rows(sol, fixed_el)
        if fixed_el:
            self.sa_info.setdefault("note", "")
        ne_estimates = self._ne_estimates(T)
        species_rows = self._species_rows(sol)
        checks, failed, ne_agreement = self._certify(T, u_T_fit, ne, u_ne, ne_estimates, lte, species_rows,
                                                     elements, p, sol.fit, dof)
        return CFResult(
            sample_id=self.sample_id, temperature_k=T, u_temperature_k=float(u_T),
            electron_density_cm3=ne, u_electron_density_cm3=float(u_ne),
            ne_method={"saha": "saha_balance", "h_alpha": "h_alpha_stark_width",
                       "stark": "stark_widths", "fixed": "fixed"}[self.ne_name],
            fit_mode=s.fit, elements=elements, ne_estimates=ne_estimates, lte=lte.to_dict(),
            species=species_rows, lines=lines, excluded_lines=list(self.excluded),
            self_absorption=dict(self.sa_info),
            fit=self._fit_record(sol, u_T_fit, chi2, dof, p, closure_sum),
            monte_carlo=mc,
            one_point=None if self.one_point is None else self.one_point.summary(),
            flags=list(dict.fromkeys(self.flags)), warnings=list(self.warnings),
            settings=s.to_dict(), plasma_consistent=not failed, plasma_checks=checks,
            rejected_lines=list(self.rejected), upper_limits=list(self.upper_limit_checks),
            ne_agreement=ne_agreement, intensity_basis=self.basis,
        )

    def _lte_check(self, T, ne):
        """LTE criteria at (T, nₑ) (:func:`compquant.cflibs.lte.check_lte`); their flags join the result's."""
        s, L = self.s, self.L
        dE = float(np.max(L.ek - L.ei))
        lte = check_lte(T, ne, dE, gate_delay_s=_gate_delay_s(self.acq),
                        lightest_mass_u=float(np.min(self.model.masses)),
                        gradient_length_mm=s.gradient_length_mm, f=s.lte_f, gaunt=s.lte_gaunt,
                        transient_ratio=s.lte_transient_ratio, diffusion_ratio=s.lte_diffusion_ratio)
        self.flags.extend(lte.flags)
        return lte

    def _fit_quality(self, fit):
        """χ², degrees of freedom and p-value (χ² survival function) of the joint fit:
        ``(chi2, dof, p)``; flag ``cf_fit_poor`` when p < 10⁻³ against the lines' stated u."""
        chi2, dof = float(fit.chi2[0]), fit.dof
        p = float(chdtrc(dof, chi2)) if dof > 0 else float("nan")  # χ² survival function
        # the flag judges the lines against their stated u (before any Paule–Mandel scatter)
        chi2_stated = float(np.sum(fit.residuals[0] ** 2 / self.u_y**2)) if self.u_model > 0 else chi2
        p_stated = float(chdtrc(dof, chi2_stated)) if dof > 0 else float("nan")
        if dof > 0 and p_stated < 1e-3:
            self.flags.append("cf_fit_poor")
        return chi2, dof, p

    def _fit_record(self, sol, u_T_fit, chi2, dof, p, closure_sum) -> dict:
        """The ``fit`` entry of the result."""
        s, fit = self.s, sol.fit
        return {"mode": s.fit, "slope_per_ev": float(sol.slope[0]), "u_slope_per_ev": float(sol.u_slope[0]),
                "u_temperature_fit_k": u_T_fit, "chi2": chi2, "dof": dof, "p_value": p,
                "birge_ratio": float(fit.birge[0]) if dof > 0 else None,
                "groups": [str(g) for g in sol.groups],
                "intercepts": [float(x) for x in fit.beta[0, 1:1 + len(sol.groups)]],
                "iterations": sol.iterations, "closure_sum": float(closure_sum[0]),
                "model_scatter_ln": float(self.u_model), "blend_correction": dict(self.blend_info)}

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
                                       # judged by the lines' stated u: s is measured by the fit under test
                                       thin=self.thin_subset_temperature(weights=1.0 / self.u_y**2),
                                       widths=line_width_check(T=T, ne=ne, lines=self.L, w_instr_nm=self.w_instr,
                                                               mass_u=self.mass_line, settings=s))
        failed_any = {c["check"] for c in checks if c["checked"] and not c["passed"]}  # refusing or not
        for check, flag in (("line_widths", "line_widths_inconsistent"),
                            ("species_temperatures", "species_temperatures_disagree"),
                            ("species_mean_temperature", "species_mean_temperature_disagrees")):
            if check in failed_any:
                self.flags.append(flag)
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
            wg = gaussian_fwhm_nm(L.wl, T, self.mass_line, self.w_instr)
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
                "blend_share": float(self.blend_share[i]), "blend_self_share": float(self.blend_self_share[i]),
                "sa_cog": float(det["sa_cog"][i]), "sa_ratio": float(det["sa_ratio"][i]),
                "u_sa_ratio": float(det["u_sa_ratio"][i]), "sa_width": float(det["sa_width"][i]),
                "u_sa_width": float(det["u_sa_width"][i]), "reference_line": det["ref_line"][i],
                "flags": fl,
            })
        return rows
