"""Settings of qualitative analysis: the ``[identify]`` table of a method file.

Every key is optional; the defaults are the values documented in
``docs/identification.md``.  :func:`settings_from_method` validates the plain
dict kept by :func:`compquant.method.load_method` in
``Method.sections["identify"]`` and raises :class:`~compquant.errors.MethodError`
naming the file and key.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, fields, replace

from compquant.errors import MethodError
from compquant.fileio import check_keys


@dataclass(frozen=True)
class IdentifySettings:
    """Parameters of peak detection, line matching, scoring and the interference map.

    Attributes
    ----------
    k_sigma : peak threshold in noise σ (height and prominence)
    noise_window : pixels of the running noise window (0 = one global σ)
    min_width_frac : minimum peak FWHM as a fraction of the instrument FWHM λ/R
    resolving_power : R = λ/Δλ; None = from the run's instrument table, else estimated from the peaks
    wavelength_uncertainty_nm : standard uncertainty of the wavelength calibration, nm
    tolerance_fwhm : half-width of the matching window in instrument FWHM (before the calibration term)
    tolerance_k : coverage factor applied to the wavelength-calibration uncertainty
    temperature_k : excitation temperature for the LTE estimate, K; None = fitted
    temperature_grid_k : (low, high, step) of the temperature search, K
    default_temperature_k : used when the fit has too few lines
    expect_margin : a line is a *strong expected* line when its predicted SNR ≥ expect_margin · k_sigma
    intensity_factor : an observed line weaker than predicted by more than this factor counts as missing;
        also the scale of the intensity-agreement term of the score
    max_lines_per_species : strongest predicted lines of each species considered
    min_lines_detected : share-weighted found lines needed for *detected*
    detected_score, possible_score : score thresholds of the two classes
    elements : restrict the candidates to these element symbols (empty = all in the line list)
    exclude_elements : never report these (e.g. the ambient gas when it is not wanted)
    interference_fraction : an interfering line predicted to add at least this fraction of the
        analyte line's signal flags the analyte line
    interference_snr : with no analyte signal to compare, an interfering line predicted at or
        above this SNR at the analyte position flags the line
    n_alternatives : alternative analyte lines suggested per flagged line
    iterations : passes of evidence sharing between species that match the same peaks
    """

    k_sigma: float = 5.0
    noise_window: int = 201
    min_width_frac: float = 0.5
    resolving_power: float | None = None
    wavelength_uncertainty_nm: float = 0.005
    tolerance_fwhm: float = 0.5
    tolerance_k: float = 2.0
    temperature_k: float | None = None
    temperature_grid_k: tuple[float, float, float] = (5000.0, 20000.0, 500.0)
    default_temperature_k: float = 10000.0
    expect_margin: float = 2.0
    intensity_factor: float = 3.0
    max_lines_per_species: int = 40
    min_lines_detected: float = 2.0
    detected_score: float = 0.5
    possible_score: float = 0.25
    elements: tuple[str, ...] = field(default_factory=tuple)
    exclude_elements: tuple[str, ...] = field(default_factory=tuple)
    interference_fraction: float = 0.05
    interference_snr: float = 3.0
    n_alternatives: int = 3
    iterations: int = 6

    def with_overrides(self, **kw) -> IdentifySettings:
        """A copy with some fields replaced (``None`` values are ignored)."""
        return replace(self, **{k: v for k, v in kw.items() if v is not None})


_POSITIVE = {"k_sigma", "tolerance_fwhm", "tolerance_k", "expect_margin", "default_temperature_k"}
_NONNEG = {"min_width_frac", "wavelength_uncertainty_nm", "min_lines_detected", "interference_fraction",
           "interference_snr"}
_INTS = {"noise_window", "max_lines_per_species", "n_alternatives", "iterations"}
_FRACTIONS = {"detected_score", "possible_score"}


def settings_from_dict(table: dict | None, where: str = "[identify]") -> IdentifySettings:
    """Validate an ``[identify]`` table and return :class:`IdentifySettings`.

    Raises :class:`MethodError` for unknown keys, wrong types or out-of-range values.
    """
    if table is None:
        return IdentifySettings()
    names = {f.name for f in fields(IdentifySettings)}
    check_keys(table, names, where, error=MethodError)
    out = {}
    for key, val in table.items():
        w = f"{where} {key}"
        if key in ("elements", "exclude_elements"):
            if not isinstance(val, list) or not all(isinstance(x, str) and x.strip() for x in val):
                raise MethodError("expected a list of element symbols", where=w, fix='e.g. ["Fe", "Cu"]')
            from compquant.atomic.elements import known_symbols

            unknown = sorted({x.strip() for x in val} - set(known_symbols()))
            if unknown:
                raise MethodError(f"unknown element symbol(s) {', '.join(map(repr, unknown))}", where=w,
                                  fix="use chemical symbols such as Fe, Cu, Zn")
            out[key] = tuple(x.strip() for x in val)
            continue
        if key == "temperature_grid_k":
            if (not isinstance(val, list) or len(val) != 3
                    or not all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in val)):
                raise MethodError("expected [low, high, step] in K", where=w, fix="e.g. [5000, 20000, 500]")
            lo, hi, st = (float(x) for x in val)
            if not (1000.0 <= lo < hi <= 100000.0 and 0 < st <= hi - lo):
                raise MethodError(f"grid {val} is not a valid range", where=w,
                                  fix="use 1000 K <= low < high <= 100000 K and 0 < step <= high - low")
            out[key] = (lo, hi, st)
            continue
        if key in ("resolving_power", "temperature_k") and isinstance(val, str) and val.strip().lower() in (
                "auto", "fit"):
            out[key] = None
            continue
        if isinstance(val, bool) or not isinstance(val, (int, float)) or not math.isfinite(float(val)):
            raise MethodError(f"expected a number, got {val!r}", where=w,
                              fix="give a finite number" + (' or "fit"' if key == "temperature_k" else ""))
        num = float(val)
        if key in _INTS:
            if num != int(num) or num < (0 if key in ("noise_window", "n_alternatives") else 1):
                raise MethodError(f"expected a whole number, got {val!r}", where=w, fix="give a positive integer")
            if key == "noise_window" and 0 < num < 15:
                raise MethodError("the noise window must be 0 (global) or at least 15 pixels", where=w,
                                  fix="use e.g. 201")
            out[key] = int(num)
            continue
        if key in _POSITIVE and num <= 0:
            raise MethodError(f"must be positive, got {val!r}", where=w, fix="give a positive number")
        if key in _NONNEG and num < 0:
            raise MethodError(f"must not be negative, got {val!r}", where=w, fix="give zero or a positive number")
        if key in _FRACTIONS and not 0 < num <= 1:
            raise MethodError(f"must lie in (0, 1], got {val!r}", where=w, fix="give a score between 0 and 1")
        if key == "resolving_power" and num <= 0:
            raise MethodError(f"must be positive, got {val!r}", where=w, fix='give λ/Δλ, e.g. 5000, or "auto"')
        if key == "temperature_k" and not 1000.0 <= num <= 100000.0:
            raise MethodError(f"{val!r} K is outside 1000-100000 K", where=w, fix='give a plasma temperature or "fit"')
        if key == "intensity_factor" and num <= 1:
            raise MethodError(f"must be above 1, got {val!r}", where=w, fix="use e.g. 3")
        out[key] = num
    s = IdentifySettings(**out)
    if s.possible_score > s.detected_score:
        raise MethodError("possible_score is above detected_score", where=where,
                          fix="make possible_score <= detected_score")
    return s


def settings_from_method(method) -> IdentifySettings:
    """:class:`IdentifySettings` from a loaded method (``Method.sections["identify"]``), or defaults."""
    if method is None:
        return IdentifySettings()
    table = getattr(method, "sections", {}).get("identify")
    where = f"{getattr(method, 'where', '<method>')}: [identify]"
    return settings_from_dict(table, where)


__all__ = ["IdentifySettings", "settings_from_dict", "settings_from_method"]
