"""The whole flow: a simulated run -> certificates (PDF, JSON), LIMS CSV, run summary.

The run is simulated at test time with compquant.simulate (invented Cu-Zn test materials); the
simulation's true compositions are the reference the results are checked against.
"""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import jsonschema
import pytest
from click.testing import CliRunner
from pypdf import PdfReader

from compquant.analyse import analyse
from compquant.cli import main
from compquant.errors import CompquantError
from compquant.report.jsonform import load_schema
from compquant.simulate import load_scenario, simulate_run, truth_table

DEMO = Path(__file__).resolve().parents[1] / "demo_runs"

ISSUED = "2026-12-01T21:00:00Z"

SCENARIO = """
[scenario]
id = "test-cuzn"
title = "Cu-Zn test run (invented)"
start_time = "2026-11-16T08:30:00Z"
seed = 1
matrix = "Cu"
sample_interval_s = 90.0

[standards]
file = "stds.csv"
truth_seed = 7

[plasma]
temperature_k = 10000.0
temperature_rsd = 0.02
ne_cm3 = 8.0e16
ne_rsd = 0.05
length_mm = 0.5
self_absorption = true
continuum = true
max_stage = 2
stark_fallback_fwhm_nm = 0.01
stark_fallback_ne_cm3 = 1.0e17

[laser]
wavelength_nm = 1064.0
pulse_energy_mj = 60.0
pulse_energy_rsd = 0.03
spot_diameter_um = 120.0
repetition_rate_hz = 10.0
signal_rsd = 0.05

[instrument]
name = "test bench (fictional)"
wavelength_min_nm = 440.0
wavelength_max_nm = 520.0
n_pixels = 1500
resolving_power = 2600.0
oversample = 2
response_nm = [440.0, 520.0]
response = [1.0, 0.9]
photoelectrons_per_radiance = 2.5
gain_counts_per_pe = 2.0
bias_counts = 800.0
dark_current_pe_per_s = 400.0
read_noise_counts = 6.0
saturation_counts = 65000.0
exposure_s = 0.05
gate_delay_us = 1.0
gate_width_us = 10.0
atmosphere = "air, 1 atm"

[dark]
frames = 10
""" + "".join(
    f'\n[[samples]]\nid = "{sid}"\nrole = "{role}"\n{extra}\nshots = 15\n'
    for sid, role, extra in [
        ("T-1", "standard", 'standard = "T-1"'),
        ("T-2", "standard", 'standard = "T-2"'),
        ("T-3", "standard", 'standard = "T-3"'),
        ("T-4", "standard", 'standard = "T-4"'),
        ("SET-HI", "setup", "composition = { Zn = 0.30 }"),
        ("SET-LO", "setup", "composition = { Zn = 0.05 }"),
        ("CHK-5", "check", 'standard = "T-5"'),
        ("LOT-1", "unknown", 'composition = { Zn = 0.28, Mn = 0.02 }\ndescription = "brass strip"'),
        ('<b>LOT-2</b> & \\"x\\"', "unknown", 'composition = { Zn = 0.12 }\ndescription = "gilding metal"'),
    ]
)

STANDARDS = """standard_id,matrix,element,mass_fraction,expanded_uncertainty,k,unit,source
T-1,copper alloy,Zn,5.00,0.05,2,%,invented for tests
T-1,copper alloy,Cu,95.00,0.10,2,%,invented for tests
T-2,copper alloy,Zn,15.00,0.08,2,%,invented for tests
T-2,copper alloy,Cu,85.00,0.10,2,%,invented for tests
T-3,copper alloy,Zn,25.00,0.10,2,%,invented for tests
T-3,copper alloy,Cu,75.00,0.12,2,%,invented for tests
T-4,copper alloy,Zn,35.00,0.12,2,%,invented for tests
T-4,copper alloy,Cu,65.00,0.12,2,%,invented for tests
T-5,copper alloy,Zn,20.00,0.10,2,%,invented for tests
T-5,copper alloy,Cu,80.00,0.12,2,%,invented for tests
"""

METHOD = """
[method]
id = "TEST-CUZN"
version = "1.0"
technique = "LIBS"
description = "Zn in copper-zinc alloys (test method)"

[preprocess.baseline]
method = "snip"
max_half_window = 20

[[lines]]
id = "Cu I 510.554"
[[lines]]
id = "Cu I 465.112"
[[lines]]
id = "Zn I 481.053"
[[lines]]
id = "Zn I 472.215"

[calibration]
basis = "ratio"
matrix_element = "Cu"
internal_standard = "Cu I 510.554"
model = "linear"

[[calibration.analytes]]
element = "Zn"
line = "Zn I 481.053"

[cf]
ne_method = "fixed"
ne_fixed_cm3 = 8.0e16
fit = "boltzmann"
mc_draws = 30
"""


@pytest.fixture(scope="module")
def work(tmp_path_factory):
    d = tmp_path_factory.mktemp("flow")
    (d / "stds.csv").write_text(STANDARDS)
    (d / "scenario.toml").write_text(SCENARIO)
    (d / "method.toml").write_text(METHOD)
    # a wrong certificate for the check material: its check must fail
    (d / "stds-bad.csv").write_text(STANDARDS.replace("T-5,copper alloy,Zn,20.00", "T-5,copper alloy,Zn,45.00"))
    sc = load_scenario(d / "scenario.toml")
    simulate_run(sc, d / "run1.h5", seed=11)
    simulate_run(sc, d / "run2.h5", seed=12)
    truth = truth_table(sc)
    return d, {(r.sample_id, r.element): r.mass_fraction for r in truth.itertuples()}


@pytest.fixture(scope="module")
def first(work):
    d, _ = work
    out = analyse(
        d / "run1.h5",
        d / "method.toml",
        standards=d / "stds.csv",
        lab=DEMO / "lab.toml",
        spec=DEMO / "spec-HB58-Pb2.toml",
        outdir=d / "out1",
        issued_at=ISSUED,
    )
    return out


def test_detected_but_not_quantified(first):
    """LOT-1 holds 2 % Mn, which the method does not measure: qualitative identification of the
    sample's mean spectrum against the whole line database (compquant.identify) must list it on
    the certificate, and must not list the quantified elements (the simulation's known truth)."""
    by_id = {c.sample_id: json.loads(open(c.json, encoding="utf-8").read()) for c in first.certificates}
    assert "Mn" in by_id["LOT-1"]["detected_not_quantified"]
    for doc in by_id.values():
        assert not {"Zn", "Cu"} & set(doc["detected_not_quantified"])
    assert "Mn" in _text(next(c.pdf for c in first.certificates if c.sample_id == "LOT-1"))


def _text(pdf_path) -> str:
    return "\n".join(p.extract_text() for p in PdfReader(str(pdf_path)).pages)


def test_outputs_written(first, work):
    d, truth = work
    names = sorted(p.name for p in (d / "out1").iterdir())
    assert "lims.csv" in names and "summary.json" in names and "calibration.json" in names
    assert len(first.certificates) == 2  # the two unknowns only
    assert not [p for p in (d / "out1").rglob("*.part")]
    schema = load_schema()
    for c in first.certificates:
        doc = json.loads(open(c.json, encoding="utf-8").read())
        jsonschema.validate(doc, schema)
        assert doc["sample"]["measured"].startswith("2026-11-16T")
        assert doc["calibration"]["standards"] and doc["quality_control"]["check_samples"]
        assert doc["conformity"]["grade"] == "HB58-Pb2"
        # this small test calibration (4 standards, 15 shots) has a Zn LOQ of about 35 %: the check
        # material's 20 % Zn lies below it, so the check verifies nothing and the release rules
        # (compquant.report.release, rule check-not-evaluated) keep the certificates from release
        assert c.pages >= 2 and not c.valid_for_release
        assert doc["release"]["rules"] == ["check-not-evaluated"], doc["release"]
        # physics check against the simulation's truth: |found - true| within U (k = 2), with a
        # 1.5x allowance for the demo-sized run (15 shots per sample)
        zn = [r for r in doc["results"] if r["element"] == "Zn"][0]
        true = truth[(c.sample_id, "Zn")]
        assert zn["mass_fraction"] is not None
        assert abs(zn["mass_fraction"] - true) <= 1.5 * zn["U"], (c.sample_id, zn["mass_fraction"], true, zn["U"])
        # the certificate text carries the printed numbers of the JSON
        text = " ".join(_text(c.pdf).split())
        for r in doc["results"]:
            assert r["reported"]["value"] in text
        assert "End of certificate" in text and c.number in text
    hostile = [c for c in first.certificates if "<b>" in c.sample_id][0]
    assert "/" not in hostile.pdf.rsplit("/", 1)[1] and "<" not in hostile.pdf
    assert '<b>LOT-2</b> & "x"' in _text(hostile.pdf)
    summary = json.loads((d / "out1" / "summary.json").read_text())
    assert summary["schema"] == "compquant-run-summary" and len(summary["certificates"]) == 2
    assert summary["check_samples"][0]["passed"] is True
    rows = list(csv.DictReader(io.StringIO((d / "out1" / "lims.csv").read_text())))
    assert {r["sample_id"] for r in rows} == {c.sample_id for c in first.certificates}
    assert {r["certificate_number"] for r in rows} == {c.number for c in first.certificates}


def test_analysis_output_frame_and_summary(first, work):
    """AnalysisOutput.to_frame() holds the numbers as printed on the certificates (the JSON form,
    docs/certificate.md) and summary() names every certificate and its release state."""
    d, _ = work
    frame = first.to_frame()
    assert list(frame.columns) == ["sample_id", "certificate", "element", "value", "U", "unit", "flags",
                                   "valid_for_release"]
    for c in first.certificates:
        doc = json.loads(open(c.json, encoding="utf-8").read())
        rows = frame[frame["certificate"] == c.number].set_index("element")
        assert set(rows.index) == {r["element"] for r in doc["results"]}
        for r in doc["results"]:
            assert rows.loc[r["element"], "value"] == r["reported"]["value"]
    text = first.summary()
    assert all(c.number in text for c in first.certificates)
    assert "valid for release:" in text and "NOT valid: " in text  # check-not-evaluated (above)


def test_workflow_steps_called_one_by_one_give_the_same_outputs(first, work):
    """The named steps of compquant.workflow, called as a notebook would, issue the same
    certificates (numbers, results, LIMS rows) as analyse() (same inputs and issue time; the
    certificate number hashes the result set, docs/certificate.md)."""
    from compquant.workflow import (
        assemble_certificates,
        check_options,
        measure,
        prepare,
        quantify_samples,
        screen_samples,
        stage_outputs,
    )

    d, _ = work
    job = prepare(d / "run1.h5", d / "method.toml", standards=d / "stds.csv", lab=DEMO / "lab.toml",
                  spec=DEMO / "spec-HB58-Pb2.toml", outdir=d / "out-steps", issued_at=ISSUED)
    check_options(job)
    m = measure(job)
    sc = screen_samples(job, m)
    assert sc.unknowns == [c.sample_id for c in first.certificates]
    qd = quantify_samples(job, m, sc)
    assert set(qd.curves) >= {"Zn"} and qd.cal_text is not None
    drafts = assemble_certificates(job, m, sc, qd)
    out, certs = stage_outputs(job, m, qd, drafts)
    assert [c.number for c in out.certificates] == [c.number for c in first.certificates]
    assert [c.results for c in out.certificates] == [c.results for c in first.certificates]
    assert (d / "out-steps" / "lims.csv").read_bytes() == (d / "out1" / "lims.csv").read_bytes()
    assert (d / "out-steps" / "calibration.json").read_bytes() == (d / "out1" / "calibration.json").read_bytes()


def test_cli_repeats_identical_outputs(first, work):
    d, _ = work
    r = CliRunner().invoke(
        main,
        [
            "analyse",
            str(d / "run1.h5"),
            "--method",
            str(d / "method.toml"),
            "--standards",
            str(d / "stds.csv"),
            "--lab",
            str(DEMO / "lab.toml"),
            "--spec",
            str(DEMO / "spec-HB58-Pb2.toml"),
            "-o",
            str(d / "out1b"),
            "--issued-at",
            ISSUED,
            "--quiet",
        ],
    )
    assert r.exit_code == 3, r.output  # completed, not valid for release (see test_outputs_written)
    assert "LOT-1" in r.output and "certificates:" in r.output
    assert "NOT VALID FOR RELEASE: 2 of 2 certificates (exit code 3)" in r.output
    for name in ["lims.csv", "summary.json", "calibration.json"] + [
        c.json.rsplit("/", 1)[1] for c in first.certificates
    ]:
        assert (d / "out1" / name).read_bytes() == (d / "out1b" / name).read_bytes(), name
    for c in first.certificates:
        name = c.pdf.rsplit("/", 1)[1]
        assert (d / "out1" / name).read_bytes() == (d / "out1b" / name).read_bytes(), name


def test_same_inputs_from_another_folder_give_the_same_certificate_numbers(first, work, tmp_path):
    """A certificate number names the result set (inputs by content, results), not where the
    files were: the same run, method and standards copied elsewhere give the same numbers (the
    written calibration JSON holds the input paths and is left out of the digest).  Common
    practice: a re-issue of identical results keeps its number."""
    import shutil

    d, _ = work
    for name in ("run1.h5", "method.toml", "stds.csv"):
        shutil.copy2(d / name, tmp_path / name)
    again = analyse(tmp_path / "run1.h5", tmp_path / "method.toml", standards=tmp_path / "stds.csv",
                    lab=DEMO / "lab.toml", spec=DEMO / "spec-HB58-Pb2.toml", outdir=tmp_path / "out",
                    issued_at=ISSUED)
    assert sorted(c.number for c in again.certificates) == sorted(c.number for c in first.certificates)
    assert (tmp_path / "out" / "calibration.json").read_bytes() != (d / "out1" / "calibration.json").read_bytes()


def test_saved_calibration_with_drift_on_a_later_run(first, work):
    d, truth = work
    out = analyse(
        d / "run2.h5",
        d / "method.toml",
        calibration=first.calibration_json,
        lab=DEMO / "lab.toml",
        outdir=d / "out2",
        issued_at=ISSUED,
        figures=False,
    )
    doc = json.loads(open(out.certificates[0].json, encoding="utf-8").read())
    assert doc["quality_control"]["drift"]["applied"] is True
    assert set(doc["quality_control"]["drift"]["setup_samples"]) == {"SET-HI", "SET-LO"}
    assert doc["calibration"]["calibration_id"] == json.loads(open(first.calibration_json).read())["calibration_id"]
    roles = {f["role"] for f in doc["provenance"]["files"]}
    assert {"run", "method", "calibration", "lab profile"} <= roles
    zn = [r for r in doc["results"] if r["element"] == "Zn"][0]
    assert abs(zn["mass_fraction"] - truth[(out.certificates[0].sample_id, "Zn")]) <= 1.5 * zn["U"]


def test_failed_check_sample_blocks_release(work):
    d, _ = work
    out = analyse(
        d / "run1.h5",
        d / "method.toml",
        standards=d / "stds-bad.csv",
        lab=DEMO / "lab.toml",
        outdir=d / "out-bad",
        issued_at=ISSUED,
        figures=False,
    )
    assert not out.valid_for_release
    for c in out.certificates:
        assert not c.valid_for_release
        first_page = PdfReader(c.pdf).pages[0].extract_text()
        assert "NOT VALID FOR RELEASE" in first_page and "CHK-5" in first_page
    rows = list(csv.DictReader(io.StringIO((d / "out-bad" / "lims.csv").read_text())))
    assert {r["release"] for r in rows} == {"not valid for release"}


def test_calibration_free_path(work):
    d, _ = work
    out = analyse(
        d / "run1.h5", d / "method.toml", cf=True, lab=DEMO / "lab.toml", outdir=d / "out-cf", issued_at=ISSUED
    )
    assert out.basis == "cf" and out.certificates
    doc = json.loads(open(out.certificates[0].json, encoding="utf-8").read())
    assert doc["calibration"] is None and doc["plasma"]["temperature_K"] > 3000
    assert any(f["kind"] == "boltzmann" for f in doc["figures"])
    total = sum(r["mass_fraction"] for r in doc["results"] if r["mass_fraction"] is not None)
    assert total == pytest.approx(1.0, abs=1e-6)  # closure to 100 % (calibration-free)
    text = _text(out.certificates[0].pdf)
    assert "Plasma conditions" in text and "McWhirter" in text


def test_cli_errors_and_help(work):
    d, _ = work
    r = CliRunner().invoke(
        main, ["analyse", str(d / "run1.h5"), "--method", str(d / "method.toml"), "-o", str(d / "x")]
    )
    assert r.exit_code == 2 and "error:" in r.output and "--standards" in r.output
    r = CliRunner().invoke(
        main,
        [
            "analyse",
            str(d / "run1.h5"),
            "--method",
            str(d / "method.toml"),
            "--cf",
            "--lab",
            str(d / "nope.toml"),
            "-o",
            str(d / "x"),
        ],
    )
    assert r.exit_code == 2 and "nope.toml" in r.output
    # help carries a short note (issue 20: the full text filled half of it) ...
    r = CliRunner().invoke(main, ["analyse", "--help"])
    assert r.exit_code == 0
    for word in ("Class 4", "fumes", "argon", "licensed laser safety officer", "compquant safety"):
        assert word.lower() in " ".join(r.output.split()).lower()
    # ... and 'compquant safety' the full notes (compquant.report.safety)
    r = CliRunner().invoke(main, ["safety"])
    assert r.exit_code == 0
    for word in ("SAFETY NOTES", "Class 4", "ANSI Z136.1", "beryllium", "argon", "licensed safety officer"):
        assert word.lower() in r.output.lower()


def test_saved_calibration_without_setup_samples_is_a_deviation(first, work, tmp_path):
    d, _ = work
    text = SCENARIO
    for sid in ("SET-HI", "SET-LO"):
        i = text.index(f'id = "{sid}"')
        start = text.rindex("[[samples]]", 0, i)
        end = text.index("[[samples]]", i)
        text = text[:start] + text[end:]
    (tmp_path / "stds.csv").write_text(STANDARDS)
    (tmp_path / "scenario.toml").write_text(text)
    simulate_run(load_scenario(tmp_path / "scenario.toml"), tmp_path / "run3.h5", seed=13)
    out = analyse(
        tmp_path / "run3.h5",
        d / "method.toml",
        calibration=first.calibration_json,
        outdir=tmp_path / "out3",
        issued_at=ISSUED,
        figures=False,
    )
    doc = json.loads(open(out.certificates[0].json, encoding="utf-8").read())
    assert doc["quality_control"]["drift"]["applied"] is False
    assert doc["deviations"] and "drift standardisation" in doc["deviations"][0]
    assert any("no_drift_correction" in r["flags"] for r in doc["results"])
    text = " ".join(_text(out.certificates[0].pdf).split())
    assert "drift standardisation with setup samples was not possible" in text
    assert "No lab profile was given" in text  # no --lab: stated on the certificate


def test_calibration_free_path_reads_the_runs_response_basis(work, tmp_path):
    """The run's response-curve basis reaches the calibration-free analysis of ``analyse`` (issue 18,
    item 5): the simulated run states "energy"; the same run relabelled "photon" is converted (line
    intensities times hc/lambda changes the Boltzmann slopes, so T differs), and with no stated basis
    it is refused in one clear error unless [cf] response_basis says it (docs/calibration-free.md)."""
    import shutil

    import h5py

    d, _ = work
    temps = {}
    for basis in ("energy", "photon", None):
        run = tmp_path / f"run-{basis}.h5"
        shutil.copy(d / "run1.h5", run)
        with h5py.File(run, "a") as f:
            assert f["response"].attrs["basis"] == "energy"  # what simulate records
            if basis is None:
                del f["response"].attrs["basis"]
            else:
                f["response"].attrs["basis"] = basis
        kw = dict(cf=True, lab=DEMO / "lab.toml", outdir=tmp_path / f"out-{basis}", issued_at=ISSUED, figures=False)
        if basis is None:
            with pytest.raises(CompquantError, match="unknown basis"):
                analyse(run, d / "method.toml", **kw)
            continue
        out = analyse(run, d / "method.toml", **kw)
        doc = json.loads(open(out.certificates[0].json, encoding="utf-8").read())
        temps[basis] = doc["plasma"]["temperature_K"]
    assert temps["photon"] != pytest.approx(temps["energy"], rel=1e-3), temps
