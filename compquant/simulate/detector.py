"""Detector model: spectral radiance on pixels -> digitised counts.

Per pixel p and shot (common practice for CCD/ICCD detectors, e.g. Janesick
2001, *Scientific Charge-Coupled Devices*)::

    mean photoelectrons  m_p = S * R_p * L_p + D * t_exp
    counts               c_p = clip(round(G * Poisson(m_p) + N(0, sigma_read) + b + b_p), 0, c_sat)

with L_p the pixel-integrated radiance (W m^-2 sr^-1) from the forward model,
S the sensitivity (photoelectrons per W m^-2 sr^-1 at unit relative response),
R_p the true relative spectral response of the pixel (it folds in optics
transmission, grating efficiency, quantum efficiency and the conversion from
energy to photon number, so counts / R are proportional to energy radiance, the
project's intensity convention), D the dark current (e-/s), t_exp the exposure,
G the gain (counts per photoelectron), sigma_read the read noise (counts), b the
bias and b_p a fixed per-pixel bias pattern, and c_sat the saturation level
(a 16-bit digitiser: at most 65,535).  Dark frames are the same with L = 0.
"""

from __future__ import annotations

import numpy as np

from compquant.errors import ConfigError
from compquant.settings import REQUIRED, Setting, Table, settings_dataclass

_POS = {"min": 0, "min_open": True}

#: the detector settings (the detector part of a scenario's ``[instrument]``, docs/scenario.md)
DETECTOR_TABLE = Table("instrument (detector)", (
    Setting("photoelectrons_per_radiance", "float", REQUIRED, "sensitivity S at unit relative response",
            "e- per W m⁻² sr⁻¹", **_POS),
    Setting("gain_counts_per_pe", "float", 1.0, "gain G", "counts per e-", **_POS),
    Setting("bias_counts", "float", 500.0, "bias b", "counts", min=0),
    Setting("bias_pattern_counts", "float", 0.0, "sd of the fixed per-pixel bias pattern", "counts", min=0),
    Setting("dark_current_pe_per_s", "float", 0.0, "dark current D", "e-/s", min=0),
    Setting("read_noise_counts", "float", 0.0, "read noise sd", "counts", min=0),
    Setting("saturation_counts", "float", 65535.0, "saturation level of the 16-bit digitiser", "counts", min=0,
            max=65535, min_open=True),
    Setting("exposure_s", "float", 0.01, "exposure t_exp", "s", **_POS),
), "Detector model of the simulation.", "compquant.simulate.detector")


class _DetectorModel:
    """The detector model's methods (fields of :class:`Detector`: :data:`DETECTOR_TABLE`)."""

    def __post_init__(self):
        for setting in DETECTOR_TABLE.settings:
            v = getattr(self, setting.key)
            try:
                v = float(v)  # numpy scalars too
            except (TypeError, ValueError):
                pass
            setting.validate(v, f"instrument.{setting.key}", ConfigError)

    def bias_pattern(self, n_pixels: int, rng: np.random.Generator) -> np.ndarray:
        """Fixed per-pixel bias offsets (counts), drawn once per instrument."""
        if self.bias_pattern_counts == 0:
            return np.zeros(n_pixels)
        return rng.normal(0.0, self.bias_pattern_counts, n_pixels)

    def mean_photoelectrons(self, radiance, response) -> np.ndarray:
        """Expected photoelectrons per pixel ``S R_p L_p + D t`` (n_shots, n_pixels)."""
        lam = np.asarray(radiance, float) * (self.photoelectrons_per_radiance * np.asarray(response, float))
        return lam + self.dark_current_pe_per_s * self.exposure_s

    def digitise(
        self, mean_pe, pattern, rng: np.random.Generator, noise: bool = True, block_rows: int = 256
    ) -> np.ndarray:
        """Counts (uint16) from expected photoelectrons; ``noise=False`` gives the rounded mean.

        Works in blocks of ``block_rows`` shots to bound the temporary arrays.
        """
        mean_pe = np.asarray(mean_pe, float)
        if mean_pe.ndim < 2:
            return self.digitise(mean_pe[None, :], pattern, rng, noise, block_rows)[0]
        out = np.empty(mean_pe.shape, dtype=np.uint16)
        for a in range(0, mean_pe.shape[0], block_rows):
            m = mean_pe[a : a + block_rows]
            if noise:
                counts = rng.poisson(m).astype(float)
                counts *= self.gain_counts_per_pe
                if self.read_noise_counts > 0:
                    counts += rng.normal(0.0, self.read_noise_counts, m.shape)
            else:
                counts = self.gain_counts_per_pe * m
            counts += self.bias_counts + pattern
            np.rint(counts, out=counts)
            np.clip(counts, 0, self.saturation_counts, out=counts)
            out[a : a + block_rows] = counts
        return out

    def dark_frames(self, n_frames: int, n_pixels: int, pattern, rng, noise: bool = True) -> np.ndarray:
        """``n_frames`` dark frames (uint16) at the same exposure."""
        return self.digitise(
            np.full((n_frames, n_pixels), self.dark_current_pe_per_s * self.exposure_s), pattern, rng, noise
        )


Detector = settings_dataclass(DETECTOR_TABLE, "Detector", module=__name__, bases=(_DetectorModel,), frozen=True,
                              doc="Settings of the detector model (units in the field names).")

__all__ = ["DETECTOR_TABLE", "Detector"]
