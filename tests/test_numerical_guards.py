"""Numerical guards (issue 9): degenerate calibrations and plasma states give a clear error or a
flag, never NaN or infinity in a certificate, the LIMS CSV or the run summary.

Cases (invented data built at test time from tests/bad_inputs/base.py): a response that does not
change with content (zero slope), one that falls with content (negative slope), standards that
all certify the same content (singular fit), identical noise-free shots (zero blank scatter and
a perfect fit), 1/u^2 weights with zero response uncertainty, a single shot with NaN pixels, and
Saha-Boltzmann states far outside the plasma range (exponentials that would overflow).
"""

from __future__ import annotations

import json
import re
import warnings
from pathlib import Path

import numpy as np
import pytest
from bad_inputs.base import LAB_TOML, METHOD_TOML, N_PIXELS, SPEC_TOML, STANDARDS_CSV, base_arrays
from click.testing import CliRunner

from compquant.calibrate.build import curve_from_records
from compquant.calibrate.config import AnalyteConfig
from compquant.cli import main
from compquant.errors import CalibrationError, CompquantError, PhysicsError
from compquant.run import write_run

NONFINITE = re.compile(r"(?i)(?<![A-Za-z_])(nan|inf|infinity)(?![A-Za-z_])")


def _reject_constant(name):
    raise AssertionError(f"non-finite JSON constant {name}")


def scan_outputs(out: Path) -> int:
    """Assert no NaN / inf anywhere in the JSON and CSV outputs; return the number of files scanned."""
    n = 0
    for p in sorted(out.rglob("*")):
        if p.suffix == ".json":
            text = p.read_text(encoding="utf-8")
            json.loads(text, parse_constant=_reject_constant)  # NaN / Infinity literals refused
            assert not NONFINITE.search(text), (p.name, NONFINITE.search(text).group(0))
            n += 1
        elif p.suffix == ".csv":
            text = p.read_text(encoding="utf-8")
            m = NONFINITE.search(text)
            assert m is None, (p.name, text[max(0, m.start() - 80) : m.end() + 10])
            n += 1
    return n


# the run states when it was measured and carries the response curve the method asks for, so its
# certificates can be valid for release (compquant.report.release: dates, method-step-skipped)
HONEST = {"acquisition": {"start_time": "2026-11-30T09:00:00Z"}, "response": np.ones(N_PIXELS)}


def _analyse(tmp: Path, *, zn_signal=None, noise=True, standards=STANDARDS_CSV, method=METHOD_TOML, spectra_fn=None):
    wl, spectra, samples, idx, dark = base_arrays(zn_signal=zn_signal, noise=noise)
    if spectra_fn is not None:
        spectra = spectra_fn(spectra)
    run = write_run(tmp / "run.h5", wl, spectra, samples, idx, dark=dark, saturation=65535, created="x", **HONEST)
    for name, text in (("m.toml", method), ("s.csv", standards), ("lab.toml", LAB_TOML), ("spec.toml", SPEC_TOML)):
        (tmp / name).write_text(text, encoding="utf-8")
    out = tmp / "out"
    r = CliRunner().invoke(
        main,
        [
            "analyse",
            str(run),
            "--method",
            str(tmp / "m.toml"),
            "--standards",
            str(tmp / "s.csv"),
            "--lab",
            str(tmp / "lab.toml"),
            "--spec",
            str(tmp / "spec.toml"),
            "-o",
            str(out),
            "--quiet",
            "--no-figures",
            "--issued-at",
            "2026-12-01T21:00:00Z",
        ],
    )
    assert r.exception is None or isinstance(r.exception, SystemExit), repr(r.exception)
    return r, out


def _one_line_error(r, *fragments):
    assert r.exit_code == 2, r.output
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ")
    for f in fragments:
        assert f in lines[0], lines[0]


def test_negative_slope_is_refused(tmp_path):
    r, out = _analyse(tmp_path, zn_signal=lambda ratio: 1.0 - ratio)
    _one_line_error(r, "not positive")
    assert not out.exists() or not any(out.rglob("*.*"))


def test_zero_slope_gives_below_lod_never_nan(tmp_path):
    # the Zn line does not follow the Zn content: any fitted slope is noise
    r, out = _analyse(tmp_path, zn_signal=lambda ratio: 0.3)
    if r.exit_code == 2:
        _one_line_error(r)
        return
    # completed; with every Zn value below the LOD the check sample verifies nothing, so the
    # certificates are not valid for release (exit 3, compquant.report.release)
    assert r.exit_code == 3, r.output
    assert "check sample not evaluated" in r.stderr
    assert scan_outputs(out) >= 4
    lims = (out / "lims.csv").read_text(encoding="utf-8")
    assert "< LOD" in lims or "below_lod" in lims  # a flag, not a number made up from noise


def test_all_identical_standards_are_refused(tmp_path):
    same = (
        "\n".join(
            ",".join(line.split(",")[:3] + ["20.00" if line.split(",")[2] == "Zn" else "80.00"] + line.split(",")[4:])
            if line.startswith("ZS-")
            else line
            for line in STANDARDS_CSV.splitlines()
        )
        + "\n"
    )
    r, _ = _analyse(tmp_path, standards=same)
    _one_line_error(r, "same content")


def test_zero_response_uncertainty_with_weights_is_refused(tmp_path):
    r, _ = _analyse(tmp_path, noise=False, method=METHOD_TOML.replace('model = "linear"', 'model = "weighted"'))
    _one_line_error(r, "zero response uncertainty")


def test_noise_free_run_never_nan(tmp_path):
    r, out = _analyse(tmp_path, noise=False)
    if r.exit_code == 2:
        _one_line_error(r)
    else:
        assert r.exit_code == 0 and scan_outputs(out) >= 4


def test_zero_blank_scatter_and_perfect_fit_give_no_lod_of_zero():
    # an exactly linear curve and a blank whose shots are identical: s = 0, so LOD = 3 s / b = 0
    # (IUPAC 3-sigma rule, docs/calibration.md) would be meaningless
    a = AnalyteConfig("Zn", "Zn I 330.259", basis="absolute")
    recs = [
        dict(standard_id=f"S{i}", sample_id=f"S{i}", x=x, u_x=0.001, y=2 * x + 0.1, u_y=0.01, n_shots=5, w=x)
        for i, x in enumerate([0.05, 0.15, 0.25, 0.35])
    ]
    with pytest.raises(CalibrationError, match="no detection limit"):
        curve_from_records(a, recs, blank=(0.0, "blank shots", 5))
    # with a real blank scatter the same curve has a positive, finite LOD
    c = curve_from_records(a, recs, blank=(0.002, "blank shots", 5))
    assert np.isfinite(c.lod) and c.lod > 0


def test_one_nan_shot_is_rejected_and_never_reaches_the_certificate(tmp_path):
    def nan_shot(spectra):
        s = spectra.astype(np.float64)
        s[-1, 100:110] = np.nan  # last shot of LOT-2
        return s

    r, out = _analyse(tmp_path, spectra_fn=nan_shot)
    assert r.exit_code == 0, r.output
    assert scan_outputs(out) >= 4


def test_saha_exponentials_do_not_overflow():
    from compquant.plasma import saha_ratio, solve_lte

    with warnings.catch_warnings():
        warnings.simplefilter("error")  # an overflow RuntimeWarning fails the test
        # exp(-E/kT) for E = 7.7 eV from 1 K to 1e6 K, and the inverse-direction prefactor T^1.5
        r = saha_ratio(np.array([1.0, 50.0, 300.0, 1e4, 1e6]), 1e17, 1.0, 1.0, 7.7)
        assert np.all(np.isfinite(r)) and np.all(r >= 0)
        assert r[0] == 0.0 and r[-1] > r[-2] > 0
        with pytest.raises(PhysicsError):
            solve_lte(100.0, 1e17, {"Cu": 0.7, "Zn": 0.3})  # no ions: no electrons, a clear error


def test_calibration_free_far_outside_the_plasma_range_is_a_clear_error(tmp_path):
    method = METHOD_TOML + (
        '\n[cf]\nfit = "boltzmann"\nne_method = "fixed"\nne_fixed_cm3 = 1e17\nt_start_k = 5.0\nt_min_k = 1.0\n'
        "mc_draws = 5\n"
    )
    wl, spectra, samples, idx, dark = base_arrays()
    run = write_run(tmp_path / "run.h5", wl, spectra, samples, idx, dark=dark, saturation=65535, created="x", **HONEST)
    (tmp_path / "m.toml").write_text(method, encoding="utf-8")
    out = tmp_path / "out"
    r = CliRunner().invoke(
        main,
        [
            "analyse",
            str(run),
            "--method",
            str(tmp_path / "m.toml"),
            "--cf",
            "-o",
            str(out),
            "--quiet",
            "--no-figures",
            "--issued-at",
            "2026-12-01T21:00:00Z",
        ],
    )
    assert r.exception is None or isinstance(r.exception, SystemExit), repr(r.exception)
    if r.exit_code == 0:
        assert scan_outputs(out) >= 2
    else:
        _one_line_error(r)
        assert not out.exists() or not any(out.rglob("*.*"))


def test_compquant_error_is_the_only_failure_kind():
    assert issubclass(CalibrationError, CompquantError) and issubclass(PhysicsError, CompquantError)


def test_quantify_provenance_is_strict_json(tmp_path):
    """The results provenance of `compquant quantify` is strict JSON (RFC 8259 has no NaN or
    Infinity): a missing estimate is null."""
    wl, spectra, samples, idx, dark = base_arrays(zn_signal=lambda ratio: 0.3)
    run = write_run(tmp_path / "run.h5", wl, spectra, samples, idx, dark=dark, saturation=65535, created="x", **HONEST)
    (tmp_path / "m.toml").write_text(METHOD_TOML, encoding="utf-8")
    (tmp_path / "s.csv").write_text(STANDARDS_CSV, encoding="utf-8")
    cal = tmp_path / "cal.json"
    r = CliRunner().invoke(
        main,
        [
            "calibrate",
            str(run),
            "--method",
            str(tmp_path / "m.toml"),
            "--standards",
            str(tmp_path / "s.csv"),
            "-o",
            str(cal),
            "--quiet",
        ],
    )
    if r.exit_code == 2:
        _one_line_error(r)
        return
    assert r.exit_code == 0, r.output
    json.loads(cal.read_text(encoding="utf-8"), parse_constant=_reject_constant)
    out = tmp_path / "res.csv"
    r = CliRunner().invoke(
        main,
        [
            "quantify",
            str(run),
            "--calibration",
            str(cal),
            "--method",
            str(tmp_path / "m.toml"),
            "-o",
            str(out),
            "--quiet",
        ],
    )
    assert r.exit_code == 0, r.output
    json.loads((tmp_path / "res-provenance.json").read_text(encoding="utf-8"), parse_constant=_reject_constant)
