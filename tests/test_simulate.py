"""compquant simulate: scenario validation, detector statistics, reproducibility, the demo runs."""

from __future__ import annotations

import math
from pathlib import Path

import h5py
import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from compquant.cli import main
from compquant.errors import ConfigError
from compquant.run import Run
from compquant.simulate import (
    draw_true_composition,
    load_scenario,
    load_standards_csv,
    simulate_arrays,
    stored_response,
    true_response,
)
from compquant.simulate.engine import detector_of, shot_conditions, wavelength_axis

ROOT = Path(__file__).resolve().parents[1]
STANDARDS = ROOT / "standards" / "demo-copper-alloys.csv"
DEMO = ROOT / "demo_runs"

MINI = """
[scenario]
id = "mini"
seed = 3
matrix = "Cu"

[standards]
file = "{standards}"
truth_seed = 11

[plasma]
temperature_k = 10000.0
temperature_rsd = 0.03
ne_cm3 = 8e16
ne_rsd = 0.05
length_mm = 0.5
stark_fallback_fwhm_nm = 0.01

[laser]
wavelength_nm = 1064.0
pulse_energy_mj = 60.0
pulse_energy_rsd = 0.03
signal_rsd = 0.05

[instrument]
wavelength_min_nm = 320.0
wavelength_max_nm = 340.0
n_pixels = 600
resolving_power = 3000
photoelectrons_per_radiance = 1.0
gain_counts_per_pe = 2.0
bias_counts = 800
bias_pattern_counts = 3
dark_current_pe_per_s = 400
read_noise_counts = 5
saturation_counts = 65000
exposure_s = 0.05
response_nm = [320, 330, 340]
response = [0.6, 1.0, 0.8]

[lines]
elements = ["Cu", "Zn"]

[dark]
frames = 6

[[samples]]
id = "A"
role = "unknown"
composition = {{ Zn = 0.35 }}
shots = 5

[[samples]]
id = "B"
role = "setup"
composition = {{ Zn = 0.01 }}
shots = 4
"""


def write_mini(tmp_path, text=None):
    body = (text or MINI).format(standards=STANDARDS.as_posix())
    p = tmp_path / "mini.toml"
    p.write_text(body, encoding="utf-8")
    return p


def test_reproducible_by_seed(tmp_path):
    sc = load_scenario(write_mini(tmp_path))
    a = simulate_arrays(sc, seed=5)
    b = simulate_arrays(sc, seed=5)
    c = simulate_arrays(sc, seed=6)
    for key in ("spectra", "dark", "pulse_energy_mj", "time_s", "x_mm"):
        np.testing.assert_array_equal(a[key], b[key])
    assert not np.array_equal(a["spectra"], c["spectra"])
    assert a["spectra"].dtype == np.uint16
    # samples have independent random streams: computing one sample alone gives the same rows
    only = simulate_arrays(sc, seed=5, only=[1])
    np.testing.assert_array_equal(only["spectra"][5:], a["spectra"][5:])


def test_cli_writes_a_readable_run(tmp_path):
    scen = write_mini(tmp_path)
    out = tmp_path / "run.h5"
    truth = tmp_path / "truth.csv"
    res = CliRunner().invoke(main, ["simulate", str(scen), "-o", str(out), "--seed", "4", "--truth", str(truth)])
    assert res.exit_code == 0, res.output
    with Run.open(out) as run:
        assert run.n_shots == 9 and run.n_pixels == 600
        assert list(run.samples.sample_id) == ["A", "B"]
        assert list(run.samples.role) == ["unknown", "setup"]
        assert run.saturation == 65000
        assert run.dark().shape == (6, 600)
        assert run.response().max() == pytest.approx(1.0)
        assert not any("temperature" in k or "ne_cm3" in k for k in run.acquisition)  # plasma truth stays out
        assert run.instrument["resolving_power"] == 3000
        pe = run.shots.pulse_energy_mj.to_numpy()
        assert np.all((pe > 40) & (pe < 80))
    # the truth is not in the run file
    with h5py.File(out, "r") as f:
        names = []
        f.visit(names.append)
        assert not any("truth" in n or "composition" in n for n in names)
    t = pd.read_csv(truth)
    a = t[t.sample_id == "A"].set_index("element").mass_fraction
    assert a["Zn"] == pytest.approx(0.35) and a["Cu"] == pytest.approx(0.65)


def test_noise_free_counts_follow_the_detector_equation(tmp_path):
    sc = load_scenario(write_mini(tmp_path))
    arr = simulate_arrays(sc, noise=False)
    from compquant.simulate.engine import build_model

    wl = wavelength_axis(sc)
    model = build_model(sc, wl)
    e, t, ne, f = shot_conditions(sc, 1, np.random.default_rng(0), noise=False)
    rad = model.radiance(sc.samples[0].composition, t, ne, length_mm=0.5, scale=f)[0]
    det = detector_of(sc)
    dark_mean = arr["dark"].astype(float).mean(axis=0)
    signal = (arr["spectra"][0].astype(float) - dark_mean) / (
        det.gain_counts_per_pe * det.photoelectrons_per_radiance * true_response(sc, wl)
    )
    # counts are rounded to integers: each pixel within 1 count of gain * S * R * L
    tol = 1.0 / (det.gain_counts_per_pe * det.photoelectrons_per_radiance * true_response(sc, wl))
    assert np.all(np.abs(signal - rad) <= tol + 1e-9)
    assert rad.max() > 1000 * tol.max()  # the check is not vacuous: strong lines are present


def test_dark_noise_is_poisson_plus_read_noise(tmp_path):
    # variance of dark counts = G^2 D t (Poisson: variance = mean) + sigma_read^2 + 1/12 (rounding);
    # common practice (photon-transfer analysis, Janesick 2001)
    text = MINI.replace("frames = 6", "frames = 400")
    sc = load_scenario(write_mini(tmp_path, text))
    arr = simulate_arrays(sc, seed=9)
    d = arr["dark"].astype(float)
    var = d.var(axis=0, ddof=1).mean()
    g, dc, te, rn = 2.0, 400.0, 0.05, 5.0
    expect = g * g * dc * te + rn * rn + 1.0 / 12.0
    assert var == pytest.approx(expect, rel=0.03)
    mean = d.mean()
    assert mean == pytest.approx(800 + g * dc * te, abs=1.0)


def test_saturation_clips(tmp_path):
    sc = load_scenario(write_mini(tmp_path, MINI.replace("saturation_counts = 65000", "saturation_counts = 1500")))
    arr = simulate_arrays(sc)
    assert arr["spectra"].max() == 1500
    assert arr["saturation"] == 1500


def test_shot_fluctuations_statistics(tmp_path):
    sc = load_scenario(write_mini(tmp_path))
    e, t, ne, f = shot_conditions(sc, 40000, np.random.default_rng(1))
    assert e.mean() == pytest.approx(60.0, rel=2e-3)
    assert e.std() / e.mean() == pytest.approx(0.03, rel=0.03)
    # T and n_e log-normal around nominal, correlated with pulse energy only through the exponents (0 here)
    assert np.log(t).std() == pytest.approx(0.03, rel=0.03)
    assert np.log(ne).std() == pytest.approx(0.05, rel=0.03)


def test_drift_response(tmp_path):
    drift = "[drift]\nresponse_scale = 0.9\nfactor_nm = [320, 340]\nfactor = [0.8, 1.0]\n\n"
    text = MINI.replace("[dark]", drift + "[dark]")
    sc = load_scenario(write_mini(tmp_path, text))
    wl = wavelength_axis(sc)
    r0, r1 = stored_response(sc, wl), true_response(sc, wl)
    assert r1[0] / r0[0] == pytest.approx(0.9 * 0.8)
    assert r1[-1] / r0[-1] == pytest.approx(0.9)


@pytest.mark.parametrize(
    "old,new,msg",
    [
        ("seed = 3", "seed = 3\ncolour = 1", "unknown key"),
        ('role = "setup"', 'role = "reference"', "role"),
        ("composition = {{ Zn = 0.01 }}", "composition = {{ Zn = 1.2 }}", "mass fraction"),
        ("composition = {{ Zn = 0.01 }}", "composition = {{ Zn = 0.6, Sn = 0.6 }}", "more than 1"),
        ("resolving_power = 3000", "resolving_power = 3000\nfwhm_nm = 0.1", "exactly one"),
        ("temperature_k = 10000.0", "temperature_k = -5.0", "out of range"),
        ('role = "setup"', 'role = "standard"', "standard"),
        ("composition = {{ Zn = 0.01 }}", 'standard = "NO-SUCH"', "not in the standards file"),
        ("n_pixels = 600", 'n_pixels = "many"', "number"),
    ],
)
def test_config_errors(tmp_path, old, new, msg):
    text = MINI.replace(old, new)
    assert text != MINI
    p = write_mini(tmp_path, text)
    with pytest.raises(ConfigError, match=msg):
        load_scenario(p)
    res = CliRunner().invoke(main, ["simulate", str(p), "-o", str(tmp_path / "x.h5")])
    assert res.exit_code == 2 and res.output.startswith("error:")
    assert not (tmp_path / "x.h5").exists()


def test_standards_truth_consistent_with_certificates():
    cert = load_standards_csv(STANDARDS)
    assert len([s for s in cert if s.startswith("HRM-CA")]) >= 7
    for sid, vals in cert.items():
        truth = draw_true_composition(sid, vals, "Cu", 20261116)
        again = draw_true_composition(sid, vals, "Cu", 20261116)
        assert truth == again
        assert sum(truth.values()) == pytest.approx(1.0, abs=1e-12)
        z = [(truth[el] - w) / u for el, (w, u) in vals.items() if el != "Cu" and u > 0]
        assert max(abs(v) for v in z) <= 2.5 + 1e-9
        assert any(abs(v) > 0 for v in z)
        # certificate layout: k = 2 and expanded uncertainties below 10 % relative above 0.01 %
        for w, u in vals.values():
            if w > 1e-4:
                assert 2 * u / w < 0.1


def test_standards_span_each_analyte_range():
    df = pd.read_csv(STANDARDS)
    assert set(df.columns) == {
        "standard_id",
        "matrix",
        "element",
        "mass_fraction",
        "expanded_uncertainty",
        "k",
        "unit",
        "source",
    }
    assert (df.k == 2).all()
    pct = df[(df.unit == "%") & (df.standard_id != "HRM-CA-108")]
    for el in ("Zn", "Sn", "Pb", "Ni", "Fe", "Al", "Mn"):
        v = pct[pct.element == el].mass_fraction
        assert v.max() / v.min() > 20, el  # more than a decade spanned by the standards


@pytest.mark.skipif(not (DEMO / "demo-day1.h5").exists(), reason="demo runs not generated")
@pytest.mark.parametrize("day", ["day1", "day2"])
def test_demo_runs_regenerate_identically(day):
    sc = load_scenario(DEMO / f"scenario-{day}.toml")
    seed = {"day1": 1, "day2": 2}[day]
    # a reduced regeneration: the earliest and the latest of the samples with the fewest shots
    # (each sample's random stream follows its position; a 40-shot lot costs a third of a
    # 120-shot setup disc) and the dark frames, compared bit for bit
    n = len(sc.samples)
    first = min(range(n), key=lambda k: (sc.samples[k].shots, k))
    last = max(range(n), key=lambda k: (-sc.samples[k].shots, k))
    assert first < last
    arr = simulate_arrays(sc, seed=seed, only=[first, last])
    with Run.open(DEMO / f"demo-{day}.h5") as run:
        for k in (first, last):
            sid = sc.samples[k].sample_id
            rows = np.flatnonzero(arr["sample_index"] == k)
            np.testing.assert_array_equal(run.sample_spectra(sid), arr["spectra"][rows].astype(float))
        np.testing.assert_array_equal(run.dark(), arr["dark"])
        np.testing.assert_array_equal(run.wavelength, arr["wavelength"])
        np.testing.assert_array_equal(run.shots.pulse_energy_mj.to_numpy(), arr["pulse_energy_mj"])
        assert run.n_shots == sum(s.shots for s in sc.samples)
    assert math.isfinite(arr["spectra"].astype(float).sum())


def test_memory_limit_refused_before_allocating(tmp_path, monkeypatch):
    from compquant.errors import ResourceLimitError

    sc = load_scenario(write_mini(tmp_path))
    monkeypatch.setenv("COMPQUANT_MEMORY_LIMIT", "10K")
    with pytest.raises(ResourceLimitError, match="memory"):
        simulate_arrays(sc)
