"""Certificate figures: valid, repeatable PNGs from plain arrays."""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy import constants

from compquant.errors import InputError
from compquant.report.figures import boltzmann_png, calibration_png, spectrum_png
from compquant.report.jsonform import read_certificate_json

PNG = b"\x89PNG\r\n\x1a\n"


def _size(png: bytes) -> tuple[int, int]:
    # PNG IHDR: width and height as big-endian 32-bit integers at bytes 16-24 (PNG specification)
    return int.from_bytes(png[16:20], "big"), int.from_bytes(png[20:24], "big")


def test_spectrum_png_is_repeatable():
    wl = np.linspace(300, 400, 500)
    y = np.exp(-0.5 * ((wl - 324.754) / 0.1) ** 2)
    a = spectrum_png(wl, y, [("Cu I 324.754", 324.754)], title="t")
    b = spectrum_png(wl, y, [("Cu I 324.754", 324.754)], title="t")
    assert a.startswith(PNG) and a == b
    w, h = _size(a)
    assert w > h > 200
    with pytest.raises(ValueError):
        spectrum_png(wl, y[:-1])


def test_calibration_png():
    png = calibration_png(
        [1, 2, 3],
        [0.1, 0.2, 0.3],
        fit_x=[0, 4],
        fit_y=[0, 0.4],
        y_err=[0.01] * 3,
        labels=["S1", "S2", "S3"],
        sample_x=2.5,
        sample_y=0.25,
        sample_xerr=0.1,
    )
    assert png.startswith(PNG)
    with pytest.raises(ValueError):
        calibration_png([1, 2], [1])


def test_boltzmann_png_with_a_temperature_from_codata():
    # slope = -1 / (k_B T), k_B from CODATA via scipy.constants (eV/K)
    kB = constants.physical_constants["Boltzmann constant in eV/K"][0]
    T = 9000.0
    E = np.array([3.8, 4.5, 5.1, 6.0])
    y = -E / (kB * T) + 20
    png = boltzmann_png(E, y, ["Fe I"] * 4, fits={"Fe I": (-1 / (kB * T), 20.0)}, title="T = 9000 K")
    assert png.startswith(PNG)
    with pytest.raises(ValueError):
        boltzmann_png(E, y[:2])


def test_read_certificate_json_checks_schema(tmp_path):
    p = tmp_path / "c.json"
    p.write_text(json.dumps({"schema": "compquant-certificate", "schema_version": 99}))
    with pytest.raises(InputError, match="version 99"):
        read_certificate_json(p)
    p.write_text("{")
    with pytest.raises(InputError, match="not a JSON"):
        read_certificate_json(p)
    p.write_text(json.dumps({"schema": "other"}))
    with pytest.raises(InputError, match="not a compquant certificate"):
        read_certificate_json(p)


def test_docs_safety_page_matches_the_code():
    from pathlib import Path

    from compquant.report.safety import safety_markdown

    page = (Path(__file__).resolve().parents[1] / "docs" / "safety.md").read_text("utf-8")
    assert page.split("\n", 1)[1] == safety_markdown(1)
