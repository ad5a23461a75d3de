"""Benchmark: time to simulate a run of thousands of shots (not part of the test suite).

Usage: python benchmarks/bench_simulate.py [n_shots]   (Cu-Zn brass, 12,288 pixels, slab model)
"""

from __future__ import annotations

import sys
import time

import numpy as np

from compquant.plasma import Instrument, SpectrumModel, default_lines
from compquant.simulate import Detector


def main(n_shots: int = 5000) -> None:
    wl = np.linspace(220.0, 640.0, 12288)
    t0 = time.perf_counter()
    model = SpectrumModel(
        Instrument(wl, resolving_power=2600.0),
        default_lines(218.0, 642.0, elements=["Cu", "Zn"]).with_default_stark(0.01),
        self_absorption=True,
        nominal_temperature_k=1e4,
        nominal_ne_cm3=8e16,
    )
    t1 = time.perf_counter()
    rng = np.random.default_rng(0)
    t = 1e4 * np.exp(0.025 * rng.standard_normal(n_shots))
    ne = 8e16 * np.exp(0.05 * rng.standard_normal(n_shots))
    rad = model.radiance({"Cu": 0.62, "Zn": 0.38}, t, ne, length_mm=0.2)
    t2 = time.perf_counter()
    det = Detector(
        photoelectrons_per_radiance=6.0,
        gain_counts_per_pe=2.0,
        bias_counts=800,
        read_noise_counts=6.0,
        dark_current_pe_per_s=400,
        exposure_s=0.05,
        saturation_counts=65000,
    )
    counts = det.digitise(det.mean_photoelectrons(rad, 1.0), np.zeros(wl.size), rng)
    t3 = time.perf_counter()
    print(f"{len(model.lines)} lines, {model.cell_mid.size} fine cells, {n_shots} shots x {wl.size} pixels")
    print(
        f"model build {t1 - t0:.2f} s; radiance {t2 - t1:.2f} s ({(t2 - t1) / n_shots * 1e3:.2f} ms/shot); "
        f"detector {t3 - t2:.2f} s; counts max {counts.max()}"
    )


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 5000)
