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

This module holds the driver (:func:`analyse_cf`, :func:`analyse_cf_samples`, the robust-closure
re-solve loop) and :class:`_Analysis`, the state of one analysis, whose steps live in mixins
beside it: :mod:`~compquant.cflibs.inputs` (sample rows, instrument width, basis),
:mod:`~compquant.cflibs.window_step` (window capture), :mod:`~compquant.cflibs.temperature`
(central and Boltzmann fits), :mod:`~compquant.cflibs.ne_routes` (nₑ routes),
:mod:`~compquant.cflibs.selfabs_cog` and :mod:`~compquant.cflibs.selfabs_fit` (self-absorption),
:mod:`~compquant.cflibs.closure` (closure, mass fractions), :mod:`~compquant.cflibs.montecarlo`
(uncertainty) and :mod:`~compquant.cflibs.certify` (checks, flags, the result).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd

from compquant.atomic import species_name
from compquant.cflibs.atomicdata import default_atomic_data
from compquant.cflibs.blends import BlendCorrection
from compquant.cflibs.certify import Certification
from compquant.cflibs.closure import Closure, _missing_share_bound
from compquant.cflibs.inputs import (
    _gate_delay_s,  # noqa: F401 (importable from here)
    _instrument_width,
    _intensity_basis,
    _select_sample,
    _shot_deviations,
)
from compquant.cflibs.lineset import LineSet, prepare_lines
from compquant.cflibs.montecarlo import MonteCarlo
from compquant.cflibs.ne_routes import NeRoutes
from compquant.cflibs.result import CFResult
from compquant.cflibs.screening import too_few_lines
from compquant.cflibs.selfabs_cog import CurveOfGrowth
from compquant.cflibs.selfabs_fit import SelfAbsFit
from compquant.cflibs.settings import CFSettings
from compquant.cflibs.solver import Model
from compquant.cflibs.temperature import TemperatureFit
from compquant.cflibs.window_step import CAPTURE_MIN, WindowCapture  # noqa: F401 (importable from here)
from compquant.errors import DataQualityError, PhysicsError


class CFWarning(UserWarning):
    """A calibration-free result was produced with a caveat (also stored in the result)."""


class _Analysis(NeRoutes, TemperatureFit, WindowCapture, BlendCorrection, CurveOfGrowth, SelfAbsFit, Closure,
                MonteCarlo, Certification):
    """State of one analysis; methods are the steps (most of them in the mixins' modules)."""

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
        self.window_axis = getattr(windows, "wavelength", None)  # the run's pixels (blend correction, §1b)
        self.ln_capture = np.zeros(self.L.n)  # ln of each line's window capture fraction (§1a)
        self.dln_capture = np.zeros(self.L.n)  # its change for a +u_rel change of the Stark widths
        self.blend_share = np.zeros(self.L.n)  # share of each line's area removed as interference (§1b)
        self.blend_self_share = np.ones(self.L.n)  # predicted self share σ of its window (§1b)
        self.blend_info: dict = {"applied": False}
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
        for name in ("u_y", "w", "ln_zeta", "mass_line", "w_instr", "sa", "ln_capture", "dln_capture",
                     "blend_share", "blend_self_share"):
            setattr(self, name, getattr(self, name)[keep])
        if self.shot_dev is not None:
            self.shot_dev = self.shot_dev[:, keep]
        self.model = Model(self.L, self.atomic, self.s)
        for e in sorted(gone):
            self._warn(f"element {e}: no line left after removing lines ({reason})")
            self.undetermined.setdefault(e, []).append(f"no line left after removing lines ({reason})")

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
        if sol is not None and self.windows and s.blend_correction and s.self_absorption in ("detect", "none"):
            sol = self.apply_blend_correction(sol, ne_pick)
        tau = None
        length_cm = None
        mode = s.self_absorption
        blend_sa = bool(self.windows and s.blend_correction)  # §1b, eq. (5): with the lines' self-absorption
        if mode == "curve_of_growth":
            length_cm = s.plasma_length_mm / 10.0
            out = self.selfabs_corrected(length_cm, ne_pick, False)
            if blend_sa:
                out = self.apply_blend_correction_sa(out, lambda: self.selfabs_corrected(length_cm, ne_pick, False))
            self.sa, sol, tau, ne_name, ne_est, _, _ = out
            self.sa_info.update(plasma_length_mm=s.plasma_length_mm, fitted=False)
        elif mode == "columnar":
            chi_thin = float(sol.fit.chi2[0]) if sol is not None else float("inf")
            out = self.selfabs_corrected(None, ne_pick, True)
            if blend_sa:
                out = self.apply_blend_correction_sa(out, lambda: self.selfabs_corrected(None, ne_pick, True))
            self.sa, sol, tau, ne_name, ne_est, length_cm, chi = out
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

    The steps of the module docstring (docs/calibration-free.md): in LTE the Boltzmann-plot
    ordinate of a line k -> i of species s is ``y = ln(I lambda / (g_k A_ki)) = ln(F hc n_s / U_s)
    - E_k / kT`` (intensities in energy units); one temperature T (K) and one intercept per
    species are fitted jointly, ion lines moved onto their neutral with the Saha equation in
    Saha-Boltzmann mode; the electron density n_e (cm^-3) comes from H-alpha, Stark widths, a
    fixed value or the Saha balance; the closure ``sum C_s = 1`` gives number fractions and mass
    fractions ``w_el = x_el M_el / sum x M`` (g/g), with self-absorption detection or correction,
    LTE checks (McWhirter) and a Monte Carlo for ``u``; ``U = k u``, ``k = 2``.

    Parameters
    ----------
    line_table : DataFrame
        The line table of a run (docs/architecture.md); rows of other samples are
        ignored.  Atomic columns (``aki``, ``gk``, ``ek_ev``, ``ei_ev``, ``aki_grade``,
        Stark parameters) are taken from the table if present, else joined from the line
        list by ``line_id``.
    sample_id : str, optional
        Which sample (needed when the table holds several).
    settings : CFSettings or dict, optional
        :class:`CFSettings` or the ``[cf]`` dict of a method file (default: the defaults).
    atomic : optional
        Atomic-data provider (default: the shipped tables, compquant.atomic).
    acquisition, instrument : dict, optional
        The run's attribute dicts (gate delay for the transient LTE check; instrumental FWHM
        for width-based nₑ).
    one_point : OnePointCalibration, optional
        A :class:`~compquant.cflibs.onepoint.OnePointCalibration` to apply.
    mc_draws, seed : int, optional
        Override the settings' Monte Carlo draws and seed.
    where : str, optional
        Where the data came from, named in error messages (default ``sample <id>``).
    intensity_basis : {"energy", "photon"}, optional
        The basis of the run's response curve (run attribute ``response_basis``);
        ``[cf] response_basis`` overrides it; ``"unknown"`` is refused.  Photon-basis
        intensities are converted to energy (× hc/λ).
    windows : dict, optional
        ``line_id → (window_nm, side_nm, gap_nm)`` of the window-integrated lines
        (:func:`compquant.cflibs.capture.method_windows`); each such line is divided by the
        fraction of its area the window measures (docs/calibration-free.md §1a) and, in the
        thin modes and the slab modes ``curve_of_growth`` and ``columnar`` (interfering lines
        self-absorbed) with ``[cf] blend_correction``, corrected for the predicted interference of
        other lines (§1b; on the run's pixels when ``windows`` is the
        :class:`~compquant.cflibs.capture.WindowSet` of ``method_windows``, which keeps the axis).
        Without it the intensities are taken as whole line areas.
    measurement : LineMeasurement, optional
        The :class:`~compquant.lines.LineMeasurement` the line table came from; its
        per-shot intensities give the Monte Carlo the correlation of the line means (every line
        of a shot sees the same plasma; §8).  Without it the line means are drawn independently.

    Returns
    -------
    CFResult
        Plasma conditions (T, nₑ and its route, LTE checks, self-absorption factors), the fit,
        mass and number fractions per element with ``u``, flags and warnings.

    Raises
    ------
    CompquantError
        When the sample has no valid solution (e.g. bad settings, unknown sample, refused
        intensity basis), as one line.

    See Also
    --------
    analyse_cf_samples : the same for several samples of a run.
    CFSettings : the ``[cf]`` settings.
    compquant.analyse : the whole analysis (``cf=True``), certificates included.

    References
    ----------
    .. [1] Ciucci et al., Appl. Spectrosc. 53 (1999) 960 (calibration-free LIBS: Boltzmann plot
       and closure).
    .. [2] Aragón & Aguilera, Spectrochim. Acta B 63 (2008) 893; Tognoni et al., Spectrochim.
       Acta B 65 (2010) 1 (Saha-Boltzmann plot; Aragón & Aguilera also the
       self-absorbed homogeneous slab).
    .. [3] Cristoforetti et al., Spectrochim. Acta B 65 (2010) 86 (McWhirter criterion,
       transient and inhomogeneous plasmas).
    .. [4] Paule & Mandel, J. Res. Natl. Bur. Stand. 87 (1982) 377 (scatter of the fit).
    .. [5] JCGM 100:2008, Evaluation of measurement data -- Guide to the expression of uncertainty
       in measurement (GUM); JCGM 102:2011 (Monte Carlo of the line means).
    .. [6] compquant documentation: docs/calibration-free.md.

    Examples
    --------
    From the repository root, the shipped demo (invented scenario)::

        from compquant import Run, analyse_cf, load_method, measure_run
        method = load_method("demo_runs/method.toml")
        with Run.open("demo_runs/demo-day1.h5") as run:
            m = measure_run(run, method)
        r = analyse_cf(m.table, sample_id="LOT-2611-A", settings=method.sections.get("cf"),
                       measurement=m)
        print(r.summary())
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
    """Run :func:`analyse_cf` for several samples of one line table.

    Each sample is analysed on its own (its own T, nₑ and closure; docs/calibration-free.md), so
    one bad sample does not stop a run.

    Parameters
    ----------
    line_table : DataFrame
        The line table of a run (docs/architecture.md).
    sample_ids : list of str, optional
        The samples, in order; default every sample of the table whose role is in ``roles``.
    roles : tuple of str or None, default ("unknown", "check")
        Roles analysed when ``sample_ids`` is not given (``None``: every sample).
    progress : callable, optional
        ``(done, total)``, called before the first sample and after each.
    **kwargs
        Passed to :func:`analyse_cf` (``settings``, ``acquisition``, ``instrument``,
        ``one_point``, ``intensity_basis``, ``windows``, ``measurement`` ...).

    Returns
    -------
    results : list of CFResult
        One per sample with a valid solution.
    failures : dict
        Sample id → one-line reason for samples with no valid solution
        (a :class:`~compquant.errors.CompquantError`).

    See Also
    --------
    analyse_cf : one sample.
    compquant.cflibs.result.results_table : the results of several samples as one table.

    References
    ----------
    .. [1] Ciucci et al., Appl. Spectrosc. 53 (1999) 960 (calibration-free LIBS).
    .. [2] compquant documentation: docs/calibration-free.md.

    Examples
    --------
    From the repository root, with ``method`` and ``m`` as in the example of
    :func:`analyse_cf`::

        from compquant import analyse_cf_samples
        results, failures = analyse_cf_samples(m.table, settings=method.sections.get("cf"),
                                               measurement=m)
        for r in results:
            print(r.sample_id, r.mass_fractions())
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
