"""Peak detection and the [identify] settings (compquant.identify.peaks, .settings)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.stats import median_abs_deviation

from compquant.errors import InputError, MethodError
from compquant.identify import IdentifySettings, find_peaks, local_noise_sigma, noise_sigma, settings_from_dict


def test_noise_sigma_equals_scipy_mad_of_difference():
    rng = np.random.default_rng(3)
    x = np.linspace(0, 1, 20000)
    y = rng.normal(0.0, 2.5, (3, x.size)) + 50.0 * x**2  # smooth continuum is removed by differencing
    got = noise_sigma(y)
    # reference library: scipy.stats.median_abs_deviation with the normal consistency factor
    ref = median_abs_deviation(np.diff(y, axis=-1), axis=-1, scale="normal") / math.sqrt(2.0)
    np.testing.assert_allclose(got, ref, rtol=1e-12)
    # the generator's true sigma (numpy normal): within 3 % for 20000 samples
    np.testing.assert_allclose(got, 2.5, rtol=0.03)
    loc = local_noise_sigma(y[0], window=201)
    assert loc.shape == y[0].shape and abs(np.median(loc) / 2.5 - 1) < 0.05


def _gauss_spectrum(rng, n=6000, fwhm_px=4.0, sigma=1.0):
    wl = 400.0 + 0.02 * np.arange(n)
    centres = np.sort(rng.uniform(wl[100], wl[-100], 25))
    centres = centres[np.concatenate([[True], np.diff(centres) > 1.0])]
    heights = rng.uniform(20, 2000, centres.size)
    s = fwhm_px * 0.02 / (2 * math.sqrt(2 * math.log(2)))
    y = (heights[:, None] * np.exp(-0.5 * ((wl[None, :] - centres[:, None]) / s) ** 2)).sum(0)
    return wl, y + rng.normal(0, sigma, n), centres, heights, s


def test_find_peaks_recovers_gaussian_centre_height_width_area():
    rng = np.random.default_rng(7)
    wl, y, centres, heights, s = _gauss_spectrum(rng)
    y[1234] += 200.0  # a one-pixel spike: narrower than the instrument profile
    R = 410.0 / (4.0 * 0.02)  # instrument FWHM = 4 pixels at ~410 nm
    pk = find_peaks(wl, y, k_sigma=5, resolving_power=R, noise_window=None)  # white noise: one global sigma
    assert len(pk) == centres.size  # every line, and not the spike
    assert not np.any(np.abs(pk["centre_nm"] - wl[1234]) < 0.01)
    order = np.argsort(pk["centre_nm"].to_numpy())
    p = pk.iloc[order]
    # centre within 0.1 pixel (parabolic refinement, common practice)
    assert np.max(np.abs(p["centre_nm"].to_numpy() - centres)) < 0.1 * 0.02
    # FWHM of a Gaussian = 2 sqrt(2 ln 2) sigma (mathematics)
    fwhm_true = 2 * math.sqrt(2 * math.log(2)) * s
    strong = heights > 200
    np.testing.assert_allclose(p["fwhm_nm"].to_numpy()[strong], fwhm_true, rtol=0.05)
    # area of a Gaussian = h sigma sqrt(2 pi) (mathematics)
    np.testing.assert_allclose(p["area"].to_numpy()[strong], heights[strong] * s * math.sqrt(2 * math.pi),
                               rtol=0.06)
    np.testing.assert_allclose(p["height"].to_numpy()[strong], heights[strong], rtol=0.03)
    np.testing.assert_allclose(p["snr"].to_numpy()[strong], heights[strong], rtol=0.05)  # noise sigma = 1
    # the running noise estimate scatters by ~8 % for a 201-pixel window (standard error of a median)
    loc = find_peaks(wl, y, k_sigma=5, resolving_power=R)
    assert len(loc) == len(pk)
    np.testing.assert_allclose(loc["noise"], 1.0, rtol=0.3)


def test_pure_noise_gives_almost_no_peaks():
    """Gaussian tail P(z > 5) = 2.87e-7 (normal distribution): 60000 pixels expect ~0.02 noise peaks."""
    rng = np.random.default_rng(11)
    n_false = 0
    for _ in range(3):
        y = rng.normal(0, 1, 20000)
        n_false += len(find_peaks(np.linspace(300, 500, y.size), y, k_sigma=5, resolving_power=5000))
    assert n_false <= 1


def test_pure_noise_identifies_nothing():
    """No peak in pure normal noise (tail probability above), hence no element and no unexplained peak."""
    from compquant.identify import identify_spectrum

    y = np.random.default_rng(5).normal(0, 1, 8000)
    ident = identify_spectrum(np.linspace(250, 450, y.size), y, resolving_power=3000)
    assert len(ident.peaks) <= 1
    assert (ident.species["status"] == "not detected").all()


def test_find_peaks_refuses_bad_input():
    with pytest.raises(InputError):
        find_peaks(np.arange(100.0), np.zeros(99))
    with pytest.raises(InputError):
        find_peaks(np.arange(100.0)[::-1], np.zeros(100))


def test_settings_validation():
    s = settings_from_dict({"k_sigma": 4, "temperature_k": "fit", "elements": ["Cu", "Zn"],
                            "temperature_grid_k": [6000, 12000, 250]})
    assert s.k_sigma == 4.0 and s.temperature_k is None and s.elements == ("Cu", "Zn")
    assert settings_from_dict(None) == IdentifySettings()
    bad = [{"k_sigmaa": 3}, {"k_sigma": -1}, {"k_sigma": "five"}, {"temperature_k": 50.0},
           {"detected_score": 1.5}, {"elements": "Cu"}, {"noise_window": 5}, {"intensity_factor": 0.5},
           {"possible_score": 0.9, "detected_score": 0.5}, {"temperature_grid_k": [9000, 8000, 100]},
           {"k_sigma": True}, {"elements": ["Xx"]}]
    for table in bad:
        with pytest.raises(MethodError) as exc:
            settings_from_dict(table, "m.toml: [identify]")
        assert "m.toml: [identify]" in str(exc.value)
