"""Invented test data for the preprocessing and line-measurement tests (not a test module)."""

from __future__ import annotations

import numpy as np
from scipy.special import voigt_profile

from compquant.method import method_from_dict
from compquant.run import write_run

WL = np.linspace(320.0, 340.0, 2001)  # 0.01 nm pixels
SIGMA, GAMMA = 0.012, 0.008  # nm, Voigt widths (FWHM about 0.041 nm)
LINES = {"Cu I 324.754": 324.754, "Cu I 327.396": 327.396, "Zn I 330.259": 330.259, "Zn I 334.502": 334.502}


def spectrum(areas: dict[str, float], wl=WL, shift: float = 0.0) -> np.ndarray:
    """Continuum + Voigt lines of the given areas (counts*nm), no noise."""
    y = 150.0 + 4.0 * (wl - wl[0]) + 30 * np.exp(-0.5 * ((wl - 331) / 6) ** 2)
    for lid, a in areas.items():
        y = y + a * voigt_profile(wl - LINES[lid] - shift, SIGMA, GAMMA)
    return y


def make_run(
    path,
    samples_spec,
    *,
    seed=0,
    dark_level=100.0,
    saturation=None,
    noise=True,
    shift_by_sample=None,
    misfire=None,
    pulse=False,
):
    """Write a run; ``samples_spec`` = list of (sample_id, role, n_shots, areas dict)."""
    rng = np.random.default_rng(seed)
    rows, idx, samples = [], [], []
    for s, (sid, role, n, areas) in enumerate(samples_spec):
        samples.append(
            {
                "sample_id": sid,
                "role": role,
                "standard_ref": f"REF-{sid}" if role in ("standard", "check") else "",
                "description": "invented",
            }
        )
        d = (shift_by_sample or {}).get(sid, 0.0)
        base = spectrum(areas, shift=d)
        for _ in range(n):
            y = base * rng.normal(1.0, 0.03) if noise else base.copy()
            if noise:
                y = y + rng.normal(0, 1.0, y.size) * np.sqrt(np.maximum(y, 1))
            rows.append(y + dark_level)
            idx.append(s)
    X = np.array(rows)
    if misfire is not None:
        for i in misfire:
            X[i] = dark_level + (rng.normal(0, 1.0, WL.size) if noise else 0.0)
    dark = dark_level + (rng.normal(0, 1.0, (4, WL.size)) if noise else np.zeros((4, WL.size)))
    if saturation is not None:
        X = np.minimum(X, saturation)
    kw = {}
    if pulse:
        kw["pulse_energy_mj"] = rng.normal(50, 1, X.shape[0])
    write_run(path, WL, X, samples, np.array(idx), dark=dark, saturation=saturation, dtype="float64", **kw)
    return path


def method(lines=None, **sections):
    """A method dict -> Method, window mode by default."""
    data = {
        "method": {"id": "test-method", "version": "1", "technique": "LIBS"},
        "preprocess": {"baseline": {"method": "snip", "max_half_window": 25}},
        "measure": {"window_nm": 0.3, "side_nm": 0.1},
        "lines": lines if lines is not None else [{"id": k} for k in LINES],
    }
    for k, v in sections.items():
        if isinstance(v, dict) and isinstance(data.get(k), dict):
            merged = dict(data[k])
            merged.update(v)
            data[k] = merged
        else:
            data[k] = v
    return method_from_dict(data)
