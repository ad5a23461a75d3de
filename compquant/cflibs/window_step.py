"""Window capture correction of one analysis: each window-integrated line is divided by the
fraction of its Voigt area the window measures (docs/calibration-free.md §1a; the fraction is
:func:`compquant.cflibs.capture.window_capture_fraction`).
"""

from __future__ import annotations

import numpy as np

from compquant.cflibs.capture import window_capture_fraction
from compquant.cflibs.electron_density import gaussian_fwhm_nm
from compquant.errors import PhysicsError

#: smallest window capture fraction corrected for (a line that much wider than its window is
#: measured mostly as background; its correction would rest on the assumed widths alone)
CAPTURE_MIN = 0.3


class WindowCapture:
    """Mixin of :class:`compquant.cflibs.analysis._Analysis`: window capture correction."""

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
        wg = gaussian_fwhm_nm(L.wl, T, mass, w_instr)
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
