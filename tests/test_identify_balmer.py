"""Hydrogen Balmer lines: located where the Rydberg formula puts them, found in a synthetic spectrum."""

from __future__ import annotations

import numpy as np
import pytest
from identify_helpers import R, axis, observe, radiance
from scipy import constants

from compquant.atomic import air_to_vacuum, vacuum_to_air
from compquant.identify import identify_spectrum, matching_tolerance
from compquant.identify.settings import IdentifySettings


def balmer_air_nm(n_upper: np.ndarray) -> np.ndarray:
    """Balmer wavelengths in standard air from CODATA constants (scipy.constants).

    Bohr levels with the reduced-mass Rydberg constant of hydrogen,
    ``R_H = R_inf / (1 + m_e / m_p)``, ``1/λ_vac = R_H (1/2² − 1/n²)``; converted to air
    with the Edlén / Birch & Downs refractive index in the form of Morton (2000, ApJS 130, 403,
    eq. 8), implemented by compquant.atomic.vacuum_to_air.  Fine structure and the Lamb shift
    are neglected: they move the line centroids by about 0.01 nm (from memory of NIST ASD), far
    inside the identification tolerance (0.5 FWHM = 0.08 nm at 656 nm for R = 4000).
    """
    r_h = constants.Rydberg / (1.0 + constants.m_e / constants.m_p)  # CODATA via scipy.constants, m^-1
    lam_vac_nm = 1e9 / (r_h * (0.25 - 1.0 / np.asarray(n_upper, float) ** 2))
    return vacuum_to_air(lam_vac_nm)


def test_rydberg_balmer_wavelengths_match_reference_values():
    lam = balmer_air_nm(np.array([3, 4, 5]))
    # from memory of NIST ASD (air wavelengths of H-alpha, H-beta, H-gamma): 656.279, 486.135, 434.047 nm
    # the Bohr values sit 0.003-0.009 nm above them (fine structure, see balmer_air_nm)
    np.testing.assert_allclose(lam, [656.279, 486.135, 434.047], atol=0.012)
    assert np.all(lam - np.array([656.279, 486.135, 434.047]) > 0)


@pytest.fixture(scope="module")
def hydrogen_spectrum():
    wl = axis(400.0, 680.0, 0.025)
    rad = radiance(wl, {"Cu": 0.95, "H": 0.05}, T=10000.0, ne=1e16)
    return wl, rad


def test_balmer_lines_detected_at_rydberg_wavelengths(hydrogen_spectrum):
    wl, rad = hydrogen_spectrum
    lam = balmer_air_nm(np.array([3, 4]))  # H-alpha, H-beta (H-gamma is too weak at this level)
    st = IdentifySettings()
    found_h = 0
    for seed in range(2):
        y = observe(rad, seed, peak_pe=6e4, n_shots=16)
        ident = identify_spectrum(wl, y, settings=st, resolving_power=R)
        pk = ident.peaks["centre_nm"].to_numpy()
        tol = matching_tolerance(lam, R, st)
        nearest = np.array([pk[np.argmin(np.abs(pk - x))] for x in lam])
        # a peak within the matching tolerance of each Rydberg wavelength
        assert np.all(np.abs(nearest - lam) <= tol), (nearest, lam, tol)
        row = ident.species[ident.species["species"] == "H I"].iloc[0]
        found_h += row["status"] == "detected"
        assert row["status"] in ("detected", "possible")
        assert "H I 656.279" in row["best_lines"]
    assert found_h == 2


def test_vacuum_axis_and_estimated_resolving_power(hydrogen_spectrum):
    """The same spectrum on a vacuum wavelength axis (Morton 2000 conversion) and without a stated
    resolving power: H and Cu are still found; R is estimated from the peak widths as a lower bound
    (Stark and Doppler broadening only widen lines)."""
    wl, rad = hydrogen_spectrum
    y = observe(rad, 5, peak_pe=6e4, n_shots=16)
    wl_vac = air_to_vacuum(wl)
    ident = identify_spectrum(wl_vac, y, medium="vacuum")
    assert ident.resolving_power_source == "estimated from peak widths"
    assert 0.6 * R < ident.resolving_power <= 1.05 * R
    el = ident.elements().set_index("element")
    assert el.loc["Cu", "status"] == "detected" and el.loc["H", "status"] in ("detected", "possible")
    # the matched Balmer peak sits at the vacuum wavelength: 0.18 nm above the air value at 656 nm
    g = ident.lines[ident.lines["line_id"] == "H I 656.279"].iloc[0]
    # the database's air wavelength of the line (ALL v3 levels: 656.27959 nm), on the vacuum axis
    from compquant.atomic import find_line

    lam = float(find_line("H I", 656.279)["wavelength_nm"])
    assert abs(g["wavelength_nm"] - air_to_vacuum(lam)) < 1e-6 and g["peak_id"] >= 0
