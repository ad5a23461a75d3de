"""Pixel masks end to end (issue 16): run file, reader, validator, convert, inspect, line table.

External references: the largest float32 (numpy.finfo, IEEE 754 binary32 maximum 3.4028235e38)
as the dead-pixel code; the int16 minimum -32768 (IEEE/ISO C two's complement); the area of a
Gaussian, A = h sigma sqrt(2 pi) (normal density), for the intensity of an unmasked line.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from _lines_data import make_run, method
from click.testing import CliRunner

from compquant.cli import main
from compquant.errors import MethodError
from compquant.lines import measure_run
from compquant.method import method_from_dict
from compquant.run import Run, validate_run, write_run
from compquant.run.convert import convert_to_run
from compquant.run.mask import pixel_ranges, value_limits

F32_MAX = float(np.finfo(np.float32).max)
AREAS = {"Cu I 324.754": 400.0, "Cu I 327.396": 250.0, "Zn I 330.259": 30.0, "Zn I 334.502": 60.0}
SAMPLES = [{"sample_id": "A", "role": "unknown"}, {"sample_id": "B", "role": "unknown"}]


def test_limits_and_ranges():
    assert F32_MAX == pytest.approx(3.4028235e38, rel=1e-7)
    lim = value_limits(np.float32)
    assert lim.hi < F32_MAX  # the float32 maximum is implausible as counts
    assert -32768.0 in value_limits(np.int16).sentinels
    assert value_limits(np.float64, saturation=65535).hi == 2 * 65535
    assert pixel_ranges([0, 1, 1, 0, 1]) == [(1, 2), (4, 4)]


def test_stored_and_detected_masks_read_as_nan(tmp_path):
    wl = np.linspace(300, 310, 100)
    sp = np.full((4, 100), 50.0, dtype=np.float32)
    sp[1, 20:23] = F32_MAX
    sp[2, 7] = -np.inf
    pm = np.zeros(100, bool)
    pm[90:92] = True
    p = tmp_path / "m.h5"
    write_run(p, wl, sp, SAMPLES, [0, 0, 1, 1], pixel_mask=pm, masked_ranges=[(3, 0, 1, "cosmic ray")],
              sentinels=[-9999])
    with Run.open(p) as run:
        raw = run.read_raw(0, 4)
        assert np.isnan(raw[1, 20:23]).all() and np.isnan(raw[2, 7]) and np.isnan(raw[:, 90:92]).all()
        assert np.isnan(raw[3, 0:2]).all() and np.isfinite(raw[0, :90]).all()
        assert np.isnan(run.sample_spectra("B")[1, :2]).all()
        assert run.read_raw(0, 4, masked=False)[1, 20] == np.float32(F32_MAX)
    text = " ".join(f.message for f in validate_run(p))
    assert "pixels 20-22" in text and "sentinel or implausible" in text and "cosmic ray" not in text
    assert "pixel 7 " in text and "non-finite" in text and "pixels 90-91" in text
    out = CliRunner().invoke(main, ["inspect", str(p)]).output
    assert "A: pixels 20-22" in out and "B: pixels 0-1" in out and "masked in the run file" in out
    d = json.loads(CliRunner().invoke(main, ["inspect", "--json", str(p)]).output)
    assert {(m["first_pixel"], m["last_pixel"]) for m in d["samples"][0]["masked"]} >= {(20, 22), (90, 91)}


def test_bad_mask_rows_are_refused(tmp_path):
    from compquant.errors import RunFormatError

    wl = np.linspace(300, 310, 10)
    with pytest.raises(RunFormatError, match="outside the run"):
        write_run(tmp_path / "x.h5", wl, np.ones((2, 10)), SAMPLES, [0, 1], masked_ranges=[(5, 0, 1)])


def test_convert_masks_sentinels_and_nan(tmp_path):
    folder = tmp_path / "spectra"
    folder.mkdir()
    wl = np.linspace(400, 401, 20)
    for sid, shot, bad in (("A", 1, None), ("A", 2, (5, "-9999")), ("B", 1, (12, "3.4028235e38")),
                           ("B", 2, (3, "nan"))):
        vals = [f"{v:.0f}" for v in 100 + np.arange(20)]
        if bad:
            vals[bad[0]] = bad[1]
        (folder / f"{sid}_{shot}.txt").write_text("\n".join(f"{w:.4f} {v}" for w, v in zip(wl, vals)),
                                                  encoding="utf-8")
    samples = tmp_path / "samples.csv"
    samples.write_text("sample_id,role\nA,unknown\nB,unknown\n", encoding="utf-8")
    rep = convert_to_run(folder, samples, tmp_path / "run.h5", sentinels=[-9999])
    got = {(s, shot, a, b) for s, shot, a, b, _ in rep.masked}
    assert got == {("A", 1, 5, 5), ("B", 0, 12, 12), ("B", 1, 3, 3)}
    assert "masked 3 pixel range(s)" in rep.text()
    with Run.open(tmp_path / "run.h5") as run:
        assert int(np.isnan(run.read_raw(0, 4)).sum()) == 3
        assert len(run.mask.shot) == 3


def test_masked_pixel_never_enters_a_line(tmp_path):
    p = make_run(tmp_path / "r.h5", [("S", "standard", 8, AREAS)], noise=False)
    with Run.open(p) as run:
        wl = run.wavelength.copy()
        raw = run.read_raw(0, run.n_shots).astype(np.float64)
        base = measure_run(run, method()).table.set_index("line_id")
    k = int(np.argmin(np.abs(wl - 324.754)))
    raw[:3, k] = F32_MAX  # dead pixel on the peak in three shots
    raw[:, k + 1] = np.nan  # and a blank pixel beside it in every shot
    z = int(np.argmin(np.abs(wl - 334.502)))
    raw[[2, 5], z] = -np.inf  # another line loses two of its eight shots
    q = tmp_path / "bad.h5"
    write_run(q, wl, raw, [{"sample_id": "S", "role": "standard", "standard_ref": "X"}], np.zeros(8, int))
    with Run.open(q) as run:
        lm = measure_run(run, method())
    t = lm.table.set_index("line_id")
    cu = t.loc["Cu I 324.754"]
    assert "masked" in cu["flags"] and np.isnan(cu.intensity) and cu.n_shots == 0 and np.isnan(cu.centre_nm)
    other = t.loc["Cu I 327.396"]  # untouched line: same value as in the clean run
    assert other.intensity == pytest.approx(base.loc["Cu I 327.396", "intensity"], rel=1e-6)
    assert "masked" not in other["flags"]
    zn = t.loc["Zn I 334.502"]  # measured on its clean accepted shots (noise-free: same mean), flagged
    acc = lm.shot_accepted
    assert zn.n_shots == int(acc.sum() - acc[[2, 5]].sum()) >= 3 and "masked" in zn["flags"]
    assert zn.intensity == pytest.approx(base.loc["Zn I 334.502", "intensity"], rel=1e-3)
    assert set(lm.masked_pixels.shot) == set(range(8))
    assert any("sample 'S'" in n and "masked pixel range" in n and f"shot 0 pixels {k}-{k + 1}" in n
               for n in lm.provenance["notes"])


def test_not_found_has_no_centre_in_any_mode(tmp_path):
    p = make_run(tmp_path / "blank.h5", [("BLK", "blank", 6, {})])
    for mode in ("window", "fit"):
        with Run.open(p) as run:
            t = measure_run(run, method(measure={"window_nm": 0.3, "side_nm": 0.1, "mode": mode})).table
        assert t["flags"].str.contains("not_found").all()
        assert t.centre_nm.isna().all() and t.fwhm_nm.isna().all()


def _m(lines, **meta):
    return method_from_dict({"method": {"id": "x", **meta}, "lines": lines})


def test_method_refuses_unknown_species_and_states_medium():
    with pytest.raises(MethodError, match="unknown element"):
        _m([{"element": "Xx", "ion": 1, "wavelength_nm": 400.0}])
    with pytest.raises(MethodError, match="unknown element"):
        _m([{"element": "??", "ion": 1, "wavelength_nm": 400.0}])
    with pytest.raises(MethodError, match="no ion stage 3"):
        _m([{"element": "H", "ion": 3, "wavelength_nm": 400.0}])  # hydrogen has one electron (Z = 1)
    with pytest.raises(MethodError, match="medium"):
        _m([{"id": "Cu I 324.754"}], medium="glass")
    air = _m([{"id": "Cu I 324.754"}])
    vac = _m([{"id": "Cu I 324.754"}], medium="vacuum")
    assert air.medium == "air" and vac.medium == "vacuum"
    # the id carries the air wavelength; a vacuum method holds its vacuum value (Morton 2000 eq. 8,
    # compquant.atomic.airvac, checked against published values in tests/test_atomic.py)
    from compquant.atomic.airvac import air_to_vacuum

    assert vac.lines[0].wavelength_nm == pytest.approx(air_to_vacuum(air.lines[0].wavelength_nm), abs=1e-9)
    assert 0.09 < vac.lines[0].wavelength_nm - air.lines[0].wavelength_nm < 0.10


def test_line_wider_than_its_window_is_flagged(tmp_path):
    # a Gaussian line of FWHM 0.30 nm measured through a 0.10 nm window (window and fit mode):
    # the window holds erf(0.05 / (sigma sqrt 2)) = 31 % of its area (normal distribution)
    wl = np.arange(400.0, 402.0, 0.01)
    sig = 0.30 / 2.3548
    line = 500.0 * np.exp(-0.5 * ((wl - 401.0) / sig) ** 2)
    rng = np.random.default_rng(3)
    sp = np.vstack([line + 100 + rng.normal(0, 1.0, wl.size) for _ in range(5)])
    p = tmp_path / "wide.h5"
    write_run(p, wl, sp, [{"sample_id": "W", "role": "unknown"}], np.zeros(5, int))
    for mode in ("window", "fit"):
        m = method([{"element": "Fe", "ion": 1, "wavelength_nm": 401.0, "mode": mode, "window_nm": 0.10,
                     "side_nm": 0.05, "fwhm_nm": 0.03}], preprocess={"baseline": {"method": "none"}})
        with Run.open(p) as run:
            t = measure_run(run, m).table
        assert "window_clips" in t["flags"].iloc[0], (mode, t["flags"].iloc[0])
