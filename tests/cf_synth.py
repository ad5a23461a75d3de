"""Forward-model runs for the calibration-free end-to-end tests (invented brass-like samples).

Spectra come from :func:`compquant.plasma.synthesize` (LTE, homogeneous slab, Voigt profiles,
instrument function) with the shipped Cu/Zn atomic data; counts = radiance × gain + Gaussian
read noise; written with :func:`compquant.run.write_run`.
"""

from __future__ import annotations

import numpy as np

LINES = ["Cu I 324.754", "Cu I 327.396", "Cu I 296.117", "Cu I 282.437", "Cu I 261.837", "Cu I 249.215",
         "Cu II 224.700", "Cu II 227.626", "Cu II 224.262",
         "Zn I 307.590", "Zn I 328.233", "Zn I 330.259", "Zn I 334.502",
         "Zn II 202.548", "Zn II 206.200", "Zn II 250.199", "Zn II 255.795"]


def method_toml(cf: str = "", mode: str = "window") -> str:
    lines = "\n".join(f'[[lines]]\nid = "{x}"\n' for x in LINES)
    return f"""[method]
id = "CF-BRASS-TEST"
version = "1"
technique = "LIBS"

[preprocess.dark]
enabled = false
[preprocess.response]
enabled = false
[preprocess.saturation]
enabled = false
[preprocess.qc]
enabled = false
[preprocess.baseline]
method = "none"

[measure]
mode = "{mode}"
window_nm = 0.24
side_nm = 0.1
gap_nm = 0.02
profile = "voigt"

{lines}
[cf]
{cf}
"""


def make_run(path, samples, *, shots=6, T=11000.0, ne=5e16, length_mm=0.05, self_absorption=False,
             noise=0.002, seed=1, resolving_power=6000.0, lo=200.0, hi=340.0, pitch=0.01):
    """``samples``: list of (sample_id, role, composition mass fractions)."""
    from compquant.plasma import synthesize
    from compquant.run import write_run

    rng = np.random.default_rng(seed)
    wl = np.arange(lo, hi, pitch)
    spectra, index, table = [], [], []
    for k, (sid, role, comp) in enumerate(samples):
        Ts = np.full(shots, T) if np.ndim(T) == 0 else np.asarray(T)
        spec = synthesize(wl, comp, Ts, np.full(shots, ne), length_mm=length_mm,
                          resolving_power=resolving_power, self_absorption=self_absorption, continuum=False)
        peak = spec.max()
        spec = spec / peak * 5e4
        spec = spec * (1 + noise * rng.standard_normal((shots, 1))) + 5.0 * rng.standard_normal(spec.shape)
        spectra.append(spec)
        index += [k] * shots
        table.append({"sample_id": sid, "role": role, "standard_ref": sid if role == "standard" else "",
                      "description": "forward-model sample"})
    write_run(path, wl, np.vstack(spectra), table, np.array(index),
              instrument={"resolving_power": resolving_power, "model": "forward model (test)"},
              acquisition={"gate_delay_us": 1.0, "gate_width_us": 5.0})
    return path
