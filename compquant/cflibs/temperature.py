"""Temperature of one analysis: the central joint (Saha–)Boltzmann solve, consistent weights
(Paule & Mandel 1982), T from the nearly thin lines, and per-species Boltzmann plots
(docs/calibration-free.md §2, §4a).
"""

from __future__ import annotations

import numpy as np

from compquant.cflibs.fitting import paule_mandel_scatter, wls_batch
from compquant.cflibs.solver import Model, Solution
from compquant.errors import AtomicDataError, PhysicsError
from compquant.plasma.constants import KB_EV as K_B_EV


class TemperatureFit:
    """Mixin of :class:`compquant.cflibs.analysis._Analysis`: temperature and Boltzmann fits."""

    def solve_central(self, sa, ne_name, ne_est, T0=None) -> Solution:
        ln_i = np.log(self.L.intensity) - np.log(sa) - self.ln_zeta
        T0 = getattr(self, "_T_warm", None) if T0 is None else T0
        sol = self.model.solve(ln_i[None, :], 0.0, self.w, ne_est, strict=True,
                               T0=None if T0 is None else np.array([T0]))
        self._T_warm = float(sol.T[0])
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

    def thin_subset_temperature(self, weights=None):
        """T (and its fit u) from the nearly thin lines alone (SA ≥ ``sa_flag_below``), for the
        self-absorption fits: evidence that does not rest on the slab model (§4a); ``None``
        when those lines cannot determine T.  ``weights``: per-line weights (default the
        solution's, 1/(u_i² + s²))."""
        if self.s.self_absorption not in ("columnar", "curve_of_growth"):
            return None
        keep = self.sa >= self.s.sa_flag_below
        if keep.sum() < 3 or keep.all():
            return None
        try:
            sub = Model(self.L.subset(keep), self.atomic, self.s)
            ln_i = (np.log(self.L.intensity) - np.log(self.sa) - self.ln_zeta)[keep]
            sol = sub.solve(ln_i[None], 0.0, (self.w if weights is None else weights)[keep], self.ne_est,
                            strict=True,
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
