"""Self-absorption: optical depth, curve-of-growth factor, detection estimates.

Self-absorption coefficient of a line from a homogeneous slab in LTE (e.g. El Sherbini et
al. 2005, Spectrochim. Acta B 60, 1573; Bulajic et al. 2002, Spectrochim. Acta B 57, 339)::

    SA = I_observed / I_thin = ∫ (1 − e^{−τ(λ)}) dλ / ∫ τ(λ) dλ,     τ(λ) = τ₀ φ(λ)/φ(λ₀)

with φ the Voigt profile of the emitting/absorbing atoms (Doppler ⊕ Stark; the instrument
function does not enter).  For a pure Lorentzian profile this is the Ladenburg–Reiche
function SA = e^{−τ₀/2}[I₀(τ₀/2) + I₁(τ₀/2)] (Ladenburg & Reiche 1913, Ann. Phys. 42, 181),
which the tests use as the outside check of the numerical integral.

Integrated absorption coefficient of a line (Einstein relations, e.g. Thorne, Litzén &
Johansson, *Spectrophysics*, 1999, ch. 9), with stimulated emission::

    ∫κ(λ) dλ = λ⁴/(8π c) · g_k A_ki · (n_s/U_s) e^{−E_i/kT} · (1 − e^{−hc/λkT})

so τ₀ = L · φ(λ₀) · ∫κ dλ for a slab of length L; only the columnar density n_s·L
matters (Cristoforetti & Tognoni 2013, Spectrochim. Acta B 79–80, 63).

Width-based estimate (El Sherbini et al. 2005)::  SA = (Δλ_obs / Δλ_thin)^{1/α}, α = −0.54.

Internal reference line (Sun & Yu 2009, Talanta 79, 388): with a reference line r of the
same species that is nearly thin (high E_i, low g_k A_ki), and the energy-unit convention
I ∝ g_k A_ki/λ · e^{−E_k/kT}::

    SA_j = (I_j / I_r) · (g_r A_r λ_j)/(g_j A_j λ_r) · exp((E_k,j − E_k,r)/kT)
"""

from __future__ import annotations

import math
from collections import OrderedDict

import numpy as np
from scipy.special import dawsn, i0e, i1e, voigt_profile, wofz

from compquant.plasma.constants import KB_EV
from compquant.plasma.emission import line_absorption_integrated
from compquant.plasma.profiles import voigt

EL_SHERBINI_ALPHA = -0.54

# grid on a sinh scale: dense in the core, reaching 10⁴ widths into the wings
# (481 points, exactly symmetric about 0 so the profile is computed on the half x ≥ 0 and mirrored)
_U_HALF = np.linspace(0.0, math.asinh(2.0e4), 241)
_U = np.concatenate([-_U_HALF[:0:-1], _U_HALF])
_XS_HALF = np.sinh(_U_HALF)
_XS = np.sinh(_U)
_DX = np.cosh(_U) * (_U_HALF[1] - _U_HALF[0])
_MID = _U_HALF.size - 1  # column of x = 0 on the whole grid
# weights of a sum over the whole grid of an even function given on x ≥ 0: Δx at 0, 2Δx beyond
_DU_HALF = _DX[_MID:] * np.where(np.arange(_U_HALF.size) == 0, 1.0, 2.0)


def _mirror(half: np.ndarray) -> np.ndarray:
    """Rows given on x ≥ 0 of the grid, extended to the whole (symmetric) grid."""
    return np.concatenate([half[:, :0:-1], half], axis=1)


def sa_lorentz(tau0) -> np.ndarray:
    """Ladenburg–Reiche self-absorption factor of a Lorentzian line of peak optical depth τ₀."""
    t = 0.5 * np.asarray(tau0, dtype=float)
    out = i0e(t) + i1e(t)
    return np.where(t > 1e-12, out, 1.0)


def sa_factor(tau0, w_gauss_nm, w_lorentz_nm) -> np.ndarray:
    """SA = ∫(1−e^{−τ})/∫τ for a Voigt profile with FWHMs ``w_gauss_nm`` and ``w_lorentz_nm``.

    Broadcasts over its arguments.  Computed as 1 − ∫(τ − 1 + e^{−τ}) / ∫τ, whose
    integrand falls as the square of the profile in the wings, on a sinh-spaced grid.
    """
    tau0, wg, wl = np.broadcast_arrays(
        np.asarray(tau0, dtype=float), np.asarray(w_gauss_nm, dtype=float),
        np.asarray(w_lorentz_nm, dtype=float))
    shape = tau0.shape
    t0 = tau0.ravel()
    wg = np.maximum(wg.ravel(), 1e-12)
    wl = np.maximum(wl.ravel(), 0.0)
    out = np.ones_like(t0)
    todo = t0 > 1e-9
    if np.any(todo):
        phi, dx, phi0 = _profile_on_grid(wg[todo], wl[todo])
        # φ is mirrored about x = 0, so τ and g are too: evaluate them on x ≥ 0 and mirror
        # (elementwise, so the same numbers as on the whole grid, summed in the same order)
        tau = t0[todo][:, None] * phi[:, _MID:] / phi0[:, None]
        g = _mirror(tau + np.expm1(-tau))  # τ − 1 + e^{−τ} ≥ 0
        num = np.sum(g * dx, axis=1)
        den = t0[todo] / phi0  # ∫τ dλ exactly, φ normalised
        out[todo] = 1.0 - num / den
    return np.clip(out, 0.0, 1.0).reshape(shape)


def dln_sa_dln_tau0(tau0, w_gauss_nm, w_lorentz_nm) -> np.ndarray:
    """Logarithmic slope ∂ln SA/∂ln τ₀ of :func:`sa_factor` at fixed widths (per line, 1-D).

    Exact derivative of the same discrete integral (the sinh grid and the profile depend on the
    widths only)::

        SA = 1 − φ₀ N/τ₀,   N = Σ_k g(τ_k) Δx_k,   τ_k = τ₀ φ_k/φ₀,   g(τ) = τ − 1 + e^{−τ}
        N' = ∂N/∂τ₀ = Σ_k (1 − e^{−τ_k}) (φ_k/φ₀) Δx_k
        ∂ln SA/∂ln τ₀ = (τ₀/SA) ∂SA/∂τ₀ = −φ₀ (N' − N/τ₀) / SA

    (dimensionless, ≤ 0; −τ₀/2·… → 0 as τ₀ → 0).  Where :func:`sa_factor` takes its flat
    branches (τ₀ ≤ 10⁻⁹, or SA clipped to 0 or 1) the slope is 0, as is the function's.  The
    tests check it against central finite differences of :func:`sa_factor`.
    """
    t0 = np.asarray(tau0, dtype=float).ravel()
    wg = np.maximum(np.broadcast_to(np.asarray(w_gauss_nm, dtype=float), t0.shape).ravel(), 1e-12)
    wl = np.maximum(np.broadcast_to(np.asarray(w_lorentz_nm, dtype=float), t0.shape).ravel(), 0.0)
    out = np.zeros_like(t0)
    todo = t0 > 1e-9
    if np.any(todo):
        phi, dx, phi0 = _profile_on_grid(wg[todo], wl[todo])
        t = t0[todo]
        ratio = phi[:, _MID:] / phi0[:, None]  # on x ≥ 0, mirrored as in sa_factor
        tau = t[:, None] * ratio
        em1 = np.expm1(-tau)
        num = np.sum(_mirror(tau + em1) * dx, axis=1)
        dnum = np.sum(_mirror(-em1 * ratio) * dx, axis=1)
        sa = 1.0 - num / (t / phi0)
        inside = (sa > 0.0) & (sa < 1.0)
        out[todo] = np.where(inside, -phi0 * (dnum - num / t) / np.where(inside, sa, 1.0), 0.0)
    return out


def sa_slopes(tau0, w_gauss_nm, w_lorentz_nm):
    """Partial derivatives of :func:`sa_factor` and of the profile peak φ(λ₀) (per line, 1-D).

    Returns ``(s_tau, s_g, s_l, p_g, p_l)``: s_tau = ∂ln SA/∂ln τ₀ (:func:`dln_sa_dln_tau0`),
    s_g = ∂ln SA/∂w_G and s_l = ∂ln SA/∂w_L at fixed τ₀ (nm⁻¹), p_g = ∂ln φ₀/∂w_G and
    p_l = ∂ln φ₀/∂w_L (nm⁻¹) of the area-normalised Voigt peak φ₀ = V(0; σ, γ), σ = w_G/(2√(2 ln 2)),
    γ = w_L/2.  Exact derivatives of the same discrete integral as :func:`sa_factor`: with
    P = φ₀ s (s = w_V/2 the grid scale, w_V the Olivero–Longbothum width), ρ_k = φ_k/φ₀ and
    M = Σ_k g(τ₀ ρ_k) Δu_k (Δu the unscaled grid steps), SA = 1 − P M/τ₀, so at fixed τ₀ and w_G::

        ∂SA/∂w_L = −[∂P/∂w_L · M + P Σ_k (1 − e^{−τ_k}) τ₀ ∂ρ_k/∂w_L Δu_k] / τ₀

    with the Voigt derivatives from the Faddeeva function w(z), z = (x + iγ)/(σ√2),
    V = Re w(z)/(σ√(2π)), w′(z) = −2z w(z) + 2i/√π (Abramowitz & Stegun 7.1.20)::

        ∂V/∂x = Re w′(z)/(2σ²√π),   ∂V/∂γ = −Im w′(z)/(2σ²√π)

    and x = u·s moving with the grid (∂s/∂w_L = ½(0.5346 + 0.2166 w_L/√(0.2166 w_L² + w_G²))).
    SA is homogeneous of degree 0 and φ₀ of degree −1 in (w_G, w_L) (both widths scale the grid
    and the profile alike), so by Euler's theorem w_G s_g + w_L s_l = 0 and
    w_G p_g + w_L p_l = −1, which give s_g and p_g.  Where :func:`sa_factor` takes its flat
    branches (τ₀ ≤ 10⁻⁹, SA clipped) s_tau = s_g = s_l = 0.  The tests check every column
    against central finite differences of :func:`sa_factor` and
    :func:`compquant.plasma.profiles.voigt`.
    """
    t0 = np.asarray(tau0, dtype=float).ravel()
    wg = np.maximum(np.broadcast_to(np.asarray(w_gauss_nm, dtype=float), t0.shape).ravel(), 1e-12)
    wl = np.maximum(np.broadcast_to(np.asarray(w_lorentz_nm, dtype=float), t0.shape).ravel(), 0.0)
    s_tau, s_l = np.zeros_like(t0), np.zeros_like(t0)
    sigma = wg / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    gamma = wl / 2.0
    root = np.sqrt(0.2166 * wl**2 + wg**2)
    scale = 0.5 * (0.5346 * wl + root)
    ds_l = 0.5 * (0.5346 + 0.2166 * wl / root)
    todo = t0 > 1e-9
    # the profile and w(z) at the widths of the lines sa_factor integrates (its memo entry)
    phi, _dx, f0, w = _profile_and_faddeeva(wg[todo], wl[todo])
    sg, gm, sc, dsl = sigma[todo], gamma[todo], scale[todo], ds_l[todo]
    z = (_XS_HALF[None, :] * sc[:, None] + 1j * gm[:, None]) / (sg[:, None] * math.sqrt(2.0))
    gauss = gm == 0
    if np.any(gauss):  # pure Gaussian rows: w(x) = e^{−x²} + 2i/√π·D(x) (Dawson's integral)
        w = w.copy()
        zr = z[gauss].real
        w[gauss] = np.exp(-zr * zr) + 2j / math.sqrt(math.pi) * dawsn(zr)
    wp = -2.0 * z * w + 2j / math.sqrt(math.pi)
    c = 1.0 / (2.0 * sg**2 * math.sqrt(math.pi))
    v_x = wp.real * c[:, None]
    v_g = -wp.imag * c[:, None]
    p_l = np.zeros_like(t0)
    p_l[todo] = 0.5 * v_g[:, 0] / f0
    if not np.all(todo):  # φ₀ alone for the lines sa_factor leaves at SA = 1: w at x = 0
        rest = ~todo
        z0 = 1j * gamma[rest] / (sigma[rest] * math.sqrt(2.0))
        w0 = wofz(z0)
        wp0 = -2.0 * z0 * w0 + 2j / math.sqrt(math.pi)
        p_l[rest] = 0.5 * (-wp0.imag / (2.0 * sigma[rest] ** 2 * math.sqrt(math.pi))) / (
            w0.real / (sigma[rest] * _SQRT_2PI))
    p_g = (-1.0 - wl * p_l) / wg
    if np.any(todo):
        t = t0[todo]
        ratio = phi[:, _MID:] / f0[:, None]
        tau = t[:, None] * ratio
        em1 = np.expm1(-tau)
        num = np.sum(_mirror(tau + em1) * _DX[None, :], axis=1)  # M
        dnum = np.sum(_mirror(-em1 * ratio) * _DX[None, :], axis=1)
        sa = 1.0 - f0 * sc * num / t
        inside = (sa > 0.0) & (sa < 1.0)
        safe = np.where(inside, sa, 1.0)
        s_tau[todo] = np.where(inside, -f0 * sc * (dnum - num / t) / safe, 0.0)
        # ∂ρ_k/∂w_L on x ≥ 0; ρ and its derivative are even in x, so the whole grid's sum is the
        # half grid's with the steps of x > 0 counted twice
        dr = (v_x * _XS_HALF[None, :] * dsl[:, None] + 0.5 * v_g) / f0[:, None] - ratio * p_l[todo, None]
        dm = (-em1 * t[:, None] * dr) @ _DU_HALF
        dp = 0.5 * v_g[:, 0] * sc + f0 * dsl
        s_l[todo] = np.where(inside, -(dp * num + f0 * sc * dm) / t / safe, 0.0)
    s_g = -wl * s_l / wg
    return s_tau, s_g, s_l, p_g, p_l


_PROFILE_MEMO: OrderedDict = OrderedDict()
_PROFILE_MEMO_SIZE = 16


def _profile_on_grid(wg: np.ndarray, wl: np.ndarray):
    """φ(x) on the sinh grid, the grid steps dx and φ(0), per line (rows), for Voigt FWHMs
    ``wg`` (Gaussian) and ``wl`` (Lorentzian).

    The profile depends on the widths only, not on τ₀; the self-absorption fit evaluates the same
    widths at every trial step that keeps T and nₑ, so the last few results are kept (exact
    copies of the same computation; read-only arrays).  The grid is symmetric and φ even, so φ is
    computed on x ≥ 0 and mirrored (half the Faddeeva evaluations).
    """
    return _profile_and_faddeeva(wg, wl)[:3]


_INV_SQRT_2 = 0.707106781186547524401
_SQRT_2PI = 2.5066282746310002416123552393401042


def _faddeeva_voigt(x: np.ndarray, s: np.ndarray, g: np.ndarray):
    """``(w(z), V)`` at ``x`` for Gaussian σ ``s`` and Lorentzian γ ``g`` > 0 (columns), with
    z = (x + iγ)/(σ√2) and V = Re w(z)/(σ√(2π)), formed in scipy.special.voigt_profile's order."""
    z = np.empty(x.shape, dtype=complex)
    z.real = x / s * _INV_SQRT_2
    z.imag = g / s * _INV_SQRT_2
    w = wofz(z)
    return w, w.real / s / _SQRT_2PI


def _profile_and_faddeeva(wg: np.ndarray, wl: np.ndarray):
    """:func:`_profile_on_grid`'s ``(φ, dx, φ₀)`` and the Faddeeva function w(z) on x ≥ 0 of the
    grid, z = (x + iγ)/(σ√2), for the rows with a Lorentzian part (NaN on the other rows).

    φ = Re w(z)/(σ√(2π)) is :func:`scipy.special.voigt_profile` (the same Faddeeva evaluation,
    z formed and scaled in the same order, so the same numbers bit for bit; the tests check it),
    so :func:`sa_slopes` needs no second Faddeeva evaluation at the widths of the last SA.  Rows
    with γ = 0 (pure Gaussian) take :func:`scipy.special.voigt_profile` itself, whose Gaussian
    branch numpy's exp does not reproduce to the last bit.
    """
    key = (wg.tobytes(), wl.tobytes())
    hit = _PROFILE_MEMO.get(key)
    if hit is not None:
        _PROFILE_MEMO.move_to_end(key)
        return hit
    wv = 0.5346 * wl + np.sqrt(0.2166 * wl**2 + wg**2)
    sigma = wg / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    gamma = wl / 2.0
    scale = wv[:, None] * 0.5
    # the Voigt profile is even in x: evaluate x ≥ 0 only (φ(0) is its first point) and mirror
    x = _XS_HALF[None, :] * scale
    lor = gamma > 0
    if np.all(lor):  # the usual case: every line has a Lorentzian part
        w, half = _faddeeva_voigt(x, sigma[:, None], gamma[:, None])
    else:
        w = np.full(x.shape, np.nan, dtype=complex)
        half = voigt_profile(x, sigma[:, None], gamma[:, None])
        if np.any(lor):
            w[lor], half[lor] = _faddeeva_voigt(x[lor], sigma[lor, None], gamma[lor, None])
    phi = np.concatenate([half[:, :0:-1], half], axis=1)
    phi0 = half[:, 0].copy()
    out = (phi, _DX[None, :] * scale, phi0, w)
    for a in out:
        a.flags.writeable = False
    _PROFILE_MEMO[key] = out
    if len(_PROFILE_MEMO) > _PROFILE_MEMO_SIZE:
        _PROFILE_MEMO.popitem(last=False)
    return out


def tau0_slab(
    wavelength_nm, gk_aki, ei_ev, T, n_species_cm3, u_species, length_cm, w_gauss_nm, w_lorentz_nm
) -> np.ndarray:
    """Peak optical depth τ₀ of a line from a homogeneous slab (see module docstring).

    n_species in cm⁻³, length in cm, widths (FWHM) in nm; broadcasts.  The integrated
    absorption is :func:`compquant.plasma.emission.line_absorption_integrated` (g_i cancels
    against the lower-level population, so g_k A_ki is passed as one product) and the peak
    of the area-normalised Voigt profile is :func:`compquant.plasma.profiles.voigt` at 0.
    """
    T = np.asarray(T, dtype=float)
    n_low = np.asarray(n_species_cm3, dtype=float) / np.asarray(u_species, dtype=float) * np.exp(
        -np.asarray(ei_ev, dtype=float) / (KB_EV * T))  # n_i / g_i
    k_int = line_absorption_integrated(wavelength_nm, gk_aki, 1.0, 1.0, n_low, T)  # m⁻¹ nm
    wg = np.maximum(np.asarray(w_gauss_nm, dtype=float), 1e-12)
    wl = np.maximum(np.asarray(w_lorentz_nm, dtype=float), 0.0)
    peak = voigt(0.0, 0.0, wg, wl)  # nm⁻¹
    return np.asarray(length_cm, dtype=float) * 1e-2 * k_int * peak


def sa_from_width(w_observed_nm, w_thin_nm, alpha: float = EL_SHERBINI_ALPHA) -> np.ndarray:
    """El Sherbini et al. 2005 estimate SA = (Δλ_obs/Δλ_thin)^{1/α}, clipped to ≤ 1."""
    r = np.asarray(w_observed_nm, dtype=float) / np.asarray(w_thin_nm, dtype=float)
    return np.minimum(r ** (1.0 / alpha), 1.0)


def sa_reference_line(intensity, wavelength_nm, gk_aki, ek_ev, ref_index: int, T: float) -> np.ndarray:
    """Sun & Yu 2009 internal-reference-line SA of each line of one species (SA_ref = 1)."""
    intensity = np.asarray(intensity, dtype=float)
    lam = np.asarray(wavelength_nm, dtype=float)
    ga = np.asarray(gk_aki, dtype=float)
    ek = np.asarray(ek_ev, dtype=float)
    r = ref_index
    return (intensity / intensity[r]) * (ga[r] * lam) / (ga * lam[r]) * np.exp(
        (ek - ek[r]) / (KB_EV * T))


__all__ = [
    "EL_SHERBINI_ALPHA",
    "dln_sa_dln_tau0",
    "sa_factor",
    "sa_from_width",
    "sa_lorentz",
    "sa_reference_line",
    "sa_slopes",
    "tau0_slab",
]
