"""``compquant cf`` end to end: forward-model run → line pipeline → calibration-free results.

The run is made by the plasma forward model (tests/cf_synth.py); the truth is the composition,
temperature and electron density given to it.
"""

from __future__ import annotations

import json

import cf_synth
import pandas as pd
import pytest
from click.testing import CliRunner

from compquant.cli import main

TRUE = {"LOT-1": {"Cu": 0.63, "Zn": 0.37}, "LOT-2": {"Cu": 0.85, "Zn": 0.15}}


@pytest.fixture(scope="module")
def run_and_method(tmp_path_factory):
    d = tmp_path_factory.mktemp("cf")
    cf_synth.make_run(d / "run.h5", [(k, "unknown", v) for k, v in TRUE.items()], shots=4, pitch=0.015,
                      T=11000.0, ne=5e16)
    (d / "method.toml").write_text(cf_synth.method_toml("mc_draws = 60\nseed = 5\n"))
    return d


def test_cf_command_end_to_end(run_and_method):
    d = run_and_method
    res = CliRunner().invoke(main, ["cf", str(d / "run.h5"), "--method", str(d / "method.toml"),
                                    "-o", str(d / "cf.csv"), "--plots", str(d / "plots")])
    assert res.exit_code == 0, res.output
    summary = pd.read_csv(d / "cf.csv")
    assert set(summary["species"]) == {"Cu I", "Cu II", "Zn I", "Zn II"}
    results = pd.read_csv(d / "cf-results.csv")
    assert list(results.columns) == ["sample_id", "element", "mass_fraction", "u", "U", "k", "lod", "loq",
                                     "below_lod", "flags", "basis", "line_id"]
    for r in results.itertuples():
        # forward model → window-integrated lines (4 noisy shots) → CF: majors within 5 % relative
        # or within their expanded uncertainty U (k = 2). Since the forward model emits every Cu/Zn
        # line of the published database (issue 15; weak neighbours blend into the 0.24 nm
        # windows) Zn in LOT-2 comes out 0.168 ± 0.037 (U) against 0.15: 12 % high but inside U
        # (with the former 234-line list 0.148). The accuracy benchmark measures this properly.
        truth = TRUE[r.sample_id][r.element]
        assert abs(r.mass_fraction - truth) <= max(0.05 * truth, r.U)
        assert r.basis == "cf" and r.U == pytest.approx(2 * r.u)
    doc = json.loads((d / "cf.json").read_text())
    for r in doc["results"]:
        # published database: T 11 332 / 10 690 K, n_e 7.7e16 / 3.7e16 cm^-3 (former list:
        # 11 207 / 11 035 K, 6.1e16 / 5.1e16) -- blends in the forward model, see above.  With the
        # blend correction (calibration-free.md §1b): 11 438 / 11 020 K, 8.0e16 / 5.1e16.  LOT-2 is
        # now within 0.2 %; in LOT-1 the window of Cu I 249.215 reads 2.11 where the noise-free
        # spectrum gives 1.49 (a read-noise excursion of the 4 shots), which the uncorrected
        # side-band interference of Cu II 248.965 (-0.43) used to hide: 4 % instead of 3 % (and nₑ,
        # d ln nₑ ≈ 9 d ln T, +60 % instead of +55 %).  The excursion is chance, not an
        # under-stated u: 2.8 σ of a 4-shot mean (σ = 0.223 from the 5-count read noise; one of the
        # 34 line means beyond 2.8 σ: 17 %), and its stated u (0.110, half of σ) comes from 4 shots
        # whose sd fell to 0.49 σ (χ² with 3 dof: 13 %).  benchmarks/line_u_coverage.py finds
        # u = sd/√n unbiased, ±2u covering 86 % with 4 shots as Student t with 3 dof predicts and
        # ±t₀.₉₇₅(3)u 95 %; the Monte Carlo draws the line means from that t (calibration-free.md §8).
        assert r["temperature_k"] == pytest.approx(11000.0, rel=0.045)
        assert r["electron_density_cm3"] == pytest.approx(5e16, rel=0.65)
    for sid in TRUE:
        for kind in ("boltzmann", "saha_boltzmann"):
            png = d / "plots" / f"{kind}_{sid}.png"
            assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_cf_command_rejects_bad_cf_table(run_and_method):
    d = run_and_method
    (d / "bad.toml").write_text(cf_synth.method_toml("temprature = 3\n"))
    res = CliRunner().invoke(main, ["cf", str(d / "run.h5"), "--method", str(d / "bad.toml"),
                                    "-o", str(d / "x.csv")])
    assert res.exit_code == 2
    assert "unknown key" in res.output and "[cf]" in res.output


def test_cf_failure_reason_is_shown_even_with_quiet(run_and_method):
    # nₑ from H-alpha is asked for, but the run has no H I 656.28 nm line: every sample fails,
    # and the reason reaches the user with --quiet too, in the one error line (nothing is written)
    d = run_and_method
    (d / "ha.toml").write_text(cf_synth.method_toml('ne_method = "h_alpha"\nmc_draws = 0\n'))
    res = CliRunner().invoke(main, ["cf", str(d / "run.h5"), "--method", str(d / "ha.toml"),
                                    "-o", str(d / "ha.csv"), "--quiet"])
    assert res.exit_code == 2
    err = res.output.split("error:")[-1]
    assert res.output.count("error:") == 1 and "LOT-1" in err and "has no usable data" in err
    assert not (d / "ha.csv").exists()
