"""Wavelength calibration of a sample (compquant.lines.wavecal), on spectra with known centres.

External reference: the centre of a Gaussian line is its mean (normal density); a sampled
Gaussian fitted by least squares recovers it without bias (symmetry). Real-data checks are in
tests/test_real_thar.py.
"""

from __future__ import annotations

import numpy as np
import pytest

from compquant.lines.wavecal import WavecalSettings, calibrate_wavelength, peak_fwhm

WL = np.arange(500.0, 506.0, 0.005)
FWHM = 0.02
SIG = FWHM / (2 * np.sqrt(2 * np.log(2)))  # FWHM = 2 sqrt(2 ln 2) sigma (normal density)


def spectrum(centres, heights=None, noise=0.5, seed=0):
    heights = heights if heights is not None else [1000.0] * len(centres)
    y = np.zeros_like(WL)
    for c, h in zip(centres, heights):
        y += h * np.exp(-0.5 * ((WL - c) / SIG) ** 2)
    return y + np.random.default_rng(seed).normal(0, noise, WL.size)


def settings(**kw):
    base = {"search_nm": 0.1, "fwhm_nm": FWHM, "pitch_nm": 0.005}
    base.update(kw)
    return WavecalSettings(**base)


REFS = np.array([500.5, 501.5, 502.5, 503.5, 504.5])


def test_peak_fwhm_of_a_gaussian():
    y = spectrum([502.0], noise=0.0)
    j = int(np.argmax(y))
    assert peak_fwhm(WL, y, j) == pytest.approx(FWHM, rel=0.02)


def test_shift_and_uncertainty():
    y = spectrum(REFS + 0.0123)
    res = calibrate_wavelength(WL, y, REFS, settings())
    assert res.status == "ok" and res.applied and res.n_used == 5
    assert res.a == pytest.approx(0.0123, abs=0.0002)
    assert 0 < res.u_shift_nm < 0.0002
    assert all(abs(r.residual_nm) < 0.0005 for r in res.refs)


def test_linear_model_recovers_dispersion():
    d = 0.004 + 0.003 * (REFS - REFS.mean())
    res = calibrate_wavelength(WL, spectrum(REFS + d), REFS, settings(model="linear"))
    assert res.b == pytest.approx(0.003, abs=0.0002) and res.a == pytest.approx(0.004, abs=0.0002)
    assert np.isfinite(res.u_dispersion)


def test_stronger_neighbour_inside_the_search_window():
    # each reference has a line 5x stronger 0.06 nm to its red, inside the +-0.1 nm search
    centres = np.r_[REFS, REFS + 0.06] - 0.004
    y = spectrum(centres, [1000.0] * 5 + [5000.0] * 5)
    res = calibrate_wavelength(WL, y, REFS, settings(), catalogue_nm=np.r_[REFS, REFS + 0.06])
    assert res.a == pytest.approx(-0.004, abs=0.0003) and res.status == "ok"


def test_disagreeing_reference_flags_the_sample():
    centres = REFS + 0.01
    centres[2] += 0.03  # one reference line is 0.03 nm off the others' consensus
    res = calibrate_wavelength(WL, spectrum(centres), REFS, settings())
    assert res.applied and res.a == pytest.approx(0.01, abs=0.0003)
    assert res.status == "refs_disagree" and res.disagree
    assert [r.status for r in res.refs].count("outlier") == 1
    assert res.refs[2].residual_nm == pytest.approx(0.03, abs=0.001)


def test_unexplained_peak_far_from_the_model_is_an_outlier_and_a_known_one_a_neighbour():
    centres = np.r_[REFS[:4] + 0.01, 504.5 + 0.07]  # the last reference sits 0.06 nm off
    y = spectrum(centres)
    res = calibrate_wavelength(WL, y, REFS, settings())
    assert res.refs[4].status == "outlier" and res.status == "refs_disagree"
    res = calibrate_wavelength(WL, y, REFS, settings(), catalogue_nm=np.r_[REFS, 504.56])
    assert res.refs[4].status == "neighbour" and res.status == "ok"


def test_too_few_references_means_no_correction():
    res = calibrate_wavelength(WL, spectrum([500.5 + 0.01]), REFS, settings(min_refs=2))
    assert res.status == "too_few_refs" and not res.applied and res.shift_at(502.0) == 0.0


def test_reference_on_a_neighbour_is_rejected():
    # the 504.5 line is absent; a catalogue neighbour at 504.512 is present, within the tolerance
    centres = np.r_[REFS[:4], 504.512]
    res = calibrate_wavelength(WL, spectrum(centres), REFS, settings(tolerance_nm=0.015),
                               catalogue_nm=np.r_[REFS, 504.512])
    assert res.refs[4].status == "neighbour" and res.n_used == 4
    assert res.a == pytest.approx(0.0, abs=0.0003)


def test_masked_reference_is_not_used():
    invalid = np.zeros(WL.size, bool)
    invalid[np.abs(WL - 501.5) < 0.01] = True
    res = calibrate_wavelength(WL, spectrum(REFS), REFS, settings(), invalid=invalid)
    assert res.refs[1].status == "masked" and res.n_used == 4
