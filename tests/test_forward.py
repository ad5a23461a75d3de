"""Forward model of the spectrum on detector pixels, checked against hand-computed LTE values."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants as sc

from compquant.errors import PhysicsError
from compquant.plasma import Instrument, LineSet, SpectrumModel, planck_radiance, saha_ratio, synthesize

KT = sc.k / sc.e  # eV/K (CODATA)
MASSES = {"Cu": 63.546, "Zn": 65.38}  # from memory of IUPAC standard atomic weights


def toy_pf(species, t):
    """Constant partition functions (values chosen for the test, not data)."""
    table = {"Cu I": 2.6, "Cu II": 1.3, "Zn I": 1.05, "Zn II": 2.0}
    return np.full(np.shape(t), table[species])


def toy_ie(species):
    # from memory of NIST ASD: first ionisation energies of Cu and Zn
    return {"Cu I": 7.726380, "Zn I": 9.394197}[species]


def one_line(wl=510.554, stark=0.02, shift=0.002):
    # Cu I 510.554 nm (A, g, E from memory of NIST ASD; Stark values invented for the test)
    return LineSet.from_arrays(
        species=["Cu I"],
        wavelength_nm=[wl],
        aki=[2.0e6],
        gi=[6],
        gk=[4],
        ei_ev=[1.389],
        ek_ev=[3.817],
        mass_u=[63.546],
        stark_w_nm=[stark],
        stark_shift_nm=[shift],
        stark_ne_ref_cm3=[1e17],
    )


def model(lines, wl=None, **kw):
    wl = np.linspace(480.0, 540.0, 2000) if wl is None else wl
    kw.setdefault("partition_function", toy_pf)
    kw.setdefault("ionisation_energy", toy_ie)
    kw.setdefault("masses_u", MASSES)
    return SpectrumModel(Instrument(wl, resolving_power=3000.0), lines, **kw)


def hand_lte_line(t, ne, w_cu, w_zn, length_m):
    """Integrated radiance of Cu I 510.554 computed by hand (W m^-2 sr^-1)."""
    x_cu = (w_cu / 63.546) / (w_cu / 63.546 + w_zn / 65.38)
    x_zn = 1.0 - x_cu
    k = KT * t
    pre = 2 * (2 * math.pi * sc.m_e * sc.k * t / sc.h**2) ** 1.5 * 1e-6  # cm^-3
    r_cu = pre / ne * (1.3 / 2.6) * math.exp(-7.726380 / k)  # Saha, no lowering
    r_zn = pre / ne * (2.0 / 1.05) * math.exp(-9.394197 / k)
    f_cu, f_zn = r_cu / (1 + r_cu), r_zn / (1 + r_zn)  # ionised fractions
    n_h = ne / (x_cu * f_cu + x_zn * f_zn)  # charge neutrality
    n_cu1 = n_h * x_cu * (1 - f_cu)
    n_k = n_cu1 * 4 * math.exp(-3.817 / k) / 2.6 * 1e6  # m^-3
    eps = sc.h * sc.c / 510.554e-9 / (4 * math.pi) * 2.0e6 * n_k
    return eps * length_m


def test_line_intensity_matches_hand_lte_to_1e6():
    t, ne, L = 10000.0, 8e16, 1.5e-3
    # thin lines carry the profile (width, shift) of the nominal conditions: make them these
    m = model(one_line(), continuum=False, lowering=False, nominal_temperature_k=t, nominal_ne_cm3=ne)
    r = m.radiance({"Cu": 0.7, "Zn": 0.3}, t, ne, length_mm=1.5)
    assert r.shape == (1, 2000)
    assert r.sum() == pytest.approx(hand_lte_line(t, ne, 0.7, 0.3, L), rel=1e-6)
    # the line sits where it should (table wavelength + Stark shift) with the instrument width
    wl = m.instrument.wavelength_nm
    centroid = (r[0] * wl).sum() / r[0].sum()
    assert centroid == pytest.approx(510.554 + 0.002 * 0.8, abs=2e-4)


def test_line_intensity_per_shot_vector():
    t = np.array([9000.0, 10000.0, 11000.0])
    ne = np.array([5e16, 8e16, 1.2e17])
    m = model(one_line(), continuum=False, lowering=False)
    r = m.radiance({"Cu": 0.6, "Zn": 0.4}, t, ne, length_mm=1.0)
    for i in range(3):
        assert r[i].sum() == pytest.approx(hand_lte_line(t[i], ne[i], 0.6, 0.4, 1e-3), rel=1e-6)


def test_two_lines_ratio_is_boltzmann():
    # Cu I 510.554 and 521.820 (from memory of NIST ASD): pixel-summed ratio = Boltzmann ratio by hand
    lines = LineSet.from_arrays(
        species=["Cu I", "Cu I"],
        wavelength_nm=[510.554, 521.820],
        aki=[2.0e6, 7.5e7],
        gi=[6, 4],
        gk=[4, 6],
        ei_ev=[1.389, 3.817],
        ek_ev=[3.817, 6.192],
        mass_u=[63.546, 63.546],
    )
    wl = np.linspace(500, 530, 3000)
    t = 9500.0
    m = model(lines, wl=wl, continuum=False)
    r = m.radiance({"Cu": 1.0}, t, 7e16)[0]
    mid = np.searchsorted(wl, 516.0)
    ratio = r[:mid].sum() / r[mid:].sum()
    hand = (521.820 / 510.554) * (2.0e6 * 4) / (7.5e7 * 6) * math.exp(-(3.817 - 6.192) / (KT * t))
    assert ratio == pytest.approx(hand, rel=1e-6)


def test_chunking_and_synthesize_agree():
    t = np.linspace(9000, 11000, 7)
    ne = np.linspace(6e16, 1e17, 7)
    nom = {"nominal_temperature_k": 10000.0, "nominal_ne_cm3": 8e16}  # = means of t and ne (synthesize)
    a = model(one_line(), chunk_shots=2, **nom).radiance({"Cu": 1.0}, t, ne)
    b = model(one_line(), chunk_shots=64, **nom).radiance({"Cu": 1.0}, t, ne)
    np.testing.assert_allclose(a, b, rtol=1e-13, atol=0)
    c = synthesize(
        np.linspace(480.0, 540.0, 2000),
        {"Cu": 1.0},
        t,
        ne,
        resolving_power=3000.0,
        lines=one_line(),
        partition_function=toy_pf,
        ionisation_energy=toy_ie,
        masses_u=MASSES,
    )
    np.testing.assert_allclose(c, a, rtol=1e-12)


def test_self_absorption_thin_limit_and_planck_limit():
    # upper level made consistent with the photon energy so that Kirchhoff's law holds exactly
    lines = LineSet.from_arrays(
        species=["Cu I"],
        wavelength_nm=[510.554],
        aki=[2.0e6],
        gi=[6],
        gk=[4],
        ei_ev=[1.389],
        ek_ev=[1.389 + sc.h * sc.c / 510.554e-9 / sc.e],
        mass_u=[63.546],
        stark_w_nm=[0.02],
        stark_ne_ref_cm3=[1e17],
    )
    wl = np.linspace(505.0, 516.0, 1100)
    thin = model(lines, wl=wl, continuum=False, self_absorption=False)
    slab = model(lines, wl=wl, continuum=False, self_absorption=True, thin_tau=0.0)  # always the slab path
    comp = {"Cu": 1.0}
    # trace amount of a thin line: slab = thin
    tau = slab.line_centre_optical_depth({"Cu": 1.0}, 1e4, 1e17, 1e-6)
    assert tau[0, 0] < 1e-4
    a = thin.radiance(comp, 1e4, 1e17, length_mm=1e-6)
    b = slab.radiance(comp, 1e4, 1e17, length_mm=1e-6)
    assert b.sum() == pytest.approx(a.sum(), rel=1e-4)  # 1 - tau/2 correction
    # very long slab: the line centre reaches the black body B_lambda(T); use a wide,
    # instrument-free-like check on the fine cells
    st = slab.lte_state(comp, np.array([1e4]), np.array([1e17]))
    cells = slab._cell_radiance(st, 1e3)  # 1 km slab, tau >> 1 at the core
    j0, j1 = slab.window[0]
    core = np.argmin(np.abs(slab.cell_mid - 510.554))
    # eps/kappa is evaluated at the line's wavelength, so compare with B at 510.554 nm
    assert cells[0, core] == pytest.approx(planck_radiance(510.554, 1e4), rel=1e-9)
    assert np.all(cells[0, j0:j1] <= planck_radiance(510.554, 1e4) * (1 + 1e-9))
    # and self-absorption lowers the integrated line below the thin value at a realistic length
    thick_L = slab.radiance(comp, 1e4, 1e17, length_mm=5.0).sum()
    thin_L = thin.radiance(comp, 1e4, 1e17, length_mm=5.0).sum()
    assert thick_L < thin_L


def test_continuum_adds_smooth_background():
    m0 = model(one_line(), continuum=False)
    m1 = model(one_line(), continuum=True)
    r0 = m0.radiance({"Cu": 1.0}, 1e4, 1e17)[0]
    r1 = m1.radiance({"Cu": 1.0}, 1e4, 1e17)[0]
    d = r1 - r0
    assert np.all(d[5:-5] > 0)
    # Kramers: per-nm continuum ~ 1/lambda^2 (bracket near 1), per pixel width constant here
    assert d[100] / d[-100] == pytest.approx(
        (m1.instrument.wavelength_nm[-100] / m1.instrument.wavelength_nm[100]) ** 2, rel=0.02
    )


def test_saha_consistency_in_model():
    m = model(one_line())
    st = m.lte_state({"Cu": 1.0}, 1e4, 1e17)
    r = st.densities["Cu II"] / st.densities["Cu I"]
    from compquant.plasma import ionisation_lowering_ev

    assert r == pytest.approx(saha_ratio(1e4, 1e17, 2.6, 1.3, 7.726380 - ionisation_lowering_ev(1e4, 1e17)))


def test_bad_instrument():
    with pytest.raises(PhysicsError):
        Instrument(np.array([1.0, 1.0, 2.0]), resolving_power=1000)
    with pytest.raises(PhysicsError):
        Instrument(np.linspace(1, 2, 10))
    with pytest.raises(PhysicsError):
        LineSet.from_arrays(
            species=["Cu"], wavelength_nm=[1], aki=[1], gi=[1], gk=[1], ei_ev=[0], ek_ev=[1], mass_u=[1]
        )


def test_observed_width_is_voigt_of_doppler_instrument_and_stark():
    # Gaussian widths add in quadrature (Doppler and instrument), the Lorentzian Stark width
    # combines by Olivero & Longbothum 1977; measured on a finely sampled thin line
    lines = one_line(stark=0.3, shift=0.0)
    wl = np.linspace(507.0, 514.0, 3501)  # 0.002 nm pixels
    m = SpectrumModel(
        Instrument(wl, fwhm_nm=0.05, oversample=2),
        lines,
        continuum=False,
        partition_function=toy_pf,
        ionisation_energy=toy_ie,
        masses_u=MASSES,
    )
    t, ne = 10000.0, 1e17
    r = m.radiance({"Cu": 1.0}, t, ne)[0]
    half = r.max() / 2
    above = np.flatnonzero(r >= half)
    lo, hi = above[0], above[-1]
    left = np.interp(half, [r[lo - 1], r[lo]], [wl[lo - 1], wl[lo]])
    right = np.interp(half, [r[hi + 1], r[hi]], [wl[hi + 1], wl[hi]])
    from compquant.plasma import doppler_fwhm, voigt_fwhm

    wg = math.hypot(doppler_fwhm(510.554, t, 63.546), 0.05)
    assert right - left == pytest.approx(voigt_fwhm(wg, 0.3), rel=5e-3)


def test_stark_ne_exponent():
    from compquant.plasma import stark_fwhm

    # Balmer-type scaling w ~ n_e^0.68 (exponent from the line list)
    assert stark_fwhm(1.0, 2e17, 1e17, ne_exponent=0.68) == pytest.approx(2**0.68)


def test_with_shipped_atomic_data_pure_copper():
    # Cu I 521.820 in pure copper, thin, no continuum, no lowering: pixel sum = hand LTE value
    # computed with the shipped partition functions and ionisation energy (compquant.atomic)
    from compquant.atomic import element, ionisation_energy, partition_function
    from compquant.plasma import default_lines

    # only the one line (the published database also holds Cu I 520.092 and 522.007 nearby)
    lines = default_lines(521.81, 521.83, elements=["Cu"])
    assert "Cu I 521.820" in lines.line_id
    wl = np.linspace(515.0, 530.0, 1500)
    m = SpectrumModel(Instrument(wl, resolving_power=3000.0), lines, continuum=False, lowering=False)
    t, ne, L = 9500.0, 7e16, 5e-4
    r = m.radiance({"Cu": 1.0}, t, ne, length_mm=0.5)[0]
    j = lines.line_id.index("Cu I 521.820")
    k = KT * t
    u1, u2 = float(partition_function("Cu I", t)), float(partition_function("Cu II", t))
    ratio = (
        2
        * (2 * math.pi * sc.m_e * sc.k * t / sc.h**2) ** 1.5
        * 1e-6
        / ne
        * u2
        / u1
        * math.exp(-ionisation_energy("Cu I") / k)
    )
    n_cu1 = ne / ratio  # pure copper: n(Cu II) = n_e
    eps = (
        sc.h
        * sc.c
        / (lines.wavelength_nm[j] * 1e-9)
        / (4 * math.pi)
        * lines.aki[j]
        * n_cu1
        * 1e6
        * lines.gk[j]
        * math.exp(-lines.ek_ev[j] / k)
        / u1
    )
    window = np.abs(wl - 521.82) < 1.2
    others = [i for i, w in enumerate(lines.wavelength_nm) if abs(w - 521.82) < 3 and i != j]
    assert not others  # isolated in this window
    assert r[window].sum() == pytest.approx(eps * L, rel=1e-6)
    assert element("Cu").mass_u == pytest.approx(63.546, abs=1e-3)


def test_thin_threshold_switches_paths_consistently():
    # the slab path (thin_tau=0) and the thin path agree for a weak line; a strong one is thick
    wl = np.linspace(505.0, 516.0, 1100)
    kw = {"wl": wl, "continuum": False, "nominal_temperature_k": 1e4, "nominal_ne_cm3": 1e17}
    slab = model(one_line(), self_absorption=True, thin_tau=0.0, **kw)
    thin = model(one_line(), self_absorption=False, **kw)
    auto = model(one_line(), self_absorption=True, **kw)
    st = auto.lte_state({"Cu": 1.0}, np.array([1e4]), np.array([1e17]))
    assert not auto.thick_lines(st, 1e-9).any()
    assert auto.thick_lines(st, 5e-3).all()
    a = slab.radiance({"Cu": 1.0}, 1e4, 1e17, length_mm=1e-6)
    b = thin.radiance({"Cu": 1.0}, 1e4, 1e17, length_mm=1e-6)
    assert np.abs(a - b).max() <= 1e-3 * b.max()  # same shape, through either path
    assert a.sum() == pytest.approx(b.sum(), rel=1e-4)


# ----------------------------------------------------------------------------- line wings
def test_voigt_tail_matches_quadrature_of_scipy_voigt_profile():
    # reference: scipy.integrate.quad of scipy.special.voigt_profile (a unit-area profile,
    # scipy documentation), out to infinity; Gaussian-only: the normal tail Phi(-x/sigma)
    from scipy.integrate import quad
    from scipy.special import ndtr, voigt_profile

    from compquant.plasma.forward import voigt_tail

    for s in (1e-3, 4e-3):
        for g in (0.0, 1e-5, 2e-4, 1e-3, 1e-2):
            for x in (-0.01, 0.0, 1e-3, 7.9 * s, 8.1 * s, 0.05, 0.6, 5.0, 40.0):
                if g == 0.0:
                    ref = ndtr(-x / s)
                else:
                    a, sg = abs(x), (s, g)
                    one = quad(voigt_profile, a, a + 1.0, args=sg, limit=500, epsabs=1e-14)[0]
                    one += quad(voigt_profile, a + 1.0, np.inf, args=sg, epsabs=1e-14)[0]
                    ref = one if x >= 0 else 1.0 - one
                assert float(voigt_tail(x, s, g)) == pytest.approx(ref, abs=1e-12), (s, g, x)


def test_default_wings_are_the_stated_cut():
    # the default is the cut at +-max(25 FWHM, 0.3 nm) (the demo runs; their bit-for-bit check
    # against the stored runs is tests/test_simulate.py::test_demo_runs_regenerate_identically)
    kw = {"continuum": False, "nominal_temperature_k": 1e4, "nominal_ne_cm3": 1e17}
    a = model(one_line(), **kw)
    b = model(one_line(), wing_cut_fwhm=25.0, wing_min_nm=0.3, **kw)
    ra = a.radiance({"Cu": 1.0}, [9e3, 1e4], [8e16, 1e17])
    np.testing.assert_array_equal(ra, b.radiance({"Cu": 1.0}, [9e3, 1e4], [8e16, 1e17]))
    # window edges: 25 Voigt FWHM (Olivero-Longbothum of Doppler and Stark) from the centre
    from compquant.plasma.profiles import voigt_fwhm

    wg, wl, sh = a._broadening(a.lines, slice(None), 1e4, 1e17, shift=True)
    half = 25.0 * voigt_fwhm(wg, wl)[0]
    assert half > 0.3
    lo, hi = a._window_edges[0]
    c = 510.554 + sh[0]
    assert c - lo == pytest.approx(half, abs=a.cell_width.max())
    assert hi - c == pytest.approx(half, abs=a.cell_width.max())
    wide = model(one_line(), wing_cut_fwhm=50.0, **kw)
    assert wide._window_edges[0, 1] - wide._window_edges[0, 0] > 1.9 * (hi - lo)
    with pytest.raises(PhysicsError, match="wing_tail_fraction"):
        model(one_line(), wing_tail_fraction=0.0)
    with pytest.raises(PhysicsError, match="wing_cut_fwhm"):
        model(one_line(), wing_cut_fwhm=-1.0)


@pytest.mark.parametrize("delta", [1e-3, 1e-4])
def test_complete_wings_keep_the_line_area_and_the_lorentzian_wing(delta):
    # one line, Stark FWHM 0.02 nm at 1e17 cm^-3, in a 60 nm detector
    from scipy.integrate import quad
    from scipy.special import voigt_profile

    kw = {"continuum": False, "nominal_temperature_k": 1e4, "nominal_ne_cm3": 1e17}
    wl = np.linspace(480.0, 540.0, 4000)
    full = model(one_line(), wl=wl, wing_tail_fraction=delta, **kw)
    cut = model(one_line(), wl=wl, **kw)
    st = full.lte_state({"Cu": 1.0}, np.array([1e4]), np.array([1e17]))
    eps, _ = full.line_quantities(st)
    length_m = 1e-3
    emitted = eps[0, 0] * length_m  # the line's total emitted radiance (W m^-2 sr^-1)
    r_full = full.radiance({"Cu": 1.0}, 1e4, 1e17, length_mm=1.0)[0]
    r_cut = cut.radiance({"Cu": 1.0}, 1e4, 1e17, length_mm=1.0)[0]
    wg, wlor, sh = full._broadening(full.lines, slice(None), 1e4, 1e17, shift=True)
    s, g, c = wg[0] * 0.5 / math.sqrt(2 * math.log(2)), 0.5 * wlor[0], 510.554 + sh[0]
    # window from the Lorentzian tail formula: x = gamma cot(pi delta / 2)
    # (1e-4: 64 nm, bounded by the fine grid, which ends 1 nm + 6 instrument sigma past the pixels)
    a, b = full._window_edges[0]
    x_delta = g / math.tan(0.5 * math.pi * delta)
    grid_lo = full.cell_mid[0] - 0.5 * full.cell_width[0]
    grid_hi = full.cell_mid[-1] + 0.5 * full.cell_width[-1]
    assert a == pytest.approx(max(c - x_delta, grid_lo), abs=full.cell_width.max())
    assert b == pytest.approx(min(c + x_delta, grid_hi), abs=full.cell_width.max())
    clipped = c - x_delta < grid_lo
    # area inside the window by quadrature of the unit-area scipy Voigt profile (scipy docs)
    f = lambda u: voigt_profile(u - c, s, g)  # noqa: E731
    inside = sum(
        quad(f, lo, hi, limit=400, points=[c] if lo < c < hi else None, epsabs=1e-13)[0]
        for lo, hi in ((a, c - 1.0), (c - 1.0, c + 1.0), (c + 1.0, b))
    )
    if not clipped:
        assert 1.0 - inside == pytest.approx(delta, rel=2e-3)  # what is left outside is delta
    else:
        assert 1.0 - inside > delta  # the wing beyond the grid is lost too (here 2e-4)
    # the pixels hold exactly the emitted area inside the window (the pixel matrix conserves it);
    # a window reaching past the pixels: the area over the pixel range (the light of the grid's
    # extension that the instrument function spills in balances what it spills out)
    if not clipped:
        assert r_full.sum() == pytest.approx(emitted * inside, rel=1e-9)
    else:
        pe = full.instrument.pixel_edges
        on_pixels = quad(f, pe[0], c - 1.0, limit=400)[0] + quad(f, c - 1.0, c + 1.0, limit=400, points=[c])[0]
        on_pixels += quad(f, c + 1.0, pe[-1], limit=400)[0]
        assert r_full.sum() == pytest.approx(emitted * on_pixels, rel=1e-7)
    if not clipped:
        assert 0.0 < 1.0 - r_full.sum() / emitted <= delta * 1.002  # the line's area less <= delta
    # the cut model moves the wing beyond +-max(25 FWHM, 0.3 nm) into the window: area emitted
    assert r_cut.sum() == pytest.approx(emitted, rel=1e-8)
    # far wing, 1.5-5 nm from the line (>> instrument sigma 0.072 nm at R = 3000): the physical
    # Voigt (the Gaussian instrument changes a 1/x^2 wing by about 3 sigma^2/x^2 < 0.7 %)
    pw = np.diff(full.instrument.pixel_edges)
    far = (np.abs(wl - c) > 1.5) & (np.abs(wl - c) < 5.0)
    np.testing.assert_allclose(r_full[far] / pw[far], emitted * voigt_profile(wl[far] - c, s, g), rtol=8e-3)
    assert np.all(r_cut[far] == 0.0)  # the cut wing is missing there


def test_complete_wings_slab_thin_limit_matches_the_thin_path():
    # the slab path (thin_tau = 0) scales each shot's profile to the same analytic window area
    kw = {"continuum": False, "nominal_temperature_k": 1e4, "nominal_ne_cm3": 1e17, "wing_tail_fraction": 1e-3}
    wl = np.linspace(495.0, 526.0, 3100)
    slab = model(one_line(), wl=wl, self_absorption=True, thin_tau=0.0, **kw)
    thin = model(one_line(), wl=wl, **kw)
    t, ne = np.array([9.5e3, 1e4, 1.05e4]), np.array([9e16, 1e17, 1.1e17])
    a = slab.radiance({"Cu": 1.0}, t, ne, length_mm=1e-6)
    b = thin.radiance({"Cu": 1.0}, t, ne, length_mm=1e-6)
    # per shot the areas agree to the 1 - tau/2 slab correction (tau < 1e-4) plus the shot's
    # own dropped wing (delta scaled by its n_e, against the nominal width of the thin path)
    np.testing.assert_allclose(a.sum(axis=1), b.sum(axis=1), rtol=2e-4)
    assert np.abs(a[1] - b[1]).max() <= 1e-3 * b[1].max()
