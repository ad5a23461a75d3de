"""LTE plasma physics and the forward model of emission spectra.

Modules (each docstring gives its equations, units and citations):

* :mod:`~compquant.plasma.constants` - CODATA constants, the Saha constant (the one home of
  both; :mod:`compquant.cflibs` imports them);
* :mod:`~compquant.plasma.boltzmann` - level populations;
* :mod:`~compquant.plasma.saha` - Saha ratio (linear and log forms), Debye-Hueckel lowering;
* :mod:`~compquant.plasma.lte` - species densities with charge neutrality;
* :mod:`~compquant.plasma.emission` - line emissivity, absorption, Planck;
* :mod:`~compquant.plasma.profiles` - Doppler, Stark, Voigt, instrument;
* :mod:`~compquant.plasma.continuum` - free-free + free-bound continuum;
* :mod:`~compquant.plasma.slab` - homogeneous-slab radiative transfer;
* :mod:`~compquant.plasma.forward` - spectrum on detector pixels.
"""

from __future__ import annotations

from compquant.plasma.boltzmann import boltzmann_factor, level_population, population_ratio
from compquant.plasma.constants import KB_EV, LN_SAHA_PREFACTOR, SAHA_PREFACTOR_CM3
from compquant.plasma.continuum import KRAMERS_C1, continuum_emissivity
from compquant.plasma.emission import (
    line_absorption_integrated,
    line_emissivity,
    line_emissivity_lte,
    planck_radiance,
)
from compquant.plasma.forward import Instrument, LineSet, SpectrumModel, default_lines, synthesize
from compquant.plasma.lte import (
    LTEState,
    mass_to_number_fractions,
    number_to_mass_fractions,
    solve_lte,
    species_name,
    stage_fractions,
)
from compquant.plasma.profiles import (
    doppler_fwhm,
    gaussian,
    instrument_fwhm,
    lorentzian,
    stark_fwhm,
    stark_shift,
    voigt,
    voigt_fwhm,
)
from compquant.plasma.saha import (
    debye_length_m,
    ionisation_lowering_ev,
    ln_saha_factor,
    ln_saha_ratio,
    ne_from_ln_ratio,
    saha_ratio,
)
from compquant.plasma.slab import optical_depth, self_absorption_coefficient, slab_radiance, thin_radiance

__all__ = [
    "KB_EV",
    "KRAMERS_C1",
    "LN_SAHA_PREFACTOR",
    "SAHA_PREFACTOR_CM3",
    "Instrument",
    "LTEState",
    "LineSet",
    "SpectrumModel",
    "boltzmann_factor",
    "continuum_emissivity",
    "debye_length_m",
    "default_lines",
    "doppler_fwhm",
    "gaussian",
    "instrument_fwhm",
    "ionisation_lowering_ev",
    "level_population",
    "line_absorption_integrated",
    "line_emissivity",
    "line_emissivity_lte",
    "ln_saha_factor",
    "ln_saha_ratio",
    "lorentzian",
    "mass_to_number_fractions",
    "ne_from_ln_ratio",
    "number_to_mass_fractions",
    "optical_depth",
    "planck_radiance",
    "population_ratio",
    "saha_ratio",
    "self_absorption_coefficient",
    "slab_radiance",
    "solve_lte",
    "species_name",
    "stage_fractions",
    "stark_fwhm",
    "stark_shift",
    "synthesize",
    "thin_radiance",
    "voigt",
    "voigt_fwhm",
]
