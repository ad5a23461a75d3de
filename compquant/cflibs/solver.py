"""Joint Boltzmann / Saha–Boltzmann fit and composition by closure, batched over draws.

Intensity convention (docs/architecture.md): spectra after response correction are
proportional to radiance in **energy** units, so a line's integrated intensity is
``I = F·(hc/λ)·A_ki g_k e^{−E_k/kT} n_s/U_s(T)`` and the Boltzmann ordinate is
``y = ln(I λ / (g_k A_ki)) = ln(F hc n_s/U_s) − E_k/kT`` (for photon-count spectra the λ
factor would drop out; it is applied here because compquant spectra are energy radiance).

Boltzmann mode — one slope m = −1/kT shared by all species, one intercept q_s per species
(Ciucci et al. 1999, Appl. Spectrosc. 53, 960)::

    y_i = q_s + m E_k,i

Saha–Boltzmann mode — ion lines are moved onto the neutral line of their element with the
Saha equation (Aragón & Aguilera 2008, Spectrochim. Acta B 63, 893, eqs. 19–20;
Tognoni et al. 2010, Spectrochim. Acta B 65, 1)::

    y*_i = y_i − ln(2 (2π mₑ kT/h²)^{3/2} / nₑ)     x*_i = E_k,i + E_ion,I      (ion lines)

so that all lines of an element share one intercept q_el = ln(F hc n_I/U_I).  When nₑ is
not known from line widths, ln nₑ is a fitted parameter shared by all elements (column −1
on the ion rows).  The temperature enters the ion shift through T^{3/2}, so the fit is
iterated to a fixed point (converges in a few steps).

Ionisation energies are lowered by the Debye–Hückel term ΔE (Griem 1964 §6-3), as in the
forward model: x* keeps E_ion,I and the ordinate shift gains ΔE/kT (iterated with nₑ).

Closure (Ciucci et al. 1999): n_el ∝ U_I e^{q_el}·(1 + n_II/n_I + n_III/n_I) with the stage
ratios from Saha at (T, nₑ); number fractions x_el = n_el/Σn; mass fractions
w_el = x_el M_el / Σ x M.  All in log space (log-sum-exp), so no exponential overflows.
"""

from __future__ import annotations

import functools
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from compquant.atomic import species_name
from compquant.cflibs.fitting import BatchFit, wls_batch
from compquant.cflibs.lineset import LineSet
from compquant.errors import AtomicDataError, PhysicsError
from compquant.plasma.constants import KB_EV, LN_SAHA_PREFACTOR
from compquant.plasma.saha import ionisation_lowering_ev


def logsumexp(a, axis=None, keepdims=False):
    """ln Σ exp(a) without overflow (plain numpy; scipy's version is slow for small arrays)."""
    a = np.asarray(a, dtype=float)
    m = np.max(a, axis=axis, keepdims=True)
    m = np.where(np.isfinite(m), m, 0.0)
    out = np.log(np.sum(np.exp(a - m), axis=axis, keepdims=True)) + m
    return out if keepdims else np.squeeze(out, axis=axis) if axis is not None else out.reshape(())


@dataclass
class Solution:
    """Batched solution (leading axis = draws)."""

    T: np.ndarray
    ne: np.ndarray
    u_ln_ne_fit: np.ndarray | None
    slope: np.ndarray
    u_slope: np.ndarray
    fit: BatchFit
    X: np.ndarray
    y: np.ndarray  # ordinates as fitted (ion rows shifted in SB mode)
    groups: list[str]
    elements: list[str]
    ln_n_el: np.ndarray  # (d, n_el) relative ln number density (common ln F removed)
    ln_n_species: dict  # species -> (d,) relative ln number density
    number_fraction: np.ndarray  # (d, n_el)
    mass_fraction: np.ndarray  # (d, n_el) before any fixed-content rescaling
    valid: np.ndarray  # (d,) bool
    iterations: int
    ne_from_fit: bool


@functools.lru_cache(maxsize=64)
def _stage_species(stages: tuple) -> tuple[str, ...]:
    """Stage I species of every element, then stage II, then the stage III ones that enter."""
    return tuple(r[0] for r in stages) + tuple(r[1] for r in stages) + tuple(r[2] for r in stages if r[3])


class Model:
    """The linear model of one sample's lines (design fixed, ordinates per draw)."""

    #: temperatures whose ln U tables are kept (0: none; benchmarks/cf_speed.py switches it off)
    LN_U_MEMO = 16

    def __init__(self, lines: LineSet, atomic, settings):
        self.lines = lines
        self.atomic = atomic
        self.settings = settings
        self.mode = settings.fit
        self.elements = sorted(set(lines.element))
        self.species = sorted(set(lines.species))
        self.masses = np.array([atomic.mass_u(e) for e in self.elements])
        self.ie1 = {}
        self.ie2 = {}
        for e in self.elements:
            self.ie1[e] = atomic.ionisation_energy(species_name(e, 1))
            try:
                self.ie2[e] = atomic.ionisation_energy(species_name(e, 2))
            except AtomicDataError:
                self.ie2[e] = None
        self.is_ion = lines.ion == 2
        self.ion_elements = sorted({e for e, z in zip(lines.element, lines.ion) if z == 2})
        self.both_stage_elements = sorted(
            {e for e in self.elements if (1 in set(lines.ion[lines.element == e]))
             and (2 in set(lines.ion[lines.element == e]))})
        self.y0 = np.log(lines.wl) - np.log(lines.gA)  # + ln I per draw
        #: Monte Carlo: per-draw offsets of ln U(T) by species (set around a batched solve)
        self.ln_u_shift: dict[str, np.ndarray] | None = None
        self._stage_rows: list | None = None
        self._lu_memo: dict = {}

    # -- partition functions ------------------------------------------------------------
    def ln_u(self, species: str, T: np.ndarray) -> np.ndarray:
        u = np.asarray(self.atomic.partition_function(species, T), dtype=float)
        if u.shape != np.shape(T):
            u = np.broadcast_to(u, np.shape(T))
        if not (np.isfinite(u).all() and (u > 0).all()):
            raise PhysicsError("partition function is not finite and positive", where=species,
                               fix="check the temperature range of the partition-function data")
        out = np.log(u)
        shift = None if self.ln_u_shift is None else self.ln_u_shift.get(species)
        if shift is not None and np.shape(shift) == np.shape(out):
            out = out + shift
        return out

    def lowering(self, T, ne, charge_produced: int) -> np.ndarray:
        """Debye–Hückel lowering of the ionisation energy (eV), as in the forward model
        (:func:`compquant.plasma.saha.ionisation_lowering_ev`; Griem 1964 §6-3); 0 when off."""
        if not self.settings.ionisation_lowering:
            return np.zeros(np.shape(T))
        return ionisation_lowering_ev(np.asarray(T, float), np.asarray(ne, float), charge_produced)

    def has_u(self, species: str) -> bool:
        return bool(self.atomic.has_partition_function(species))

    # -- design ------------------------------------------------------------------------
    def design(self, ne_free: bool) -> tuple[np.ndarray, list[str]]:
        L = self.lines
        if self.mode == "saha-boltzmann":
            groups = self.elements
            gidx = np.array([groups.index(e) for e in L.element])
            x = L.ek + np.where(self.is_ion, [self.ie1[e] for e in L.element], 0.0)
        else:
            groups = self.species
            gidx = np.array([groups.index(s) for s in L.species])
            x = L.ek.copy()
        cols = [x[:, None], np.eye(len(groups))[gidx]]
        if ne_free and self.mode == "saha-boltzmann":
            cols.append(np.where(self.is_ion, -1.0, 0.0)[:, None])
        X = np.hstack(cols)
        if np.linalg.matrix_rank(X) < X.shape[1]:
            raise PhysicsError(
                "the lines cannot separate temperature from the species intercepts",
                where=f"{self.mode} fit",
                fix="use lines spread over upper-level energy (≥ 2 lines of one species with "
                "different E_k, or neutral and ion lines of one element)",
            )
        return X, groups

    # -- solve -------------------------------------------------------------------------
    def solve(self, ln_i: np.ndarray, dln_a: np.ndarray | float, w: np.ndarray,
              ne_func: Callable[[np.ndarray], np.ndarray] | None, T0: np.ndarray | None = None,
              strict: bool = True, max_iter: int = 50) -> Solution:
        """Fit T (and nₑ if ``ne_func`` is None) per draw and close the composition.

        ``ln_i`` (d, n) log intensities (after corrections), ``dln_a`` (d, n) perturbation
        of ln A_ki, ``w`` (d, n) or (n,) weights of the ordinates.  ``strict``: raise
        PhysicsError when the (single) solution is unphysical; otherwise mark draws invalid.
        """
        s = self.settings
        ln_i = np.atleast_2d(ln_i)
        d = ln_i.shape[0]
        y_base = ln_i + self.y0[None, :] - dln_a
        ne_free = ne_func is None
        if ne_free and self.mode == "saha-boltzmann" and not self.both_stage_elements:
            raise PhysicsError(
                "electron density cannot be found: no element has both neutral and ion lines, "
                "and no width method applies",
                where="electron density",
                fix="measure H I 656.28 nm or lines with Stark parameters, add ion lines, or set "
                "[cf] ne_method = 'fixed' with ne_fixed_cm3",
            )
        X, groups = self.design(ne_free)
        T = np.full(d, s.t_start_k) if T0 is None else np.array(T0, dtype=float).copy()
        ion = self.is_ion[None, :]
        ne_prev = None  # for the ionisation-energy lowering when nₑ is fitted
        it = 0
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            while it < max_iter:
                it += 1
                Tc = np.clip(T, s.t_min_k * 0.5, s.t_max_k * 2)
                if self.mode == "saha-boltzmann":
                    shift = LN_SAHA_PREFACTOR + 1.5 * np.log(Tc)
                    if not ne_free:
                        ne_now = np.broadcast_to(ne_func(Tc), (d,))
                        shift = shift - np.log(ne_now)
                    else:
                        ne_now = ne_prev
                    if ne_now is not None:  # Debye–Hückel lowering: y* −= ΔE/kT on ion rows
                        shift = shift + self.lowering(Tc, ne_now, 1) / (KB_EV * Tc)
                    y = y_base - np.where(ion, shift[:, None], 0.0)
                else:
                    y = y_base
                fit = wls_batch(X, y, w, scale_by_chi2=s.scale_by_chi2)
                m = fit.beta[:, 0]
                T_new = np.where(m < 0, -1.0 / (KB_EV * m), np.nan)
                done = bool(np.all(np.isfinite(T_new)) and np.nanmax(np.abs(T_new / T - 1.0)) < 1e-9)
                if ne_free and self.mode == "saha-boltzmann":
                    ne_fit = np.exp(np.clip(fit.beta[:, -1], -700, 700))
                    if s.ionisation_lowering:
                        done = done and ne_prev is not None and bool(
                            np.nanmax(np.abs(ne_fit / ne_prev - 1.0)) < 1e-9)
                    ne_prev = ne_fit
                T = np.where(np.isfinite(T_new), T_new, T)
                bad = ~np.isfinite(T_new)
                if self.mode == "boltzmann" or done or np.all(bad):
                    T = np.where(bad, np.nan, T)
                    break
        valid = np.isfinite(T) & (T >= s.t_min_k) & (T <= s.t_max_k)
        if strict and not np.all(valid):
            msg = ("the Boltzmann-plot slope is not negative" if not np.all(np.isfinite(T)) else
                   f"fitted temperature {float(T[0]):.0f} K is outside {s.t_min_k:.0f}–{s.t_max_k:.0f} K")
            raise PhysicsError(msg, where=f"{self.mode} fit",
                               fix="check line identifications, self-absorption and the line flags; "
                               "widen [cf] t_min_k / t_max_k only if the plasma really is that hot/cold")
        Tv = np.where(valid, T, s.t_start_k)  # finite stand-in T for invalid draws; masked by `valid` below
        u_slope = np.sqrt(fit.cov[:, 0, 0])
        # electron density
        u_ln_ne = None
        if ne_free:
            if self.mode == "saha-boltzmann":
                ln_ne = fit.beta[:, -1]
                u_ln_ne = np.sqrt(fit.cov[:, -1, -1])
            else:
                ln_ne, u_ln_ne = self._ne_from_intercepts(fit, groups, Tv)
            bad_ne = ~np.isfinite(ln_ne) | (np.abs(ln_ne) > 700)
            if strict and np.any(bad_ne):
                raise PhysicsError("electron density from the Saha balance is not finite",
                                   where="Saha ratio", fix="check the ion-line intensities")
            valid &= ~bad_ne
            ne = np.exp(np.where(bad_ne, 0.0, ln_ne))
        else:
            ne = np.broadcast_to(ne_func(Tv), (d,)).astype(float)
        ln_n_el, ln_n_sp = self._composition(fit.beta, groups, Tv, ne)
        ln_x = ln_n_el - logsumexp(ln_n_el, axis=1, keepdims=True)
        ln_m = ln_x + np.log(self.masses)[None, :]
        ln_w = ln_m - logsumexp(ln_m, axis=1, keepdims=True)
        xfrac = np.exp(ln_x)
        wfrac = np.exp(ln_w)
        ok = np.all(np.isfinite(wfrac), axis=1)
        if strict and not np.all(ok):
            raise PhysicsError("composition is not finite", where="closure",
                               fix="check temperature and electron density")
        valid &= ok
        return Solution(T=np.where(valid, T, np.nan), ne=ne, u_ln_ne_fit=u_ln_ne, slope=fit.beta[:, 0],
                        u_slope=u_slope, fit=fit, X=X, y=y, groups=groups, elements=self.elements,
                        ln_n_el=ln_n_el, ln_n_species=ln_n_sp, number_fraction=xfrac,
                        mass_fraction=wfrac, valid=valid, iterations=it, ne_from_fit=ne_free)

    def _ne_from_intercepts(self, fit, groups, T):
        """Boltzmann mode: ln nₑ from q_II − q_I of each element with both stages, combined."""
        if not self.both_stage_elements:
            raise PhysicsError(
                "electron density cannot be found from the Saha ratio: no element has both "
                "neutral and ion lines", where="electron density",
                fix="measure H-alpha or lines with Stark parameters, or set [cf] ne_method = 'fixed'")
        p0 = 1
        diffs, variances, ies = [], [], []
        for e in self.both_stage_elements:
            i1 = p0 + groups.index(species_name(e, 1))
            i2 = p0 + groups.index(species_name(e, 2))
            diffs.append(fit.beta[:, i2] - fit.beta[:, i1])
            var = fit.cov[:, i1, i1] + fit.cov[:, i2, i2] - 2 * fit.cov[:, i1, i2]
            variances.append(np.maximum(var, 1e-30))
            ies.append(self.ie1[e])
        wts = 1.0 / np.array(variances)
        low = np.zeros_like(T)
        for _ in range(20):  # lowering depends on nₑ: fixed point, converges in a few steps
            ests = np.array([LN_SAHA_PREFACTOR + 1.5 * np.log(T) - (ie - low) / (KB_EV * T) - df
                             for ie, df in zip(ies, diffs)])
            ln_ne = np.sum(ests * wts, axis=0) / np.sum(wts, axis=0)
            new = self.lowering(T, np.exp(np.clip(ln_ne, -700, 700)), 1)
            if np.all(np.abs(new - low) < 1e-12):
                break
            low = new
        return ln_ne, np.sqrt(1.0 / np.sum(wts, axis=0))

    def _stages(self) -> list[tuple[str, str, str, bool]]:
        """Per element: the names of stages I, II, III and whether stage III enters the closure
        (``[cf] include_ion3``, a second ionisation energy and a partition function); decided once."""
        if self._stage_rows is None:
            s = self.settings
            rows = []
            for e in self.elements:
                s3 = species_name(e, 3)
                use3 = bool(s.include_ion3 and self.ie2.get(e) is not None and self.has_u(s3))
                rows.append((species_name(e, 1), species_name(e, 2), s3, use3))
            self._stage_rows = rows
        return self._stage_rows

    def _ln_u_stages(self, stages, T):
        """ln U of stages I, II, III (columns: elements; III zero where it does not enter) at T.

        Kept for the last few temperatures of up to 8 draws when no Monte Carlo shift is set: the
        self-absorption fit's Jacobian asks again at the same T for every parameter but T.
        """
        key = T.tobytes() if self.ln_u_shift is None and T.size <= 8 and self.LN_U_MEMO else None
        hit = self._lu_memo.get(key) if key is not None else None
        if hit is not None:
            return hit
        d, n = T.shape[0], len(stages)
        lu1, lu2, lu3 = np.empty((d, n)), np.empty((d, n)), np.zeros((d, n))
        many = getattr(self.atomic, "partition_functions", None) if self.ln_u_shift is None else None
        u = many(_stage_species(tuple(stages)), T) if many is not None else None  # (d, 2n + n₃)
        if u is not None and u.shape == (d, 2 * n + sum(r[3] for r in stages)) and (
                np.isfinite(u).all() and (u > 0).all()):  # else ln_u below and its error
            lu = np.log(u)  # the same numbers as ln_u per species (atomicdata.partition_functions)
            lu1[:] = lu[:, :n]
            lu2[:] = lu[:, n:2 * n]
            lu3[:, [j for j, r in enumerate(stages) if r[3]]] = lu[:, 2 * n:]
            stages = ()
        for j, (s1, s2, s3, use3) in enumerate(stages):  # same order as the per-element loop
            lu1[:, j] = self.ln_u(s1, T)
            lu2[:, j] = self.ln_u(s2, T)
            if use3:
                lu3[:, j] = self.ln_u(s3, T)
        if key is not None:
            if len(self._lu_memo) >= self.LN_U_MEMO:
                self._lu_memo.clear()
            for a in (lu1, lu2, lu3):
                a.flags.writeable = False
            self._lu_memo[key] = (lu1, lu2, lu3)
        return lu1, lu2, lu3

    def _composition_indices(self, stages, groups):
        """The per-element constants of :meth:`_composition` for the parameter ``groups``
        (stage III flags, ionisation energies, columns of the intercepts), built once per groups."""
        key = tuple(groups)
        memo = self.__dict__.setdefault("_ci_memo", {})
        hit = memo.get(key)
        if hit is not None:
            return hit
        p0 = 1
        use3 = np.array([r[3] for r in stages], dtype=bool)
        ie1 = np.array([self.ie1[e] for e in self.elements])[None, :]
        ie2 = np.array([self.ie2[e] if r[3] else 0.0 for e, r in zip(self.elements, stages)])[None, :]
        if self.mode == "saha-boltzmann":
            idx1 = [p0 + groups.index(e) for e in self.elements]
            idx2 = has1 = has2 = None
        else:
            has1 = np.array([r[0] in groups for r in stages])
            has2 = np.array([r[1] in groups for r in stages])
            idx1 = [p0 + (groups.index(r[0]) if r[0] in groups else 0) for r in stages]
            idx2 = [p0 + (groups.index(r[1]) if r[1] in groups else 0) for r in stages]
        out = (use3, ie1, ie2, idx1, idx2, has1, has2)
        for a in out:
            if isinstance(a, np.ndarray):
                a.flags.writeable = False
        memo[key] = out
        return out

    def _composition(self, beta, groups, T, ne):
        """Relative ln number density per element (and per species), all elements at once.

        Per element e (columns): ln n_II/n_I = ln S + ln U_II − ln U_I − (E_ion,I − ΔE₁)/kT and
        ln n_III/n_II likewise with E_ion,II and ΔE₂ (Saha; S = 2(2πmₑkT/h²)^{3/2}/nₑ), then
        ln n_e = ln Σ_stages n (log-sum-exp; an absent stage III enters as e^{−∞} = 0).
        """
        stages = self._stages()
        ln_saha = (LN_SAHA_PREFACTOR + 1.5 * np.log(T) - np.log(ne))[:, None]
        kT = (KB_EV * T)[:, None]
        low1 = self.lowering(T, ne, 1)[:, None]
        low2 = self.lowering(T, ne, 2)[:, None]
        lu1, lu2, lu3 = self._ln_u_stages(stages, T)
        use3, ie1, ie2, idx1, idx2, has1, has2 = self._composition_indices(stages, groups)
        ln_r1 = ln_saha + lu2 - lu1 - (ie1 - low1) / kT
        ln_r2 = ln_saha + lu3 - lu2 - (ie2 - low2) / kT
        if self.mode == "saha-boltzmann":
            ln_n1 = beta[:, idx1] + lu1
            ln_n2 = ln_n1 + ln_r1
        else:
            n1 = beta[:, idx1] + lu1
            n2 = beta[:, idx2] + lu2
            ln_n1 = np.where(has1, n1, n2 - ln_r1)
            ln_n2 = np.where(has2, n2, ln_n1 + ln_r1)
        ln_n3 = np.where(use3, ln_n2 + ln_r2, -np.inf)
        out = logsumexp(np.stack([ln_n1, ln_n2, ln_n3]), axis=0)
        ln_sp = {}
        for j, (s1, s2, s3, u3) in enumerate(stages):
            if u3:
                ln_sp[s3] = ln_n3[:, j]
            ln_sp[s1] = ln_n1[:, j]
            ln_sp[s2] = ln_n2[:, j]
        return out, ln_sp


__all__ = ["Model", "Solution"]
