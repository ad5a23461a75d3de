"""Checks of compquant.plasma against outside sources (CODATA via scipy.constants, scipy, handbooks)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants as sc
from scipy import integrate, optimize

from compquant.errors import PhysicsError
from compquant.plasma import (
    KRAMERS_C1,
    SAHA_PREFACTOR_CM3,
    boltzmann_factor,
    continuum_emissivity,
    debye_length_m,
    doppler_fwhm,
    gaussian,
    ionisation_lowering_ev,
    line_absorption_integrated,
    line_emissivity,
    line_emissivity_lte,
    lorentzian,
    mass_to_number_fractions,
    number_to_mass_fractions,
    planck_radiance,
    population_ratio,
    saha_ratio,
    self_absorption_coefficient,
    slab_radiance,
    solve_lte,
    stark_fwhm,
    voigt,
    voigt_fwhm,
)

# Hydrogen ionisation energy from the CODATA Rydberg constant with the reduced-mass
# correction: E_H = R_inf h c * m_p/(m_p + m_e) (CODATA via scipy.constants).
E_H_EV = sc.Rydberg * sc.h * sc.c / sc.e * sc.m_p / (sc.m_p + sc.m_e)


def toy_pf(species, t):
    """Ground-state-only partition functions for hydrogen (U_I = 2, U_II = 1; textbook values)."""
    table = {"H I": 2.0, "H II": 1.0, "X I": 5.0, "X II": 3.0, "Y I": 1.0, "Y II": 2.0}
    return np.full(np.shape(t), table[species])


def toy_ie(species):
    return {"H I": E_H_EV, "X I": 7.0, "Y I": 9.0}[species]


# --------------------------------------------------------------------------- constants / Saha
def test_saha_prefactor_hand_calculation():
    # hand calculation of 2 (2 pi m_e k / h^2)^(3/2) with CODATA values (scipy.constants), in cm^-3
    # m_e typed from memory of CODATA 2018 (k and h are exact SI values); scipy may carry CODATA 2022
    me, k, h = 9.1093837015e-31, 1.380649e-23, 6.62607015e-34
    hand = 2.0 * (2.0 * math.pi * me * k / h**2) ** 1.5 * 1e-6
    assert SAHA_PREFACTOR_CM3 == pytest.approx(hand, rel=1e-8)
    # from memory of Griem 1964 / Cremers & Radziemski: 4.83e15 cm^-3 K^-3/2
    assert SAHA_PREFACTOR_CM3 == pytest.approx(4.83e15, rel=1e-3)


def test_wavenumber_and_wavelength_energy_conversions():
    from compquant.plasma.constants import CM1_TO_EV, HC_EV_NM

    # CODATA "inverse meter-electron volt relationship" (scipy.constants.physical_constants): 1 m^-1 in eV;
    # h, c and e are exact in the SI since 2019, so the listed value is h c / e itself
    per_m = sc.physical_constants["inverse meter-electron volt relationship"][0]
    assert CM1_TO_EV == pytest.approx(100.0 * per_m, rel=1e-15)
    assert HC_EV_NM == pytest.approx(1e9 * per_m, rel=1e-15)
    # from memory of the NIST ASD: 1 eV = 8065.544 cm^-1
    assert 1.0 / CM1_TO_EV == pytest.approx(8065.544, abs=1e-3)


def test_hydrogen_ionisation_energy_from_rydberg():
    # from memory of NIST ASD: ionisation energy of H 13.598434 eV; the Bohr formula with reduced
    # mass omits relativistic and QED terms (~1.5e-4 eV)
    assert E_H_EV == pytest.approx(13.598434, abs=2e-4)


def test_saha_ratio_hydrogen_hand_calculation():
    # hydrogen at T = 10,000 K, n_e = 1e17 cm^-3; U(H I) = 2, U(H II) = 1; hand calculation from CODATA
    t, ne = 10000.0, 1e17
    lam_term = (2 * math.pi * sc.m_e * sc.k * t / sc.h**2) ** 1.5 * 1e-6  # cm^-3
    hand = 2 * (1.0 / 2.0) * lam_term / ne * math.exp(-E_H_EV * sc.e / (sc.k * t))
    got = saha_ratio(t, ne, 2.0, 1.0, E_H_EV)
    assert got == pytest.approx(hand, rel=1e-12)
    # hand arithmetic: 2.415e15 * 1e6 / 1e17 * exp(-15.78) = 3.4e-3
    assert 3.3e-3 < got < 3.5e-3


def test_debye_length_vs_nrl_formulary():
    # from memory of the NRL Plasma Formulary: lambda_D = 7.43e2 T_eV^1/2 n_e^-1/2 cm
    t, ne = 10000.0, 1e17
    t_ev = sc.k * t / sc.e
    nrl_m = 7.43e2 * math.sqrt(t_ev) / math.sqrt(ne) * 1e-2
    assert debye_length_m(t, ne) == pytest.approx(nrl_m, rel=2e-3)


def test_ionisation_lowering_hand_formula():
    # Debye-Hueckel lowering dE = z e^2 / (4 pi eps0 lambda_D) (Griem 1964), hand calculation with CODATA
    t, ne = 9000.0, 5e16
    lam = math.sqrt(sc.epsilon_0 * sc.k * t / (ne * 1e6 * sc.e**2))
    hand_ev = sc.e / (4 * math.pi * sc.epsilon_0 * lam)
    assert ionisation_lowering_ev(t, ne) == pytest.approx(hand_ev, rel=1e-12)
    assert ionisation_lowering_ev(t, ne, charge_produced=2) == pytest.approx(2 * hand_ev, rel=1e-12)


# --------------------------------------------------------------------------- LTE solver
def test_lte_pure_hydrogen_matches_saha_and_neutrality():
    t = np.array([8000.0, 10000.0, 12000.0])
    ne = np.array([1e16, 1e17, 5e17])
    st = solve_lte(t, ne, {"H": 1.0}, partition_function=toy_pf, ionisation_energy=toy_ie, lowering=False)
    # pure hydrogen: n_e = n(H II), and n(H II)/n(H I) is the Saha ratio
    np.testing.assert_allclose(st.densities["H II"], ne, rtol=1e-12)
    np.testing.assert_allclose(
        st.densities["H II"] / st.densities["H I"], saha_ratio(t, ne, 2.0, 1.0, E_H_EV), rtol=1e-12
    )


def test_lte_charge_neutrality_and_number_fractions():
    t = np.linspace(7000, 14000, 9)
    ne = np.geomspace(1e16, 3e17, 9)
    x = {"X": 0.7, "Y": 0.2, "H": 0.1}
    for lowering in (False, True):
        st = solve_lte(t, ne, x, partition_function=toy_pf, ionisation_energy=toy_ie, lowering=lowering)
        np.testing.assert_allclose(st.charge_density(), ne, rtol=1e-12)  # sum_z (z-1) n_z = n_e
        total = sum(st.element_density(e) for e in x)
        for e, v in x.items():
            np.testing.assert_allclose(st.element_density(e) / total, v, rtol=1e-12)


def test_lowering_increases_ionisation():
    kw = {"partition_function": toy_pf, "ionisation_energy": toy_ie}
    a = solve_lte(10000.0, 1e17, {"X": 1.0}, lowering=False, **kw)
    b = solve_lte(10000.0, 1e17, {"X": 1.0}, lowering=True, **kw)
    ratio_a = a.densities["X II"] / a.densities["X I"]
    ratio_b = b.densities["X II"] / b.densities["X I"]
    # exp(dE/kT) factor, dE from the Debye-Hueckel formula
    assert ratio_b / ratio_a == pytest.approx(math.exp(ionisation_lowering_ev(1e4, 1e17) / (sc.k * 1e4 / sc.e)))


def test_lte_rejects_bad_input():
    with pytest.raises(PhysicsError):
        solve_lte(-1.0, 1e17, {"H": 1.0}, partition_function=toy_pf, ionisation_energy=toy_ie)
    with pytest.raises(PhysicsError):
        solve_lte(1e4, 1e17, {"H": 0.0}, partition_function=toy_pf, ionisation_energy=toy_ie)


def test_mass_number_fraction_conversion():
    # brass Cu 70 / Zn 30 by mass with atomic masses from periodictable (outside reference)
    import periodictable as pt

    m = {"Cu": pt.Cu.mass, "Zn": pt.Zn.mass}
    x = mass_to_number_fractions({"Cu": 0.70, "Zn": 0.30}, m)
    hand_cu = (0.70 / pt.Cu.mass) / (0.70 / pt.Cu.mass + 0.30 / pt.Zn.mass)
    assert x["Cu"] == pytest.approx(hand_cu, rel=1e-12)
    w = number_to_mass_fractions(x, m)
    assert w["Cu"] == pytest.approx(0.70, rel=1e-12)


# --------------------------------------------------------------------------- Boltzmann / emission
def test_two_line_intensity_ratio_vs_boltzmann_by_hand():
    # two lines of one species (Cu I 510.554 and 521.820 nm; A, g, E typed from memory of NIST ASD):
    # I1/I2 = (lambda2/lambda1) (A1 g1 / A2 g2) exp(-(E1 - E2)/kT) in energy units, computed by hand
    t, ns, u = 10000.0, 1e16, 2.6
    l1, a1, g1, e1 = 510.554, 2.0e6, 4, 3.817
    l2, a2, g2, e2 = 521.820, 7.5e7, 6, 6.192
    i1 = line_emissivity_lte(l1, a1, g1, e1, ns, u, t)
    i2 = line_emissivity_lte(l2, a2, g2, e2, ns, u, t)
    kt = sc.k * t / sc.e
    hand = (l2 / l1) * (a1 * g1) / (a2 * g2) * math.exp(-(e1 - e2) / kt)
    assert i1 / i2 == pytest.approx(hand, rel=1e-12)
    assert population_ratio(g1, e1, g2, e2, t) == pytest.approx(g1 / g2 * math.exp(-(e1 - e2) / kt))
    assert boltzmann_factor(g1, e1, t) == pytest.approx(g1 * math.exp(-e1 / kt))


def test_line_emissivity_units():
    # eps = (h c / lambda) / (4 pi) A n_k; hand calculation with CODATA, n in m^-3
    lam, a, nk = 500.0, 1e7, 1e12  # nm, s^-1, cm^-3
    hand = sc.h * sc.c / (lam * 1e-9) / (4 * math.pi) * a * nk * 1e6
    assert line_emissivity(lam, a, nk) == pytest.approx(hand, rel=1e-12)


def test_planck_integral_is_stefan_boltzmann():
    # integral of B_lambda over lambda = sigma T^4 / pi (Stefan-Boltzmann law, CODATA sigma)
    t = 9000.0
    val, _ = integrate.quad(lambda lam: planck_radiance(lam, t), 10.0, 1e6, limit=400, points=[200, 500, 2000])
    assert val == pytest.approx(sc.Stefan_Boltzmann * t**4 / math.pi, rel=1e-5)


def test_kirchhoff_line_source_function_is_planck():
    # in LTE eps_lambda / kappa_lambda = B_lambda(T) (Kirchhoff's law)
    t, ns, u = 11000.0, 3e15, 2.4
    lam, a, gi, gk, ei = 324.754, 1.39e8, 2, 4, 0.0
    ek = ei + sc.h * sc.c / (lam * 1e-9) / sc.e  # upper level consistent with the wavelength
    eps = line_emissivity_lte(lam, a, gk, ek, ns, u, t)  # W m^-3 sr^-1
    ni = ns * gi * math.exp(-ei / (sc.k * t / sc.e)) / u
    kap = line_absorption_integrated(lam, a, gi, gk, ni, t)  # m^-1 nm
    assert eps / kap == pytest.approx(planck_radiance(lam, t), rel=1e-10)


# --------------------------------------------------------------------------- profiles
@pytest.mark.parametrize("wg,wl", [(0.01, 0.0), (0.0, 0.02), (0.01, 0.02), (0.05, 0.005)])
def test_voigt_area_is_one(wg, wl):
    # area = 1 by numerical integration (scipy.integrate.quad)
    area, _ = integrate.quad(lambda x: voigt(x, 0.0, wg, wl), -np.inf, np.inf, limit=500)
    assert area == pytest.approx(1.0, abs=1e-7)


@pytest.mark.parametrize("ratio", [0.0, 0.2, 1.0, 3.0, 20.0])
def test_voigt_fwhm_vs_olivero_longbothum(ratio):
    # numerically measured FWHM vs Olivero & Longbothum 1977 (JQSRT 17, 233): stated accuracy 0.02 %
    wg = 0.02
    wl = ratio * wg
    peak = voigt(0.0, 0.0, wg, wl)
    half = optimize.brentq(lambda x: voigt(x, 0.0, wg, wl) - 0.5 * peak, 0.0, 10 * (wg + wl))
    assert 2 * half == pytest.approx(voigt_fwhm(wg, wl), rel=2.5e-4)


def test_gaussian_and_lorentzian_limits():
    x = np.linspace(-0.3, 0.3, 101)
    np.testing.assert_allclose(voigt(x, 0.0, 0.05, 0.0), gaussian(x, 0.0, 0.05), rtol=1e-10)
    np.testing.assert_allclose(voigt(x, 0.0, 0.0, 0.05), lorentzian(x, 0.0, 0.05), rtol=1e-10)
    assert gaussian(0.025, 0.0, 0.05) == pytest.approx(0.5 * gaussian(0.0, 0.0, 0.05))
    assert lorentzian(0.025, 0.0, 0.05) == pytest.approx(0.5 * lorentzian(0.0, 0.0, 0.05))


def test_doppler_width_formula_codata():
    # H alpha at 10,000 K: lambda sqrt(8 k T ln2 / (m c^2)) with CODATA k, c, u; m(H) = 1.00794 u
    lam, t, m = 656.279, 10000.0, 1.00794
    hand = lam * math.sqrt(8 * sc.k * t * math.log(2) / (m * sc.atomic_mass * sc.c**2))
    assert doppler_fwhm(lam, t, m) == pytest.approx(hand, rel=1e-12)
    # from memory of Griem 1964 / common practice: 7.16e-7 lambda sqrt(T/M)
    assert doppler_fwhm(lam, t, m) == pytest.approx(7.16e-7 * lam * math.sqrt(t / m), rel=1e-3)


def test_stark_width_linear_in_ne():
    assert stark_fwhm(0.01, 2e17, 1e17) == pytest.approx(0.02)
    assert stark_fwhm(0.01, 5e16, 1e16) == pytest.approx(0.05)
    assert stark_fwhm(np.nan, 1e17, 1e17) == 0.0
    # (T/T_ref)^a scaling when an exponent is given
    assert stark_fwhm(0.01, 1e17, 1e17, 20000.0, 10000.0, -0.5) == pytest.approx(0.01 / math.sqrt(2))


# --------------------------------------------------------------------------- continuum / slab
def test_kramers_constant():
    # from memory of Cremers & Radziemski, Handbook of LIBS: C1 = 1.632e-43 W m^4 K^1/2 sr^-1
    assert pytest.approx(1.632e-43, rel=2e-3) == KRAMERS_C1


def test_continuum_scaling():
    # eps_c proportional to n_e n_i / sqrt(T) / lambda^2 at xi = G = 1 (bracket = 1)
    e1 = continuum_emissivity(400.0, 10000.0, 1e17, 1e17)
    assert continuum_emissivity(800.0, 10000.0, 1e17, 1e17) == pytest.approx(e1 / 4)
    assert continuum_emissivity(400.0, 10000.0, 2e17, 2e17) == pytest.approx(4 * e1)
    assert continuum_emissivity(400.0, 40000.0, 1e17, 1e17) == pytest.approx(e1 / 2)
    assert e1 == pytest.approx(KRAMERS_C1 * 1e23 * 1e23 / ((400e-9) ** 2 * 100.0) * 1e-9)


def test_slab_thin_and_planck_limits():
    lam = np.array([300.0, 500.0, 650.0])
    t = 10000.0
    b = planck_radiance(lam, t)
    tau = 1e-7
    np.testing.assert_allclose(slab_radiance(lam, t, tau), b * tau, rtol=1e-6)  # thin: I = eps L = B tau
    np.testing.assert_allclose(slab_radiance(lam, t, 60.0), b, rtol=1e-12)  # thick: I -> B
    assert self_absorption_coefficient(1e-9) == pytest.approx(1.0)
    assert self_absorption_coefficient(1.0) == pytest.approx(1 - math.exp(-1))


def test_bare_nucleus_partition_function_is_one():
    # H II is a bare proton: U = 1 exactly (textbook fact); the shipped H I levels give U(H I) ~ 2
    from compquant.atomic import partition_function

    st = solve_lte(np.array([8000.0, 12000.0]), 1e17, {"H": 1.0}, ionisation_energy=toy_ie, lowering=False)
    np.testing.assert_array_equal(st.partition["H II"], 1.0)
    u1 = partition_function("H I", np.array([8000.0, 12000.0]))
    np.testing.assert_allclose(
        st.densities["H II"] / st.densities["H I"],
        saha_ratio(np.array([8000.0, 12000.0]), 1e17, u1, 1.0, E_H_EV),
        rtol=1e-12,
    )
