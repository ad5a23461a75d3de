"""Air <-> vacuum wavelength conversion.

The refractive index of standard dry air (15 degC, 101 325 Pa, 0.045 % CO2) is
taken from the Edlén (1966) form with the Birch & Downs (1994) coefficients as
given by Morton (2000, ApJS 130, 403, eq. 8)::

    n - 1 = 8.34254e-5 + 2.406147e-2 / (130 - s**2) + 1.5998e-4 / (38.9 - s**2)

with ``s = 1e3 / lambda_vac`` the vacuum wavenumber in um^-1 (``lambda_vac`` in
nm).  Then ``lambda_air = lambda_vac / n``.  The inverse (air -> vacuum) is
solved by fixed-point iteration of the same equation to machine precision, so
the two functions are exact inverses of each other (not the approximate
inverse fit sometimes used).  The formula is meant for wavelengths above about
200 nm; below that, spectra are normally recorded in vacuum (or in purge gas)
anyway.  Wavelengths <= 0 or non-finite give NaN.
"""

from __future__ import annotations

import numpy as np

__all__ = ["air_to_vacuum", "vacuum_to_air", "refractive_index_air"]


def refractive_index_air(wavelength_vac_nm):
    """Refractive index of standard air at the given *vacuum* wavelength(s) (nm).

    Edlén (1966) / Birch & Downs (1994) as in Morton (2000) eq. 8 (see module
    docstring).  Vectorised; returns a float for a scalar input.
    """
    lam = np.asarray(wavelength_vac_nm, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        s2 = (1.0e3 / np.where(lam > 0, lam, np.nan)) ** 2
        n = 1.0 + 8.34254e-5 + 2.406147e-2 / (130.0 - s2) + 1.5998e-4 / (38.9 - s2)
    return n if n.ndim else float(n)


def vacuum_to_air(wavelength_vac_nm):
    """Convert vacuum wavelength(s) in nm to standard-air wavelength(s) in nm.

    ``lambda_air = lambda_vac / n(lambda_vac)``, Morton (2000) eq. 8.
    Vectorised: array in, array out; scalar in, float out.
    """
    lam = np.asarray(wavelength_vac_nm, dtype=float)
    out = lam / refractive_index_air(lam)
    return out if np.ndim(out) else float(out)


def air_to_vacuum(wavelength_air_nm):
    """Convert standard-air wavelength(s) in nm to vacuum wavelength(s) in nm.

    Solves ``lambda_vac = lambda_air * n(lambda_vac)`` by fixed-point iteration
    (the map contracts by a factor ~1e-6 per step, so 4 steps reach double
    precision); exact inverse of :func:`vacuum_to_air`.  Vectorised.
    """
    lam_air = np.asarray(wavelength_air_nm, dtype=float)
    lam_vac = lam_air * 1.000277
    for _ in range(4):
        lam_vac = lam_air * refractive_index_air(lam_vac)
    return lam_vac if np.ndim(lam_vac) else float(lam_vac)
