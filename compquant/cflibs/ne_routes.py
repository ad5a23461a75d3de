"""Electron-density routes of one analysis: which estimators the data allow, which one is used,
what each lacks, and every route's value for the agreement check (docs/calibration-free.md §3).

The estimators themselves (H-alpha, Stark widths, fixed) are in
:mod:`compquant.cflibs.electron_density`; nₑ from the Saha balance is a fitted parameter of
:mod:`compquant.cflibs.solver`.
"""

from __future__ import annotations

import numpy as np

from compquant.cflibs.electron_density import FixedNe, HAlphaNe, StarkLinesNe
from compquant.cflibs.solver import Model
from compquant.errors import PhysicsError


def saha_t_coupling(sol) -> dict:
    """How the Saha-balance nₑ follows the fitted T (docs/calibration-free.md §3).

    With ln nₑ a fitted parameter the ion lines fix nₑ, and T rests on the neutral lines; a
    slope error dm (m = −1/kT, so dm = −m d ln T) moves ln nₑ along the fit's covariance, and the
    Saha shift adds its T^{3/2}:

        d ln nₑ/d ln T = 1.5 + (−m) cov(ln nₑ, m)/var(m)  ≈ 1.5 + (x*_II − x̄)/kT,

    x*_II = E_ion + E_k of the ion lines, x̄ the weighted mean E_k of the neutral lines (the
    Debye–Hückel term's own, small T dependence left out).  ``t_share_of_u_ln_ne`` is the share of
    the fit's var(ln nₑ) that the slope explains, ρ² = cov²/(var(m) var(ln nₑ)).  Returns
    ``dln_ne_dln_t`` and ``t_share_of_u_ln_ne`` (empty when the covariance is degenerate).
    """
    c = np.asarray(sol.fit.cov[0], float)
    v_m, v_n, c_mn = float(c[0, 0]), float(c[-1, -1]), float(c[0, -1])
    if not (v_m > 0 and v_n > 0 and np.isfinite(c_mn)):
        return {}
    m = float(sol.slope[0])
    return {"dln_ne_dln_t": 1.5 + (-m) * c_mn / v_m, "t_share_of_u_ln_ne": c_mn**2 / (v_m * v_n)}


class NeRoutes:
    """Mixin of :class:`compquant.cflibs.analysis._Analysis`: the electron-density routes."""

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
                            "used": self.ne_name == "saha", "temperature_k": float(sb.T[0]),
                            **saha_t_coupling(sb)})
            except PhysicsError as exc:
                out.append({"method": "saha", "ne_cm3": None, "u_ne_cm3": None, "lines": [],
                            "used": False, "note": exc.what})
        return out
