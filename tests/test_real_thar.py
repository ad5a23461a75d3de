"""Real measured emission spectrum: pixel masks, wavelength calibration and line flags (issue 16).

Source of the data (tests/data/README.md): the UVES thorium-argon lamp atlas
``thar_spec_MM201006.fits`` (Murphy et al. 2007, MNRAS 378, 221) and the line list
``ThAr_lines.dat`` (NIST / Murphy et al. 2007 vacuum wavelengths) shipped in the PyPI package
pypeit 2.0.1 (BSD 3-Clause), 400-412 nm extract.  The catalogue is the external reference: every
check compares compquant's centres with it.  Vacuum -> air with compquant.atomic.airvac
(Edlen / Birch & Downs as in Morton 2000), itself tested against published values in
tests/test_atomic.py.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from compquant.atomic.airvac import vacuum_to_air
from compquant.lines import measure_run
from compquant.lines.wavecal import WavecalSettings, calibrate_wavelength
from compquant.method import method_from_dict
from compquant.preprocess.shift import shift_from_lines
from compquant.run import Run, validate_run, write_run

DATA = Path(__file__).parent / "data"
TOL_NM = 0.0005  # issue 16: centres within 0.0005 nm of the catalogue after correction
FWHM = 0.0063  # measured median FWHM of the strong lines of this extract (about 2.7 pixels)


def _atlas():
    z = np.load(DATA / "thar_uves_400_412.npz")
    i = int(z["first_pixel"]) + np.arange(z["flux"].size)
    wl = 10 ** (float(z["crval1"]) + i * float(z["cd1_1"])) / 10.0  # air, nm
    y = z["flux"].astype(float)
    return wl, y - np.percentile(y, 20), z["status"]


def _catalogue():
    c = pd.read_csv(DATA / "thar_lines_400_412.csv")
    c["vac_nm"] = c.wave_vac_angstrom / 10.0
    c["air_nm"] = vacuum_to_air(c.vac_nm.to_numpy())
    return c


def _references(cat, lo=400.5, hi=411.5):
    """Strong catalogue lines (amplitude >= 1000) with no line of >= 10 % of their amplitude
    within 0.1 nm ('isolated'), and strong lines with a STRONGER neighbour within 0.1 nm."""
    w, a = cat.air_nm.to_numpy(), cat.amplitude.to_numpy(float)
    iso, crowded = [], []
    for k in np.flatnonzero((a >= 1000) & (w > lo) & (w < hi)):
        near = (np.abs(w - w[k]) < 0.1) & (np.arange(w.size) != k)
        if not (a[near] >= 0.1 * a[k]).any():
            iso.append(k)
        elif (a[near] > a[k]).any():
            crowded.append(k)
    return np.array(iso), np.array(crowded)


def _settings(model="shift"):
    wl, _, _ = _atlas()
    return WavecalSettings(search_nm=0.1, fwhm_nm=FWHM, pitch_nm=float(np.median(np.diff(wl))), model=model,
                           tolerance_nm=TOL_NM)


def test_extract_is_the_real_atlas():
    wl, y, status = _atlas()
    cat = _catalogue()
    assert wl.size == 5064 and (status == 1).all()
    assert 0.0023 < np.median(np.diff(wl)) < 0.0025  # 1.75 km/s pixels (FITS header UP_DISP)
    assert len(cat) == 602


def test_reference_centres_match_the_catalogue():
    wl, y, _ = _atlas()
    cat = _catalogue()
    iso, _ = _references(cat)
    refs = cat.air_nm.to_numpy()[iso]
    res = calibrate_wavelength(wl, y, refs, _settings(), catalogue_nm=cat.air_nm, catalogue_intensity=cat.amplitude,
                               ref_intensity=cat.amplitude.to_numpy(float)[iso])
    assert res.status == "ok" and res.n_used == len(refs) >= 6
    assert abs(res.a) < TOL_NM  # the atlas is calibrated: no correction needed
    found = np.array([r.found_nm for r in res.refs])
    assert np.all(np.abs(found - res.a - refs) < TOL_NM)
    assert np.median(np.abs(found - res.a - refs)) < 0.0002  # a tenth of a pixel
    assert res.u_shift_nm < 0.0001


def test_wavelength_dependent_offset_is_recovered():
    wl, y, _ = _atlas()
    cat = _catalogue()
    iso, crowded = _references(cat)
    refs = cat.air_nm.to_numpy()[np.r_[iso, crowded]]
    a_true, b_true, mid = 0.012, 0.0015, 406.0  # our own offset: 0.0030 nm at 400 nm, 0.0210 at 412 nm

    def d(lam):
        return a_true + b_true * (lam - mid)

    shifted_axis = wl + d(wl)  # a line at true lambda now sits at lambda + d(lambda)
    res = calibrate_wavelength(shifted_axis, y, refs, _settings("linear"), catalogue_nm=cat.air_nm,
                               catalogue_intensity=cat.amplitude, ref_intensity=cat.amplitude.to_numpy(float)[
                                   np.r_[iso, crowded]])
    assert res.applied and res.n_used >= 10
    assert res.b == pytest.approx(b_true, rel=0.03)
    assert res.shift_at(refs) == pytest.approx(d(refs), abs=TOL_NM)
    for r in res.refs:
        if r.status == "used":  # corrected centre of every agreeing reference on the catalogue
            assert abs(r.found_nm - res.shift_at(r.ref_nm) - r.ref_nm) < TOL_NM
    assert np.isfinite(res.u_shift_nm) and np.isfinite(res.u_dispersion) and res.u_dispersion < 0.0001
    # a single shift cannot describe it: the old estimator leaves >= 0.005 nm errors at the ends
    d_old, _ = shift_from_lines(shifted_axis, y, refs, 0.1)
    assert max(abs(d_old - d(400.5)), abs(d_old - d(411.5))) > 0.005


def test_references_with_stronger_neighbours_do_not_lock_on():
    wl, y, _ = _atlas()
    cat = _catalogue()
    iso, crowded = _references(cat)
    refs = cat.air_nm.to_numpy()[np.r_[iso[:3], crowded]]  # most references sit beside a stronger line
    shift = -0.004
    res = calibrate_wavelength(wl + shift, y, refs, _settings(), catalogue_nm=cat.air_nm,
                               catalogue_intensity=cat.amplitude)
    assert res.applied and res.a == pytest.approx(shift, abs=TOL_NM)
    # the highest-pixel estimator locks several references onto their neighbours
    _, each = shift_from_lines(wl + shift, y, refs, 0.1)
    assert sum(abs(e - shift) > 0.01 for e in each) >= 3


def _method(lines, refs_vac, model="linear"):
    return method_from_dict({
        "method": {"id": "thar", "medium": "vacuum"},
        "preprocess": {"dark": {"enabled": False}, "response": {"enabled": False},
                       "baseline": {"method": "none"}, "qc": {"enabled": False},
                       "shift": {"method": "lines", "lines": list(refs_vac), "model": model, "search_nm": 0.1,
                                 "max_shift_nm": 0.05, "flag_nm": TOL_NM}},
        "measure": {"mode": "window", "window_nm": 3 * FWHM, "side_nm": 2 * FWHM, "gap_nm": FWHM,
                    "fwhm_nm": FWHM, "snr_min": 10.0},
        "lines": [{"element": e, "ion": i, "wavelength_nm": float(w)} for e, i, w in lines],
    })


def test_run_with_offset_sentinels_and_medium(tmp_path):
    wl, y, _ = _atlas()
    cat = _catalogue()
    iso, crowded = _references(cat)
    rows = cat.iloc[np.r_[iso, crowded]]
    ions = {"I": 1, "II": 2, "III": 3}
    lines = [(r.ion.split()[0], ions[r.ion.split()[1]], r.vac_nm) for r in rows.itertuples()
             if r.ion.split()[0] in ("Th", "Ar")]
    axis = wl + 0.006 + 0.001 * (wl - 406.0)  # our own wavelength-dependent offset (air axis)
    rng = np.random.default_rng(16)
    spectra = np.vstack([y + 20.0 + rng.normal(0, 2.0, y.size) for _ in range(6)]).astype(np.float32)
    target = lines[2][2]  # one line: its peak pixel blanked by the instrument's dead-pixel code
    t_air = float(vacuum_to_air(target))
    k = int(np.argmin(np.abs(axis - (t_air + 0.006 + 0.001 * (t_air - 406.0)))))
    spectra[:, k] = np.float32(3.4e38)  # dead pixel in every shot
    spectra[1, 100:104] = np.nan  # a blank block in one shot, away from the lines
    p = tmp_path / "thar.h5"
    write_run(p, axis, spectra, [{"sample_id": "LAMP", "role": "unknown"}], np.zeros(6, int), medium="air")
    findings = validate_run(p)
    msg = " ".join(f.message for f in findings)
    assert f"pixel {k} " in msg and "sentinel" in msg and "pixels 100-103" in msg
    m = _method(lines, rows.vac_nm.to_numpy()[:12])
    with Run.open(p) as run:
        lm = measure_run(run, m)
    t = lm.table
    assert lm.provenance["medium"]["run"] == "air" and "converted from air to vacuum" in lm.provenance["medium"]["note"]
    sh = lm.shifts.iloc[0]
    assert sh.applied and sh.model == "linear"
    assert sh.dispersion_nm_per_nm == pytest.approx(0.001, rel=0.05)
    # no absurd value reaches a result; the blanked line is not measured and says why
    assert np.nanmax(t.intensity.abs()) < 1e4
    hit = t[(t.wavelength_nm - target).abs() < 1e-9].iloc[0]
    assert "masked" in hit["flags"] and np.isnan(hit.intensity) and np.isnan(hit.centre_nm)
    # every other measured line: corrected centre on the catalogue, or flagged
    clean = t[~t["flags"].str.contains("masked|not_found|low_snr|overlapped")]
    assert len(clean) >= 10
    mid = float(np.mean(lm.references.reference_nm))
    corrected = clean.centre_nm - (sh.shift_nm + sh.dispersion_nm_per_nm * (clean.wavelength_nm - mid))
    err = (corrected - clean.wavelength_nm).abs()
    ok = err < TOL_NM
    assert ok.mean() >= 0.9, err.describe()
    assert np.median(err) < 0.0002
    assert clean[~ok]["flags"].str.contains("shifted").all()  # the rest is flagged, never silent
