"""Forward model of an LTE emission spectrum on a spectrometer's pixels.

Composition, temperature, electron density and plasma length in; spectral
radiance integrated over each detector pixel out (W m^-2 sr^-1 per pixel),
instrument-broadened, optically thin or with self-absorption in a homogeneous
slab.  The steps (equations in the modules named and in docs/physics.md):

1. species densities from the LTE solver (:mod:`compquant.plasma.lte`:
   Saha-Boltzmann with charge neutrality);
2. per line and shot the integrated emissivity eps = hc/(4 pi lambda) A n_k and
   the integrated absorption coefficient (:mod:`compquant.plasma.emission`);
3. a fine wavelength grid (``oversample`` cells per pixel plus dense cells around
   each line core) and one sparse matrix for the instrument function and pixel
   integration: cell j of width w_j at lambda_j adds ``w_j [Phi((b_p -
   lambda_j)/s_j) - Phi((a_p - lambda_j)/s_j)]`` of its radiance to pixel p =
   [a_p, b_p] (Gaussian of FWHM lambda_j/R, s = FWHM/2.3548); it conserves the
   integrated radiance;
4. optically thin lines (line-centre optical depth below ``thin_tau``): eps L per
   shot times the line's unit pixel profile (Voigt of Doppler and Stark widths at
   the nominal conditions on the fine cells of the line's window, see "Line wings"
   below, then through the matrix of step 3);
5. self-absorbed lines: per shot the Voigt profile (Doppler width from T, Stark
   width and shift from n_e) on the fine cells of their windows, and the slab
   radiance ``I = (eps/kappa)(1 - exp(-kappa L)) = B(T)(1 - exp(-kappa L))``
   (:mod:`compquant.plasma.slab`), then through the matrix;
6. the continuum (:mod:`compquant.plasma.continuum`) at the pixel centres, thin.

Line wings (the window each line's profile is computed on)
----------------------------------------------------------
*Cut wings* (the default, ``wing_tail_fraction=None``; the demo runs are made so): the
window is +-clip(``wing_cut_fwhm`` w_V, ``wing_min_nm``, 15 nm) around the line, w_V the
Voigt FWHM at the nominal plasma (defaults 25 FWHM, at least 0.3 nm), and the profile is
renormalised to unit area inside it: the line's total area is kept, but the wing beyond
the cut is moved into the window.  For a Voigt profile the far wing is the Lorentzian's
(the convolution with the Gaussian keeps the 1/x^2 asymptote), so the area left beyond
+-x is, with gamma = w_L/2 the Lorentzian half width (e.g. Thorne, *Spectrophysics*, the
Lorentzian's cumulative distribution ``1/2 + arctan(x/gamma)/pi``)::

    delta(x) = 1 - (2/pi) arctan(x/gamma)  ~=  w_L / (pi x)        (both sides)

so a Stark-dominated line keeps delta = (2/pi)/(2*25) = 1.3 % of its area beyond +-25
FWHM, and a strong line's wing under a weak neighbour's window more than 25 FWHM away is
missing.

*Complete wings* (``wing_tail_fraction=delta``, e.g. 1e-3; the calibration-free
benchmarks use it): the window is widened to at least the distance beyond which the
Lorentzian part leaves the stated fraction delta of the area (both sides), from the
formula above::

    x_delta = gamma cot(pi delta / 2)  ~=  w_L / (pi delta)

(at the nominal n_e; bounded by the ends of the fine grid, i.e. the detector range
extended by 6 sigma of the instrument function + 1 nm), and the profile is scaled to its
analytic area inside the window, ``1 - T(c - a) - T(b - c)`` for a window [a, b] and a
profile centred at c, per shot for self-absorbed lines.  T(x) is the one-sided tail area
of the unit Voigt profile (:func:`voigt_tail`); so the pixels hold the line's emitted
area minus the far wings outside the window (at most delta at the nominal n_e, or what
falls outside the fine grid), and the wing shape inside the window is the physical one.
A thin line joins a self-absorbed neighbour's slab treatment where that neighbour's
optical depth at its centre exceeds ``thin_tau`` (with cut wings: where its centre lies
in the neighbour's window).  For a self-absorbed line delta is a fraction of its *thin*
(emitted) area; its emergent area is smaller (Lorentzian square-root regime, Ladenburg-
Reiche: emitted / emergent ~= sqrt(pi tau0)/2), so the wing left outside is about
delta sqrt(pi tau0)/2 of what emerges (0.9 % at tau0 = 100 for delta = 1e-3), a smooth
pedestal beyond +-x_delta.  The cut wings lose more of a thick line: the area moved into the
window lands in the saturated core, so the emergent wing beyond the cut is missing.

Everything is vectorised over shots: T and n_e are arrays (one value per shot);
shots are processed in chunks to bound memory.  Data glue (line list, partition
functions, masses) defaults to :mod:`compquant.atomic` but every piece can be
given explicitly, so the physics is testable without the shipped data.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass

import numpy as np
from scipy import sparse
from scipy.special import ndtr, voigt_profile

from compquant.errors import PhysicsError
from compquant.plasma.constants import KB_EV
from compquant.plasma.continuum import continuum_emissivity
from compquant.plasma.emission import line_absorption_integrated, line_emissivity_lte
from compquant.plasma.lte import ROMAN, LTEState, mass_to_number_fractions, solve_lte, species_stage
from compquant.plasma.profiles import (
    FWHM_TO_SIGMA,
    doppler_fwhm,
    instrument_fwhm,
    stark_fwhm,
    stark_shift,
    voigt,
    voigt_fwhm,
)
from compquant.plasma.slab import self_absorption_coefficient


@dataclass(frozen=True)
class LineSet:
    """Arrays describing the lines to model (one entry per line); data-agnostic.

    Units: wavelengths nm (air), ``aki`` s^-1, energies eV, Stark width (FWHM)
    and shift in nm at ``stark_ne_ref_cm3`` (cm^-3) and ``stark_t_ref_k`` (K),
    ``mass_u`` atomic mass of the emitter in u, ``stark_ne_exponent`` p of
    ``w ~ n_e^p`` (1 if NaN).  Missing Stark data: NaN.
    """

    line_id: tuple
    species: tuple
    element: tuple
    stage: np.ndarray
    wavelength_nm: np.ndarray
    aki: np.ndarray
    gi: np.ndarray
    gk: np.ndarray
    ei_ev: np.ndarray
    ek_ev: np.ndarray
    stark_w_nm: np.ndarray
    stark_shift_nm: np.ndarray
    stark_ne_ref_cm3: np.ndarray
    stark_t_ref_k: np.ndarray
    mass_u: np.ndarray
    stark_ne_exponent: np.ndarray

    def __len__(self) -> int:
        return len(self.line_id)

    @classmethod
    def from_arrays(
        cls,
        *,
        species,
        wavelength_nm,
        aki,
        gi,
        gk,
        ei_ev,
        ek_ev,
        mass_u,
        line_id=None,
        stark_w_nm=None,
        stark_shift_nm=None,
        stark_ne_ref_cm3=None,
        stark_t_ref_k=None,
        stark_ne_exponent=None,
    ):
        """Build from plain sequences (species named like ``"Cu I"``)."""
        species = tuple(str(s) for s in species)
        n = len(species)

        def arr(v, fill=np.nan):
            if v is None:
                return np.full(n, fill)
            a = np.asarray(v, dtype=float).reshape(-1)
            if a.size == 1 and n != 1:
                a = np.full(n, float(a[0]))
            if a.size != n:
                raise PhysicsError(
                    f"line array of length {a.size} for {n} lines", where="LineSet", fix="give one value per line"
                )
            return a

        elements, stages = [], []
        for s in species:
            parts = s.split()
            if len(parts) != 2 or parts[1] not in ROMAN:
                raise PhysicsError(
                    f"species {s!r} is not '<Element> <roman>'",
                    where="LineSet",
                    fix="name species like 'Cu I' or 'Cu II'",
                )
            elements.append(parts[0])
            stages.append(species_stage(s))
        wl = arr(wavelength_nm)
        if line_id is None:
            line_id = [f"{s} {w:.3f}" for s, w in zip(species, wl)]
        return cls(
            line_id=tuple(str(x) for x in line_id),
            species=species,
            element=tuple(elements),
            stage=np.asarray(stages, dtype=int),
            wavelength_nm=wl,
            aki=arr(aki),
            gi=arr(gi),
            gk=arr(gk),
            ei_ev=arr(ei_ev),
            ek_ev=arr(ek_ev),
            stark_w_nm=arr(stark_w_nm),
            stark_shift_nm=arr(stark_shift_nm),
            stark_ne_ref_cm3=arr(stark_ne_ref_cm3),
            stark_t_ref_k=arr(stark_t_ref_k),
            mass_u=arr(mass_u),
            stark_ne_exponent=arr(stark_ne_exponent, 1.0),
        )

    @classmethod
    def from_frame(cls, frame, masses_u: Mapping[str, float] | None = None):
        """Build from a line-list DataFrame in the :mod:`compquant.atomic` columns.

        ``masses_u`` maps element -> mass in u; default from
        :func:`compquant.atomic.element`.
        """
        need = ["species", "wavelength_nm", "aki", "gi", "gk", "ei_ev", "ek_ev"]
        missing = [c for c in need if c not in frame.columns]
        if missing:
            raise PhysicsError(
                f"line list lacks column(s) {', '.join(missing)}",
                where="line list",
                fix="use the compquant.atomic line-list columns",
            )
        species = [str(s) for s in frame["species"]]
        elements = [s.split()[0] for s in species]
        masses = _masses_for(set(elements), masses_u)

        def col(name):
            return frame[name].to_numpy(dtype=float) if name in frame.columns else None

        ids = list(frame["line_id"]) if "line_id" in frame.columns else None
        return cls.from_arrays(
            species=species,
            wavelength_nm=col("wavelength_nm"),
            aki=col("aki"),
            gi=col("gi"),
            gk=col("gk"),
            ei_ev=col("ei_ev"),
            ek_ev=col("ek_ev"),
            mass_u=[masses[e] for e in elements],
            line_id=ids,
            stark_w_nm=col("stark_w_nm"),
            stark_shift_nm=col("stark_shift_nm"),
            stark_ne_ref_cm3=col("stark_ne_ref_cm3"),
            stark_t_ref_k=col("stark_t_ref_k"),
            stark_ne_exponent=col("stark_ne_exponent"),
        )

    def with_default_stark(self, fwhm_nm: float, ne_ref_cm3: float = 1e17) -> LineSet:
        """A copy where lines without Stark data get FWHM ``fwhm_nm`` at ``ne_ref_cm3``.

        An assumption, not data: use it only for simulations (e.g. the demo) and say so.
        """
        missing = ~np.isfinite(self.stark_w_nm)
        w = np.where(missing, float(fwhm_nm), self.stark_w_nm)
        nref = np.where(missing, float(ne_ref_cm3), self.stark_ne_ref_cm3)
        vals = {f: getattr(self, f) for f in self.__dataclass_fields__}
        vals.update(stark_w_nm=w, stark_ne_ref_cm3=nref)
        return LineSet(**vals)

    def subset(self, mask) -> LineSet:
        """The lines where boolean ``mask`` is true."""
        mask = np.asarray(mask, dtype=bool)
        idx = np.flatnonzero(mask)

        def pick(v):
            return tuple(v[i] for i in idx) if isinstance(v, tuple) else v[idx]

        return LineSet(**{f: pick(getattr(self, f)) for f in self.__dataclass_fields__})


def _masses_for(elements, masses_u):
    if masses_u is not None:
        missing = sorted(set(elements) - set(masses_u))
        if missing:
            raise PhysicsError(
                f"no atomic mass for {', '.join(missing)}", where="masses", fix="give a mass (u) for every element"
            )
        return {e: float(masses_u[e]) for e in elements}
    from compquant.atomic import element as _element

    return {e: float(_element(e).mass_u) for e in elements}


_GH_T, _GH_W = np.polynomial.hermite.hermgauss(64)
_GL_X, _GL_W = np.polynomial.legendre.leggauss(64)


def voigt_tail(x_nm, sigma_nm, gamma_nm) -> np.ndarray:
    """One-sided tail area of the unit-area Voigt profile beyond a signed distance ``x_nm``
    from its centre: ``T(x) = integral_x^inf V(u; sigma, gamma) du`` (so T(0) = 1/2 and
    T(-x) = 1 - T(x)); broadcast over the three arguments (nm).

    V is the convolution of a Gaussian (standard deviation sigma) and a Lorentzian (half
    width gamma), as :func:`scipy.special.voigt_profile`.  Two quadratures, both of smooth
    integrands:

    * ``|x| >= 8 sigma``: the tail is the Gaussian average of the Lorentzian tail,
      ``T(x) = E_y[1/2 - arctan((x - y)/gamma)/pi]``, y ~ N(0, sigma^2), by 64-point
      Gauss-Hermite quadrature (y = sqrt(2) sigma t, weights w/sqrt(pi)); gamma = 0 gives
      the Gaussian tail ``Phi(-x/sigma)`` exactly;
    * ``|x| < 8 sigma``: ``T(x) = 1/2 - integral_0^x V``, 64-point Gauss-Legendre on [0, x].

    Checked against :func:`scipy.integrate.quad` of ``voigt_profile`` in the tests.
    """
    x = np.asarray(x_nm, float)
    s = np.asarray(sigma_nm, float)
    g = np.asarray(gamma_nm, float)
    x, s, g = np.broadcast_arrays(x, s, g)
    a = np.abs(x)
    with np.errstate(divide="ignore", invalid="ignore"):
        u = a[..., None] - math.sqrt(2.0) * s[..., None] * _GH_T
        lor = 0.5 - np.arctan(u / g[..., None]) / math.pi
        far = np.where(g > 0, lor @ (_GH_W / math.sqrt(math.pi)), ndtr(-a / s))
        half = 0.5 * a[..., None]
        v = voigt_profile(half * (1.0 + _GL_X), s[..., None], g[..., None])
        near = 0.5 - half[..., 0] * (v @ _GL_W)
    tail = np.where(a >= 8.0 * s, far, near)
    return np.where(x < 0, 1.0 - tail, tail)


@dataclass(frozen=True)
class Instrument:
    """Pixel axis and instrument function of a spectrometer.

    ``wavelength_nm``: pixel centres (nm, ascending).  Instrument function a
    Gaussian with FWHM ``lambda/resolving_power`` or a constant ``fwhm_nm``.
    ``oversample``: fine-grid cells per pixel used for the integration.
    """

    wavelength_nm: np.ndarray
    resolving_power: float | None = None
    fwhm_nm: float | None = None
    oversample: int = 4

    def __post_init__(self):
        wl = np.asarray(self.wavelength_nm, dtype=float)
        if wl.ndim != 1 or wl.size < 2 or not np.all(np.isfinite(wl)) or np.any(np.diff(wl) <= 0):
            raise PhysicsError(
                "pixel wavelengths must be a finite, strictly increasing 1-D array",
                where="instrument",
                fix="check the wavelength axis",
            )
        if (self.resolving_power is None) == (self.fwhm_nm is None):
            raise PhysicsError(
                "give exactly one of resolving_power and fwhm_nm",
                where="instrument",
                fix="set the resolving power R (FWHM = lambda/R) or a constant FWHM",
            )
        if self.resolving_power is not None and not self.resolving_power > 0:
            raise PhysicsError("resolving power must be > 0", where="instrument", fix="e.g. 3000")
        if self.fwhm_nm is not None and not self.fwhm_nm > 0:
            raise PhysicsError("instrument FWHM must be > 0 nm", where="instrument", fix="e.g. 0.1")
        if int(self.oversample) < 1:
            raise PhysicsError("oversample must be >= 1", where="instrument", fix="e.g. 4")
        object.__setattr__(self, "wavelength_nm", wl)

    def fwhm(self, wavelength_nm):
        """Instrument FWHM (nm) at the given wavelengths."""
        return instrument_fwhm(wavelength_nm, self.resolving_power, self.fwhm_nm)

    @property
    def pixel_edges(self) -> np.ndarray:
        """Pixel boundaries (n_pixels + 1), midway between centres, ends mirrored."""
        wl = self.wavelength_nm
        mid = 0.5 * (wl[1:] + wl[:-1])
        return np.concatenate([[wl[0] - (mid[0] - wl[0])], mid, [wl[-1] + (wl[-1] - mid[-1])]])


class SpectrumModel:
    """Precomputed forward model for one instrument and one line set.

    Build once, then call :meth:`radiance` for each sample's composition and the
    per-shot plasma conditions.

    Parameters
    ----------
    instrument : Instrument
    lines : LineSet
    self_absorption : bool
        Homogeneous-slab radiative transfer (True) or optically thin (False).
    continuum : bool
        Add free-free + free-bound continuum.
    nominal_temperature_k, nominal_ne_cm3 : float
        Used only to place the dense fine-grid cells around each line core.
    max_stage, lowering : passed to :func:`compquant.plasma.lte.solve_lte`.
    partition_function, ionisation_energy : callables, default compquant.atomic.
    masses_u : element -> mass (u), default compquant.atomic.
    stark_t_exponent : exponent a of the (T/T_ref)^a Stark-width scaling (default 0).
    chunk_shots : shots per internal chunk (memory bound).
    thin_tau : lines whose line-centre optical depth stays below this in every shot
        are treated as optically thin (integrated intensity times the unit pixel
        profile at the nominal widths; error about thin_tau/2 of the line).
    wing_cut_fwhm, wing_min_nm : the cut-wing window, +-clip(wing_cut_fwhm * w_V,
        wing_min_nm, 15 nm) (defaults 25 Voigt FWHM at the nominal plasma, at least
        0.3 nm: the values the demo runs were made with); see "Line wings" in the
        module docstring.
    wing_tail_fraction : None (cut wings, profile renormalised to unit area in the
        window) or delta in (0, 0.1]: complete wings, each window at least
        +-gamma cot(pi delta/2) so that the Lorentzian far wing left outside is below
        delta of the area, and the profile keeps its analytic area in the window.
    """

    def __init__(
        self,
        instrument: Instrument,
        lines: LineSet,
        *,
        self_absorption: bool = False,
        continuum: bool = True,
        nominal_temperature_k: float = 10000.0,
        nominal_ne_cm3: float = 1e17,
        max_stage: int = 2,
        lowering: bool = True,
        partition_function: Callable | None = None,
        ionisation_energy: Callable | None = None,
        masses_u: Mapping[str, float] | None = None,
        stark_t_exponent: float = 0.0,
        chunk_shots: int = 64,
        thin_tau: float = 1e-3,
        wing_cut_fwhm: float = 25.0,
        wing_min_nm: float = 0.3,
        wing_tail_fraction: float | None = None,
    ):
        self.instrument = instrument
        self.self_absorption = bool(self_absorption)
        self.continuum = bool(continuum)
        self.max_stage = int(max_stage)
        self.lowering = bool(lowering)
        self.partition_function = partition_function
        self.ionisation_energy = ionisation_energy
        self.stark_t_exponent = float(stark_t_exponent)
        self.chunk_shots = max(1, int(chunk_shots))
        self.thin_tau = float(thin_tau)
        if not (math.isfinite(wing_cut_fwhm) and wing_cut_fwhm > 0):
            raise PhysicsError(
                f"wing_cut_fwhm {wing_cut_fwhm!r} must be a number > 0", where="line wings", fix="e.g. 25"
            )
        if not (math.isfinite(wing_min_nm) and wing_min_nm >= 0):
            raise PhysicsError(f"wing_min_nm {wing_min_nm!r} must be >= 0 nm", where="line wings", fix="e.g. 0.3")
        if wing_tail_fraction is not None and not (0.0 < wing_tail_fraction <= 0.1):
            raise PhysicsError(
                f"wing_tail_fraction {wing_tail_fraction!r} must be in (0, 0.1]",
                where="line wings",
                fix="e.g. 1e-3 (complete wings), or None for the cut at wing_cut_fwhm",
            )
        self.wing_cut_fwhm = float(wing_cut_fwhm)
        self.wing_min_nm = float(wing_min_nm)
        self.wing_tail_fraction = None if wing_tail_fraction is None else float(wing_tail_fraction)
        self._masses_arg = masses_u
        keep = lines.stage <= self.max_stage
        lines = lines.subset(keep)
        self._build_grid(lines, float(nominal_temperature_k), float(nominal_ne_cm3))

    # ------------------------------------------------------------------ grid
    def _broadening(self, lines, sel, t, ne, shift=False):
        """Doppler FWHM, Stark FWHM and (with ``shift``) Stark shift in nm of ``lines[sel]`` at
        T (K) and n_e (cm^-3), broadcast against ``t`` and ``ne``: ``sel = slice(None)`` with
        scalars for the nominal plasma, ``(None, slice(None))`` with ``t[:, None]`` for
        (n_shots, n_lines), a line index ``j`` with per-shot ``t`` for (n_shots,).
        Equations: :func:`doppler_fwhm`, :func:`stark_fwhm`, :func:`stark_shift`."""
        stark = (
            ne,
            lines.stark_ne_ref_cm3[sel],
            t,
            lines.stark_t_ref_k[sel],
            self.stark_t_exponent,
            lines.stark_ne_exponent[sel],
        )
        wg = doppler_fwhm(lines.wavelength_nm[sel], t, lines.mass_u[sel])
        wl = stark_fwhm(lines.stark_w_nm[sel], *stark)
        if not shift:
            return wg, wl
        return wg, wl, np.nan_to_num(stark_shift(lines.stark_shift_nm[sel], *stark))

    def _build_grid(self, lines, t_nom, ne_nom):
        ins = self.instrument
        edges = ins.pixel_edges
        n_pix = edges.size - 1
        os_ = int(ins.oversample)
        sub = edges[:-1, None] + (np.diff(edges)[:, None] * np.arange(os_)[None, :] / os_)
        nodes = [sub.ravel(), edges[-1:]]
        # extend beyond the detector so light just outside the range spills in
        s_lo = ins.fwhm(edges[0]) * FWHM_TO_SIGMA
        s_hi = ins.fwhm(edges[-1]) * FWHM_TO_SIGMA
        step_lo = (edges[1] - edges[0]) / os_
        step_hi = (edges[-1] - edges[-2]) / os_
        ext_lo = float(6 * s_lo + 1.0)
        ext_hi = float(6 * s_hi + 1.0)
        nodes.append(edges[0] - step_lo * np.arange(1, int(math.ceil(ext_lo / step_lo)) + 1))
        nodes.append(edges[-1] + step_hi * np.arange(1, int(math.ceil(ext_hi / step_hi)) + 1))
        lo, hi = edges[0] - ext_lo, edges[-1] + ext_hi
        inside = (lines.wavelength_nm > lo) & (lines.wavelength_nm < hi)
        lines = lines.subset(inside)
        self.lines = lines
        self.masses_u = _masses_for(set(lines.element), self._masses_arg) if len(lines) else {}
        wg, wl, shift = self._broadening(lines, slice(None), t_nom, ne_nom, shift=True)
        wv = voigt_fwhm(wg, wl)
        centre = lines.wavelength_nm + shift
        base_step = np.interp(centre, edges[:-1], np.diff(edges)) / os_ if len(lines) else np.zeros(0)
        for c, f, bs in zip(centre, wv, base_step):
            if f < 4 * bs:  # core not resolved by the base grid: add dense cells
                nodes.append(c + f * np.arange(-30, 31) / 10.0)  # FWHM/10 over +-3 FWHM
                wing = f * np.arange(3.4, 15.01, 0.4)  # FWHM/2.5 out to +-15 FWHM
                nodes.append(c + wing)
                nodes.append(c - wing)
        nodes = np.unique(np.concatenate(nodes))
        nodes = nodes[(nodes >= lo - 1e-9) & (nodes <= hi + 1e-9)]
        keep = np.concatenate([[True], np.diff(nodes) > 1e-9])
        nodes = nodes[keep]
        self.cell_mid = 0.5 * (nodes[1:] + nodes[:-1])
        self.cell_width = np.diff(nodes)
        # line windows (contiguous cell index ranges)
        half = np.clip(self.wing_cut_fwhm * wv, self.wing_min_nm, 15.0)
        if self.wing_tail_fraction is not None:
            # complete wings: x_delta = gamma cot(pi delta / 2) (module docstring)
            x_delta = 0.5 * wl / math.tan(0.5 * math.pi * self.wing_tail_fraction)
            half = np.maximum(half, x_delta)
        self.window = (
            np.stack(
                [
                    np.searchsorted(self.cell_mid, centre - half, "left"),
                    np.searchsorted(self.cell_mid, centre + half, "right"),
                ],
                axis=1,
            )
            if len(lines)
            else np.zeros((0, 2), dtype=int)
        )
        # instrument-function + pixel-integration matrix (n_cells x n_pixels)
        sig = ins.fwhm(self.cell_mid) * FWHM_TO_SIGMA
        e0 = np.clip(np.searchsorted(edges, self.cell_mid - 6 * sig, "right") - 1, 0, n_pix)
        e1 = np.clip(np.searchsorted(edges, self.cell_mid + 6 * sig, "left"), 0, n_pix)
        span = int(np.max(e1 - e0)) + 1
        k = np.arange(span + 1)
        eidx = np.minimum(e0[:, None] + k[None, :], n_pix)
        cdf = ndtr((edges[eidx] - self.cell_mid[:, None]) / sig[:, None])
        val = np.diff(cdf, axis=1) * self.cell_width[:, None]
        pix = e0[:, None] + k[None, :-1]
        ok = (pix < n_pix) & (val > 0)
        rows = np.broadcast_to(np.arange(self.cell_mid.size)[:, None], pix.shape)[ok]
        self._pixel_matrix_t = sparse.csr_matrix((val[ok], (pix[ok], rows)), shape=(n_pix, self.cell_mid.size))
        self._pixel_matrix_csc = self._pixel_matrix_t.tocsc()
        self._pixel_width = np.diff(edges)
        self._thick_cache = {}
        # outer edges of each line window (nm), for the analytic area inside it
        if len(lines):
            w0, w1 = self.window[:, 0], np.maximum(self.window[:, 1] - 1, 0)
            ok = self.window[:, 1] > self.window[:, 0]
            self._window_edges = np.where(
                ok[:, None],
                np.stack([nodes[:-1][w0], nodes[1:][w1]], axis=1),
                np.nan,
            )
        else:
            self._window_edges = np.zeros((0, 2))
        self.n_pixels = n_pix
        # unit pixel profiles of every line at the nominal conditions (columns: lines)
        if self.wing_tail_fraction is not None:
            self._unit_profiles_t = self._complete_unit_profiles(centre, wg, wl)
            return
        cols = []
        for j in range(len(lines)):
            j0, j1 = self.window[j]
            if j1 <= j0:
                cols.append(sparse.csc_matrix((n_pix, 1)))
                continue
            phi = voigt(self.cell_mid[j0:j1], centre[j], wg[j], wl[j])
            phi = phi / (phi @ self.cell_width[j0:j1])
            col = self._pixel_matrix_csc[:, j0:j1] @ phi
            cols.append(sparse.csc_matrix(np.where(col > 1e-300, col, 0.0)[:, None]))
        self._unit_profiles_t = sparse.hstack(cols, format="csr") if cols else sparse.csr_matrix((n_pix, 0))

    def _complete_unit_profiles(self, centre, wg, wl, block=256):
        """Unit pixel profiles with complete wings (columns: lines), built as one sparse
        product per block of lines: pixel matrix (pixels x cells) @ profiles (cells x lines),
        each profile scaled to its analytic area in its window (:meth:`_window_area`)."""
        n = centre.size
        n_cells = self.cell_mid.size
        blocks = []
        for b0 in range(0, n, block):
            rows, cols, vals = [], [], []
            for j in range(b0, min(b0 + block, n)):
                j0, j1 = self.window[j]
                if j1 <= j0:
                    continue
                phi = voigt(self.cell_mid[j0:j1], centre[j], wg[j], wl[j])
                phi *= self._window_area(j, centre[j], wg[j], wl[j]) / (phi @ self.cell_width[j0:j1])
                rows.append(np.arange(j0, j1))
                cols.append(np.full(j1 - j0, j - b0))
                vals.append(phi)
            nb = min(b0 + block, n) - b0
            if not rows:
                blocks.append(sparse.csr_matrix((self.n_pixels, nb)))
                continue
            prof = sparse.csc_matrix(
                (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(n_cells, nb)
            )
            u = (self._pixel_matrix_t @ prof).tocsc()
            u.data[u.data <= 1e-300] = 0.0
            u.eliminate_zeros()
            blocks.append(u)
        return sparse.hstack(blocks, format="csr") if blocks else sparse.csr_matrix((self.n_pixels, 0))

    def _window_area(self, j, centre, wg, wl):
        """Analytic area of the unit Voigt profile (centre, Gaussian FWHM wg, Lorentzian
        FWHM wl; scalars or per-shot arrays, nm) inside line j's window [a, b]:
        ``1 - T(centre - a) - T(b - centre)`` with T of :func:`voigt_tail`."""
        a, b = self._window_edges[j]
        sig = np.asarray(wg, float) * FWHM_TO_SIGMA
        gam = 0.5 * np.asarray(wl, float)
        return 1.0 - voigt_tail(centre - a, sig, gam) - voigt_tail(b - centre, sig, gam)

    # --------------------------------------------------------------- physics
    def _fractions(self, composition, basis):
        if basis == "mass":
            masses = _masses_for(set(composition), self._masses_arg)
            return mass_to_number_fractions(composition, masses)
        if basis == "number":
            return dict(composition)
        raise PhysicsError(f"composition basis {basis!r} unknown", where="composition", fix="use 'mass' or 'number'")

    def lte_state(self, composition: Mapping[str, float], temperature_k, ne_cm3, basis: str = "mass"):
        """The :class:`LTEState` for this composition and per-shot T, n_e."""
        return solve_lte(
            temperature_k,
            ne_cm3,
            self._fractions(composition, basis),
            partition_function=self.partition_function,
            ionisation_energy=self.ionisation_energy,
            max_stage=self.max_stage,
            lowering=self.lowering,
        )

    def line_quantities(self, state: LTEState):
        """Per shot and line: integrated emissivity (W m^-3 sr^-1) and integrated
        absorption coefficient (m^-1 nm), arrays (n_shots, n_lines); 0 where the
        element is absent."""
        t = np.atleast_1d(state.temperature_k)
        n = t.size
        L = self.lines
        eps = np.zeros((n, len(L)))
        kint = np.zeros((n, len(L)))
        for j, sp in enumerate(L.species):
            if sp not in state.densities:
                continue
            ns = np.atleast_1d(state.densities[sp])
            u = np.atleast_1d(state.partition[sp])
            eps[:, j] = line_emissivity_lte(L.wavelength_nm[j], L.aki[j], L.gk[j], L.ek_ev[j], ns, u, t)
            ni = ns * L.gi[j] * np.exp(-L.ei_ev[j] / (KB_EV * t)) / u
            kint[:, j] = line_absorption_integrated(L.wavelength_nm[j], L.aki[j], L.gi[j], L.gk[j], ni, t)
        return eps, kint

    def line_centre_optical_depth(self, composition, temperature_k, ne_cm3, length_mm, basis="mass"):
        """Optical depth at each line's centre (physical profile, no instrument), (n_shots, n_lines)."""
        st = self.lte_state(composition, temperature_k, ne_cm3, basis)
        t = np.atleast_1d(st.temperature_k)
        ne = np.atleast_1d(st.ne_cm3)
        _, kint = self.line_quantities(st)
        L = self.lines
        wg, wl = self._broadening(L, (None, slice(None)), t[:, None], ne[:, None])
        peak = voigt(0.0, 0.0, wg, wl)
        return kint * peak * float(length_mm) * 1e-3

    def radiance(
        self,
        composition: Mapping[str, float],
        temperature_k,
        ne_cm3,
        length_mm: float = 1.0,
        scale=None,
        basis: str = "mass",
    ) -> np.ndarray:
        """Pixel-integrated radiance (W m^-2 sr^-1 per pixel), shape (n_shots, n_pixels).

        ``temperature_k`` and ``ne_cm3`` are scalars or arrays (one per shot);
        ``length_mm`` the slab thickness; ``scale`` an optional per-shot factor on
        the collected light (e.g. emitting area relative to nominal).
        """
        t = np.atleast_1d(np.asarray(temperature_k, dtype=float))
        ne = np.atleast_1d(np.asarray(ne_cm3, dtype=float))
        t, ne = np.broadcast_arrays(t, ne)
        if not length_mm > 0:
            raise PhysicsError("plasma length must be > 0 mm", where="plasma", fix="e.g. 1.0")
        fractions = self._fractions(composition, basis)
        out = np.empty((t.size, self.n_pixels))
        for a in range(0, t.size, self.chunk_shots):
            b = min(a + self.chunk_shots, t.size)
            st = solve_lte(
                t[a:b],
                ne[a:b],
                fractions,
                partition_function=self.partition_function,
                ionisation_energy=self.ionisation_energy,
                max_stage=self.max_stage,
                lowering=self.lowering,
            )
            out[a:b] = self._chunk_radiance(st, float(length_mm) * 1e-3)
        if scale is not None:
            out *= np.broadcast_to(np.asarray(scale, dtype=float), (t.size,))[:, None]
        return out

    def thick_lines(self, st: LTEState, length_m: float) -> np.ndarray:
        """Boolean mask of the lines given the full slab treatment for these shots.

        A line is thick when its line-centre optical depth exceeds ``thin_tau`` in
        any shot; a line whose centre lies in the window of a thick line joins it
        (it is absorbed by that line's wing).
        """
        n = len(self.lines)
        if not self.self_absorption or n == 0:
            return np.zeros(n, dtype=bool)
        t = np.atleast_1d(st.temperature_k)
        ne = np.atleast_1d(st.ne_cm3)
        _, kint = self.line_quantities(st)
        L = self.lines
        wg, wl = self._broadening(L, (None, slice(None)), t[:, None], ne[:, None])
        tau0 = kint * voigt(0.0, 0.0, wg, wl) * length_m
        thick = tau0.max(axis=0) > self.thin_tau
        if thick.any():
            centre_cell = np.searchsorted(self.cell_mid, L.wavelength_nm)
            if self.wing_tail_fraction is None:
                for j in np.flatnonzero(thick):
                    j0, j1 = self.window[j]
                    thick |= (centre_cell >= j0) & (centre_cell < j1)
            else:
                # complete wings: join where the thick lines' summed optical depth (unit
                # Voigt profile per shot) at a line's centre exceeds thin_tau in any shot
                tau_at = np.zeros_like(kint)
                for j in np.flatnonzero(thick):
                    j0, j1 = self.window[j]
                    m = np.flatnonzero((centre_cell >= j0) & (centre_cell < j1))
                    wgj, wlj, shj = self._broadening(L, j, t, ne, shift=True)
                    phi = voigt(
                        L.wavelength_nm[m][None, :],
                        (L.wavelength_nm[j] + shj)[:, None],
                        wgj[:, None],
                        wlj[:, None],
                    )
                    tau_at[:, m] += kint[:, j, None] * phi * length_m
                thick |= tau_at.max(axis=0) > self.thin_tau
        return thick

    def _chunk_radiance(self, st: LTEState, length_m: float) -> np.ndarray:
        t = np.atleast_1d(st.temperature_k)
        ne = np.atleast_1d(st.ne_cm3)
        nc = t.size
        eps, kint = self.line_quantities(st)
        thick = self.thick_lines(st, length_m)
        # optically thin lines: integrated radiance per shot times the unit pixel profile
        thin_eps = np.where(thick[None, :], 0.0, eps) * length_m
        out = (self._unit_profiles_t @ thin_eps.T).T if len(self.lines) else np.zeros((nc, self.n_pixels))
        if self.continuum:
            zz = np.zeros(nc)
            for sp, n in st.densities.items():
                z = species_stage(sp) - 1
                if z > 0:
                    zz = zz + z * z * np.atleast_1d(n)
            wl = self.instrument.wavelength_nm
            out += continuum_emissivity(wl[None, :], t[:, None], ne[:, None], zz[:, None]) * (
                self._pixel_width[None, :] * length_m
            )
        if thick.any():
            out += self._thick_radiance(np.flatnonzero(thick), t, ne, eps, kint, length_m)
        return out

    def _thick_radiance(self, idx, t, ne, eps, kint, length_m):
        """Slab radiance of the thick lines on their fine cells, through the instrument matrix."""
        key = tuple(int(i) for i in idx)
        cached = self._thick_cache.get(key)
        if cached is None:
            cells = np.unique(np.concatenate([np.arange(*self.window[j]) for j in idx]))
            cached = (cells, self._pixel_matrix_csc[:, cells].tocsr())
            if len(self._thick_cache) > 32:
                self._thick_cache.clear()
            self._thick_cache[key] = cached
        cells, matrix = cached
        mid = self.cell_mid[cells]
        w = self.cell_width[cells]
        nc = t.size
        emis = np.zeros((nc, cells.size))
        kap = np.zeros((nc, cells.size))
        L = self.lines
        for j in idx:
            j0, j1 = self.window[j]
            if j1 <= j0 or not np.any(eps[:, j] > 0):
                continue
            lo = np.searchsorted(cells, j0)
            hi = lo + (j1 - j0)
            x = mid[lo:hi]
            wg, wl, sh = self._broadening(L, j, t, ne, shift=True)
            phi = voigt(x[None, :], (L.wavelength_nm[j] + sh)[:, None], wg[:, None], wl[:, None])
            if self.wing_tail_fraction is None:
                phi /= (phi @ w[lo:hi])[:, None]
            else:
                phi *= (self._window_area(j, L.wavelength_nm[j] + sh, wg, wl) / (phi @ w[lo:hi]))[:, None]
            emis[:, lo:hi] += eps[:, j, None] * phi
            kap[:, lo:hi] += kint[:, j, None] * phi
        # homogeneous slab: I = (eps/kappa)(1 - exp(-tau)) = eps L (1 - exp(-tau))/tau; in LTE
        # eps/kappa = B_lambda(T) (Kirchhoff), so this is B (1 - exp(-tau)); written in the
        # eps L form it keeps the thin limit exact even where tabulated E_k - E_i and hc/lambda differ
        cell = emis * length_m * self_absorption_coefficient(kap * length_m)
        return (matrix @ cell.T).T

    def _cell_radiance(self, st: LTEState, length_m: float) -> np.ndarray:
        """Radiance (W m^-2 sr^-1 nm^-1) on every fine cell, all lines with the slab model
        (or thin), continuum excluded; for checks and figures (slow: every cell)."""
        t = np.atleast_1d(st.temperature_k)
        ne = np.atleast_1d(st.ne_cm3)
        eps, kint = self.line_quantities(st)
        nc = t.size
        mid, w = self.cell_mid, self.cell_width
        emis = np.zeros((nc, mid.size))
        kap = np.zeros((nc, mid.size))
        L = self.lines
        for j in range(len(L)):
            j0, j1 = self.window[j]
            if j1 <= j0 or not np.any(eps[:, j] > 0):
                continue
            wg, wl, sh = self._broadening(L, j, t, ne, shift=True)
            phi = voigt(mid[None, j0:j1], (L.wavelength_nm[j] + sh)[:, None], wg[:, None], wl[:, None])
            if self.wing_tail_fraction is None:
                phi /= (phi @ w[j0:j1])[:, None]
            else:
                phi *= (self._window_area(j, L.wavelength_nm[j] + sh, wg, wl) / (phi @ w[j0:j1]))[:, None]
            emis[:, j0:j1] += eps[:, j, None] * phi
            kap[:, j0:j1] += kint[:, j, None] * phi
        if not self.self_absorption:
            return emis * length_m
        return emis * length_m * self_absorption_coefficient(kap * length_m)


def default_lines(
    wavelength_min_nm: float | None = None, wavelength_max_nm: float | None = None, elements=None
) -> LineSet:
    """The shipped line list of :mod:`compquant.atomic` as a :class:`LineSet` (data glue)."""
    from compquant.atomic import load_line_list

    df = load_line_list()
    if elements is not None:
        df = df[df["element"].isin(list(elements))]
    if wavelength_min_nm is not None:
        df = df[df["wavelength_nm"] >= wavelength_min_nm]
    if wavelength_max_nm is not None:
        df = df[df["wavelength_nm"] <= wavelength_max_nm]
    return LineSet.from_frame(df.reset_index(drop=True))


def synthesize(
    wavelength_nm,
    composition: Mapping[str, float],
    temperature_k,
    ne_cm3,
    *,
    length_mm: float = 1.0,
    resolving_power: float | None = None,
    fwhm_nm: float | None = None,
    lines: LineSet | None = None,
    self_absorption: bool = False,
    continuum: bool = True,
    scale=None,
    basis: str = "mass",
    oversample: int = 4,
    **model_kw,
) -> np.ndarray:
    """One-call forward model: pixel-integrated radiance (W m^-2 sr^-1 per pixel).

    ``composition``: element -> mass fraction (``basis="mass"``) or number
    fraction (``"number"``).  Scalar T and n_e give a 1-D spectrum; arrays (one
    value per shot) give (n_shots, n_pixels).  ``lines`` default: the shipped
    line list restricted to the composition's elements.  Other keywords go to
    :class:`SpectrumModel`.
    """
    if resolving_power is None and fwhm_nm is None:
        resolving_power = 3000.0
    ins = Instrument(
        np.asarray(wavelength_nm, float), resolving_power=resolving_power, fwhm_nm=fwhm_nm, oversample=oversample
    )
    if lines is None:
        lines = default_lines(elements=list(composition))
    scalar = np.ndim(temperature_k) == 0 and np.ndim(ne_cm3) == 0
    model = SpectrumModel(
        ins,
        lines,
        self_absorption=self_absorption,
        continuum=continuum,
        nominal_temperature_k=float(np.mean(temperature_k)),
        nominal_ne_cm3=float(np.mean(ne_cm3)),
        **model_kw,
    )
    out = model.radiance(composition, temperature_k, ne_cm3, length_mm=length_mm, scale=scale, basis=basis)
    return out[0] if scalar else out


__all__ = ["Instrument", "LineSet", "SpectrumModel", "default_lines", "synthesize", "voigt_tail"]
