"""Local thermodynamic equilibrium (LTE) validity checks.

McWhirter criterion (McWhirter 1965, in *Plasma Diagnostic Techniques*, Huddlestone &
Leonard eds.; as written in Cristoforetti et al. 2010, Spectrochim. Acta B 65, 86, eq. 3)::

    nₑ ≥ 1.6×10¹² · T^{1/2} · (ΔE)³      [nₑ in cm⁻³, T in K, ΔE in eV]

with ΔE the largest energy gap of the transitions used.  Here ΔE is taken as the
largest E_k − E_i (= hc/λ) over the lines in the analysis, which is what the
populations of those lines need to be collisionally coupled over.

Transient plasma (Cristoforetti et al. 2010, eq. 8, after Drawin 1969): the
relaxation time to equilibrium must be much shorter than the time over which T and
nₑ change::

    τ_rel ≈ 6.3×10⁴ / (nₑ f ⟨ḡ⟩) · ΔE · (kT)^{1/2} · exp(ΔE / kT)     [s; ΔE, kT in eV]

(from memory of Cristoforetti et al. 2010, verify).  ``f`` is the absorption
oscillator strength of the gap transition and ⟨ḡ⟩ the effective Gaunt factor; the
settings default to f = 0.1 and ⟨ḡ⟩ = 0.2 (common practice for neutral resonance
transitions).  The plasma's variation time is estimated by its age at the start of
the gate (the gate delay, common practice); the criterion passes when
τ_rel ≤ ratio · delay (ratio 0.1 by default, i.e. "much shorter").

Inhomogeneous plasma (Cristoforetti et al. 2010, eq. 10): the diffusion length of
atoms during τ_rel must be much shorter than the length over which T and nₑ vary::

    λ ≈ 1.4×10¹² · (kT)^{3/4} / nₑ · (ΔE / M_A)^{1/2} · exp(ΔE / 2kT)     [cm; M_A in u]

(from memory of Cristoforetti et al. 2010, verify), checked against ``ratio ·
gradient length`` when a gradient length is given, using the lightest element
analysed (the most mobile).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

import numpy as np

from compquant.plasma.constants import KB_EV


def mcwhirter_ne_min(T, delta_e_ev) -> np.ndarray:
    """Minimum nₑ (cm⁻³) of the McWhirter criterion for T (K) and ΔE (eV)."""
    return 1.6e12 * np.sqrt(np.asarray(T, dtype=float)) * np.asarray(delta_e_ev, dtype=float) ** 3


def relaxation_time_s(ne, T, delta_e_ev, f: float = 0.1, gaunt: float = 0.2) -> np.ndarray:
    """Relaxation time to excitation equilibrium τ_rel (s), Cristoforetti et al. 2010 eq. 8."""
    kT = KB_EV * np.asarray(T, dtype=float)
    dE = np.asarray(delta_e_ev, dtype=float)
    x = np.minimum(dE / kT, 700.0)  # keeps exp finite; τ is astronomically long there anyway
    return 6.3e4 / (np.asarray(ne, dtype=float) * f * gaunt) * dE * np.sqrt(kT) * np.exp(x)


def diffusion_length_cm(ne, T, delta_e_ev, mass_u) -> np.ndarray:
    """Diffusion length of atoms during τ_rel (cm), Cristoforetti et al. 2010 eq. 10."""
    kT = KB_EV * np.asarray(T, dtype=float)
    dE = np.asarray(delta_e_ev, dtype=float)
    x = np.minimum(dE / (2 * kT), 700.0)
    return 1.4e12 * kT**0.75 / np.asarray(ne, dtype=float) * np.sqrt(dE / np.asarray(mass_u)) * np.exp(x)


@dataclass
class LTECheck:
    """Outcome of one LTE criterion."""

    name: str
    checked: bool
    passed: bool | None
    value: float | None = None
    limit: float | None = None
    unit: str = ""
    note: str = ""

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass
class LTEReport:
    """All LTE checks for one analysis; ``flags`` lists the failed criteria."""

    delta_e_ev: float
    checks: list[LTECheck] = field(default_factory=list)

    @property
    def flags(self) -> list[str]:
        return [f"lte_{c.name}_failed" for c in self.checks if c.checked and c.passed is False]

    @property
    def passed(self) -> bool:
        return not self.flags

    def to_dict(self) -> dict:
        return {"delta_e_ev": self.delta_e_ev, "checks": [c.to_dict() for c in self.checks],
                "flags": self.flags}


def check_lte(
    T: float,
    ne: float,
    delta_e_ev: float,
    *,
    gate_delay_s: float | None = None,
    lightest_mass_u: float | None = None,
    gradient_length_mm: float | None = None,
    f: float = 0.1,
    gaunt: float = 0.2,
    transient_ratio: float = 0.1,
    diffusion_ratio: float = 0.1,
) -> LTEReport:
    """Run the McWhirter, transient and inhomogeneity criteria (see module docstring)."""
    rep = LTEReport(delta_e_ev=float(delta_e_ev))
    ne_min = float(mcwhirter_ne_min(T, delta_e_ev))
    rep.checks.append(LTECheck("mcwhirter", True, bool(ne >= ne_min), float(ne), ne_min, "cm-3",
                               "nₑ ≥ 1.6e12·T^½·ΔE³ (necessary, not sufficient)"))
    if gate_delay_s is not None and gate_delay_s > 0:
        tau = float(relaxation_time_s(ne, T, delta_e_ev, f=f, gaunt=gaunt))
        lim = transient_ratio * gate_delay_s
        rep.checks.append(LTECheck("transient", True, bool(tau <= lim), tau, lim, "s",
                                   f"τ_rel ≤ {transient_ratio}·gate delay"))
    else:
        rep.checks.append(LTECheck("transient", False, None, note="run gives no gate delay"))
    if gradient_length_mm and lightest_mass_u:
        lam = float(diffusion_length_cm(ne, T, delta_e_ev, lightest_mass_u)) * 10.0  # mm
        lim = diffusion_ratio * gradient_length_mm
        rep.checks.append(LTECheck("inhomogeneous", True, bool(lam <= lim), lam, lim, "mm",
                                   f"diffusion length ≤ {diffusion_ratio}·gradient length"))
    else:
        rep.checks.append(LTECheck("inhomogeneous", False, None,
                                   note="no plasma gradient length given ([cf] gradient_length_mm)"))
    return rep


__all__ = [
    "LTECheck",
    "LTEReport",
    "check_lte",
    "diffusion_length_cm",
    "mcwhirter_ne_min",
    "relaxation_time_s",
]
