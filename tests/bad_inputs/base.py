"""Valid base inputs that the bad-input corpus mutates (invented test data, not a real material).

A small run with Cu and Zn lines between 320 and 340 nm: four certified standards (Zn 5-35 %),
a blank, a check sample and two unknowns; the Zn line scales with the Zn/Cu mass-fraction ratio so
that a calibration from it works. A method, a standards file, a lab profile and a specification
that go with it.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from compquant.run import write_run

# line positions from the shipped line list (compquant/data/atomic): Cu I 324.754, Cu I 327.396,
# Zn I 330.259, Zn I 334.502
LINES = {"Cu I 324.754": 324.754, "Cu I 327.396": 327.396, "Zn I 330.259": 330.259, "Zn I 334.502": 334.502}

SAMPLES = [
    # sample_id, role, standard_ref, Zn mass fraction
    ("STD-05", "standard", "ZS-05", 0.05),
    ("STD-15", "standard", "ZS-15", 0.15),
    ("STD-25", "standard", "ZS-25", 0.25),
    ("STD-35", "standard", "ZS-35", 0.35),
    ("BLANK", "blank", "", 0.0),
    ("CHK-20", "check", "ZS-20", 0.20),
    ("LOT-1", "unknown", "", 0.28),
    ("LOT-2", "unknown", "", 0.12),
]

STANDARDS_CSV = """standard_id,matrix,element,mass_fraction,expanded_uncertainty,k,unit,source
ZS-05,copper alloy,Zn,5.00,0.05,2,%,invented for tests
ZS-05,copper alloy,Cu,95.00,0.10,2,%,invented for tests
ZS-15,copper alloy,Zn,15.00,0.08,2,%,invented for tests
ZS-15,copper alloy,Cu,85.00,0.10,2,%,invented for tests
ZS-25,copper alloy,Zn,25.00,0.10,2,%,invented for tests
ZS-25,copper alloy,Cu,75.00,0.12,2,%,invented for tests
ZS-35,copper alloy,Zn,35.00,0.12,2,%,invented for tests
ZS-35,copper alloy,Cu,65.00,0.12,2,%,invented for tests
ZS-20,copper alloy,Zn,20.00,0.10,2,%,invented for tests
ZS-20,copper alloy,Cu,80.00,0.12,2,%,invented for tests
"""

METHOD_TOML = """
[method]
id = "HARDEN-TEST"
version = "1.0"
technique = "LIBS"
description = "Zn in copper alloys (test method for the bad-input corpus)"

[preprocess.baseline]
method = "snip"
max_half_window = 15

[[lines]]
id = "Cu I 324.754"
[[lines]]
id = "Cu I 327.396"
[[lines]]
id = "Zn I 330.259"
[[lines]]
id = "Zn I 334.502"

[calibration]
basis = "ratio"
matrix_element = "Cu"
internal_standard = "Cu I 327.396"
model = "linear"

[[calibration.analytes]]
element = "Zn"
line = "Zn I 330.259"
"""

LAB_TOML = """
[lab]
name = "Test Bench Laboratory (fictional)"
address = ["1 Nowhere Road", "Testville (fictional)"]
certificate_prefix = "TBL"

[signatory]
name = "A. Tester (fictional)"
title = "Analyst"
"""

SPEC_TOML = """
[specification]
name = "test brass"
grade = "TB-1"
source = "invented for tests"
decision_rule = "simple-acceptance"

[limits.Zn]
min = 5.0
max = 40.0
unit = "%"
"""

N_PIXELS = 500
SHOTS = 6


def base_arrays(seed: int = 3, n_pixels: int = N_PIXELS, shots: int = SHOTS, zn_signal=None, noise: bool = True):
    """Wavelength axis, uint16 spectra, sample table, sample index and dark frames.

    ``zn_signal(ratio) -> factor`` replaces the Zn line strength (default: proportional to the
    Zn/Cu ratio); ``noise=False`` gives identical shots (no shot noise, no pulse scatter)."""
    rng = np.random.default_rng(seed)
    wl = np.linspace(320.0, 340.0, n_pixels)
    sigma = 0.03

    def peak(c):
        return np.exp(-0.5 * ((wl - c) / sigma) ** 2)

    rows, idx = [], []
    for k, (_sid, _role, _ref, zn) in enumerate(SAMPLES):
        cu = 1.0 - zn
        ratio = zn / cu if zn_signal is None else zn_signal(zn / cu)
        mean = (
            300.0
            + 9000.0 * peak(LINES["Cu I 324.754"])
            + 4000.0 * peak(LINES["Cu I 327.396"])
            + 6000.0 * ratio * peak(LINES["Zn I 330.259"])
            + 3000.0 * ratio * peak(LINES["Zn I 334.502"])
        )
        for _ in range(shots):
            if noise:
                amp = rng.normal(1.0, 0.02)
                rows.append(rng.poisson(np.clip(200 + (mean - 200) * amp, 0, None)))
            else:
                rows.append(np.round(mean))
            idx.append(k)
    spectra = np.asarray(rows).astype(np.uint16)
    samples = [
        {"sample_id": sid, "role": role, "standard_ref": ref, "description": f"test sample {sid}"}
        for sid, role, ref, _ in SAMPLES
    ]
    dark = (rng.poisson(200, size=(4, n_pixels)) if noise else np.full((4, n_pixels), 200)).astype(np.uint16)
    return wl, spectra, samples, np.asarray(idx), dark


def write_base_run(path: Path, **overrides) -> Path:
    wl, spectra, samples, idx, dark = base_arrays()
    kw = dict(
        dark=dark,
        saturation=65535,
        exposure_s=0.05,
        dark_exposure_s=0.05,
        instrument={"description": "test spectrometer (fictional)", "resolving_power": 5000},
        acquisition={"technique": "LIBS", "gate_delay_us": 1.0, "gate_width_us": 10.0},
        created="2026-12-01T00:00:00Z",
    )
    kw.update(overrides)
    write_run(path, wl, spectra, samples, idx, **kw)
    return path


def write_base_files(folder: Path) -> dict[str, Path]:
    """The valid base set: run, method, standards, lab profile, specification."""
    folder.mkdir(parents=True, exist_ok=True)
    files = {
        "run": write_base_run(folder / "base-run.h5"),
        "method": folder / "base-method.toml",
        "standards": folder / "base-standards.csv",
        "lab": folder / "base-lab.toml",
        "spec": folder / "base-spec.toml",
    }
    files["method"].write_text(METHOD_TOML, encoding="utf-8")
    files["standards"].write_text(STANDARDS_CSV, encoding="utf-8")
    files["lab"].write_text(LAB_TOML, encoding="utf-8")
    files["spec"].write_text(SPEC_TOML, encoding="utf-8")
    return files
