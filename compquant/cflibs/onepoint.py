"""One-point calibration of calibration-free LIBS (Cavalcanti et al. 2013,
Spectrochim. Acta B 87, 51).

One certified standard of a matrix similar to the unknowns is analysed; from its plasma
temperature and electron density and its certified composition the **expected** ordinate
of each line is computed::

    y_pred,i = ln F + ln(n_s / U_s(T_std)) − E_k,i / kT_std

with n_s from the certified mass fractions (→ number fractions) and the Saha stage balance at
(T_std, nₑ,std).  ln F is the weighted mean of y_meas − y_pred over the lines, and the
per-line correction factor is ζ_i = exp(y_meas,i − y_pred,i) (geometric mean 1).  It absorbs
errors of A_ki, of the spectral response and the self-absorption at the standard's
conditions.  For an unknown, each line's intensity is divided by its ζ_i before the
calibration-free analysis.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import asdict, dataclass, field

import numpy as np

from compquant.cflibs.analysis import _Analysis, _intensity_basis, _select_sample
from compquant.cflibs.atomicdata import default_atomic_data, species_name
from compquant.cflibs.constants import K_B_EV, LN_SAHA_PREFACTOR
from compquant.cflibs.settings import CFSettings
from compquant.cflibs.solver import logsumexp
from compquant.errors import CalibrationError

SCHEMA = "compquant.cf-one-point/1"


@dataclass
class OnePointCalibration:
    """Per-line factors ζ from one standard (apply with ``analyse_cf(..., one_point=...)``)."""

    standard_id: str
    factors: dict[str, float]
    temperature_k: float
    electron_density_cm3: float
    certified: dict[str, float]
    lines_without_factor: list[str] = field(default_factory=list)
    schema: str = SCHEMA

    def summary(self) -> dict:
        return asdict(self)

    def to_dict(self) -> dict:
        return asdict(self)

    @classmethod
    def from_dict(cls, d: dict) -> OnePointCalibration:
        return cls(**d)


def one_point_calibration(line_table, certified: dict[str, float], *, sample_id: str | None = None,
                          settings=None, atomic=None, acquisition=None, instrument=None,
                          where: str | None = None, intensity_basis: str | None = None) -> OnePointCalibration:
    """Derive per-line correction factors from one certified standard (see module docstring).

    ``certified`` maps element → certified mass fraction (g/g).  Lines of elements not
    certified get no factor.  The standard's T and nₑ come from its own calibration-free
    analysis with the same settings (without self-absorption correction: the factors carry it).
    """
    s = CFSettings.from_section(settings) if not isinstance(settings, CFSettings) else settings
    s = dataclasses.replace(s, self_absorption="none", mc_draws=0)
    sid, rows = _select_sample(line_table, sample_id, where or "line table")
    where = where or f"standard {sid}"
    atomic = atomic if atomic is not None else default_atomic_data()
    if not certified:
        raise CalibrationError("no certified values for the one-point standard", where=where,
                               fix="give the standard's certified mass fractions")
    basis = _intensity_basis(s, intensity_basis, where)  # the same conversion as the unknowns'
    a = _Analysis(rows, sid, s, atomic, acquisition, instrument, None, where, basis=basis)
    res = a.run(0, s.seed)
    T, ne = res.temperature_k, res.electron_density_cm3
    L, model = a.L, a.model
    els = sorted(e for e in certified if e in set(L.element))
    if not els:
        raise CalibrationError("no line of a certified element in the standard", where=where,
                               fix="measure lines of the certified elements")
    # certified mass fractions → number fractions of the certified elements
    ln_x = np.array([math.log(certified[e] / atomic.mass_u(e)) for e in els])
    ln_x -= logsumexp(ln_x)
    Tarr = np.array([T])
    ln_saha = LN_SAHA_PREFACTOR + 1.5 * math.log(T) - math.log(ne)
    ln_sp = {}
    for e, lx in zip(els, ln_x):
        lu1 = float(model.ln_u(species_name(e, 1), Tarr)[0])
        lu2 = float(model.ln_u(species_name(e, 2), Tarr)[0])
        low1 = float(model.lowering(Tarr, np.array([ne]), 1)[0])
        low2 = float(model.lowering(Tarr, np.array([ne]), 2)[0])
        ln_r1 = ln_saha + lu2 - lu1 - (model.ie1[e] - low1) / (K_B_EV * T)
        terms = [0.0, ln_r1]
        s3 = species_name(e, 3)
        if s.include_ion3 and model.ie2.get(e) is not None and model.has_u(s3):
            lu3 = float(model.ln_u(s3, Tarr)[0])
            terms.append(ln_r1 + ln_saha + lu3 - lu2 - (model.ie2[e] - low2) / (K_B_EV * T))
        ln_n1 = lx - logsumexp(terms)
        ln_sp[species_name(e, 1)] = ln_n1 - lu1
        ln_sp[species_name(e, 2)] = ln_n1 + ln_r1 - lu2
    y_meas = np.log(L.intensity * L.wl / L.gA)
    have = np.isin(L.element, els)
    y_pred = np.array([ln_sp.get(sp, np.nan) for sp in L.species]) - L.ek / (K_B_EV * T)
    d = (y_meas - y_pred)[have]
    w = a.w[have]
    ln_f = float(np.sum(d * w) / np.sum(w))
    factors = {str(lid): float(math.exp(v - ln_f)) for lid, v in zip(L.line_id[have], d)}
    return OnePointCalibration(standard_id=sid, factors=factors, temperature_k=float(T),
                               electron_density_cm3=float(ne), certified=dict(certified),
                               lines_without_factor=[str(x) for x in L.line_id[~have]])


__all__ = ["OnePointCalibration", "one_point_calibration"]
