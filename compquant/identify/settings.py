"""Settings of qualitative analysis: the ``[identify]`` table of a method file.

Every key is optional; the defaults are the values documented in
``docs/identification.md``.  :func:`settings_from_method` validates the plain
dict kept by :func:`compquant.method.load_method` in
``Method.sections["identify"]`` and raises :class:`~compquant.errors.MethodError`
naming the file and key.
"""

from __future__ import annotations

from dataclasses import replace

from compquant.errors import MethodError
from compquant.settings import Setting, Table, settings_dataclass


class _IdentifyMethods:
    """Methods of :class:`IdentifySettings` (its fields are generated from :data:`IDENTIFY_TABLE`)."""

    def with_overrides(self, **kw):
        """A copy with some fields replaced (``None`` values are ignored)."""
        return replace(self, **{k: v for k, v in kw.items() if v is not None})


def _symbols(val, where, error):
    """A list of known element symbols (blanks around them ignored) -> tuple."""
    from compquant.atomic.elements import known_symbols

    if not all(x.strip() for x in val):
        raise error("expected a list of element symbols", where=where, fix='e.g. ["Fe", "Cu"]')
    unknown = sorted({x.strip() for x in val} - set(known_symbols()))
    if unknown:
        raise error(f"unknown element symbol(s) {', '.join(map(repr, unknown))}", where=where,
                    fix="use chemical symbols such as Fe, Cu, Zn")
    return tuple(x.strip() for x in val)


def _grid(val, where, error):
    lo, hi, st = val
    if not (1000.0 <= lo < hi <= 100000.0 and 0 < st <= hi - lo):
        raise error(f"grid {val} is not a valid range", where=where,
                    fix="use 1000 K <= low < high <= 100000 K and 0 < step <= high - low")
    return (lo, hi, st)


def _noise_window(val, where, error):
    if 0 < val < 15:
        raise error("the noise window must be 0 (global) or at least 15 pixels", where=where, fix="use e.g. 201")
    return val


_DOC = "Parameters of peak detection, line matching, scoring and the interference map."
_POS = {"min": 0, "min_open": True}
_AUTO = {"auto": None, "fit": None}


def _s(key, type_, default, doc, unit="", **kw):
    return Setting(key, type_, default, doc, unit, **kw)


#: the ``[identify]`` table (docs/identification.md)
IDENTIFY_TABLE = Table("identify", (
    _s("k_sigma", "float", 5.0, "peak threshold in noise σ (height and prominence)", **_POS),
    _s("noise_window", "int", 201, "pixels of the running noise window (0 = one global σ, else >= 15)", "pixels", min=0,
       check=_noise_window),
    _s("min_width_frac", "float", 0.5, "minimum peak FWHM as a fraction of the instrument FWHM λ/R", min=0),
    _s("resolving_power", "float", None, 'R = λ/Δλ; "auto": from the run, else estimated from the peaks', aliases=_AUTO,
       fix='give λ/Δλ, e.g. 5000, or "auto"', **_POS),
    _s("wavelength_uncertainty_nm", "float", 0.005, "standard uncertainty of the wavelength calibration", "nm", min=0),
    _s("tolerance_fwhm", "float", 0.5, "half-width of the matching window in instrument FWHM", **_POS),
    _s("tolerance_k", "float", 2.0, "coverage factor applied to the wavelength-calibration uncertainty", **_POS),
    _s("temperature_k", "float", None, 'excitation temperature for the LTE estimate; "fit": fitted', "K", min=1000,
       max=100000, aliases=_AUTO, fix='give a plasma temperature or "fit"'),
    _s("temperature_grid_k", "list", (5000.0, 20000.0, 500.0), "(low, high, step) of the temperature search", "K",
       item="float", length=3,
       check=_grid, fix="e.g. [5000, 20000, 500]"),
    _s("default_temperature_k", "float", 10000.0, "used when the fit has too few lines", "K", **_POS),
    _s("expect_margin", "float", 2.0, "a strong expected line has predicted SNR >= expect_margin · k_sigma", **_POS),
    _s("intensity_factor", "float", 3.0, "an observed line weaker than predicted by more than this factor is missing",
       min=1, min_open=True, fix="use e.g. 3"),
    _s("max_lines_per_species", "int", 40, "strongest predicted lines of each species considered", min=1),
    _s("min_lines_detected", "float", 2.0, "share-weighted found lines needed for detected", min=0),
    _s("detected_score", "float", 0.5, "score threshold of detected", min=0, max=1, min_open=True),
    _s("possible_score", "float", 0.25, "score threshold of possible", min=0, max=1, min_open=True),
    _s("elements", "list", (), "restrict the candidates to these elements (empty = all in the line list)", item="str",
       check=_symbols, fix='e.g. ["Fe", "Cu"]'),
    _s("exclude_elements", "list", (), "never report these", item="str", check=_symbols, fix='e.g. ["Fe", "Cu"]'),
    _s("interference_fraction", "float", 0.05, "an interfering line adding at least this fraction of the analyte "
       "line's signal flags it", min=0),
    _s("interference_snr", "float", 3.0, "with no analyte signal, an interfering line at or above this SNR flags the "
       "line", min=0),
    _s("n_alternatives", "int", 3, "alternative analyte lines suggested per flagged line", min=0),
    _s("iterations", "int", 6, "passes of evidence sharing between species that match the same peaks", min=1),
), "Qualitative analysis (docs/identification.md).", "compquant.identify",
    notes=("possible_score <= detected_score.",))


IdentifySettings = settings_dataclass(IDENTIFY_TABLE, "IdentifySettings", module=__name__, bases=(_IdentifyMethods,),
                                      frozen=True, doc=_DOC)


def settings_from_dict(table: dict | None, where: str = "[identify]") -> IdentifySettings:
    """Validate an ``[identify]`` table (through :data:`IDENTIFY_TABLE`) and return :class:`IdentifySettings`.

    Raises :class:`MethodError` for unknown keys, wrong types or out-of-range values.
    """
    if table is None:
        return IdentifySettings()
    values = IDENTIFY_TABLE.parse(table, where, MethodError, only=set(table))
    s = replace(IdentifySettings(), **values)
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


__all__ = ["IDENTIFY_TABLE", "IdentifySettings", "settings_from_dict", "settings_from_method"]
