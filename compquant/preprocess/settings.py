"""The ``[preprocess.*]`` tables of a method file, declared once (:mod:`compquant.settings`).

:func:`compquant.method.load_method` parses them with these tables into
:class:`compquant.method.PreprocessConfig`; the keys of ``[preprocess.baseline]`` come from the
baseline registry :data:`compquant.preprocess.baseline.BASELINES`.
"""

from __future__ import annotations

from compquant.preprocess.baseline import BASELINES
from compquant.preprocess.corrections import NORMALISATIONS
from compquant.settings import Setting, Table, toml_text

OWNER = "compquant.preprocess"
SHIFT_METHODS = ("none", "lines", "xcorr")
SHIFT_MODELS = ("shift", "linear")
_POS = {"min": 0, "min_open": True}

DARK = Table("preprocess.dark", (
    Setting("enabled", "bool", True, "subtract the per-pixel dark level"),
    Setting("statistic", "str", "median", "statistic of the run's dark frames (median resists cosmic-ray hits)",
            choices=("mean", "median")),
    Setting("scale_exposure", "bool", True, "multiply the dark by exposure_s / dark_exposure_s when the run "
            "states both"),
), "Dark subtraction (a run without dark frames is measured without it; the provenance says so).", OWNER)

RESPONSE = Table("preprocess.response", (
    Setting("enabled", "bool", True, "divide by the relative spectral response"),
    Setting("file", "str", None, "CSV wavelength_nm,response (relative to the method file); not set: the "
            "run's stored response"),
), "Response correction: afterwards spectra are proportional to spectral radiance in energy units.", OWNER)

SATURATION = Table("preprocess.saturation", (
    Setting("enabled", "bool", True, "find pixels with raw counts >= level * (1 - margin)"),
    Setting("level", "float", None, "saturation level; not set: the run's saturation", unit="counts", **_POS),
    Setting("margin", "float", 0.0, "fraction below the level still treated as saturated", min=0, max=1,
            max_open=True, fix="use a fraction such as 0.02"),
), "Saturation mask on the raw counts; a line touching a saturated pixel is flagged `saturated`.", OWNER)

QC = Table("preprocess.qc", (
    Setting("enabled", "bool", True, "shot quality control"),
    Setting("quantity", "str", "total", '"total" (integrated emission after baseline removal) or a line id '
            "from [[lines]]"),
    Setting("k", "float", 5.0, "reject shots with |x - median| > k * 1.4826 * MAD within their sample", **_POS),
    Setting("min_fraction", "float", 0.1, "reject shots with x < min_fraction * median (misfires)", min=0, max=1,
            max_open=True, fix="use e.g. 0.1 (10 % of the median)"),
    Setting("min_signal", "float", None, "reject shots with x < min_signal (absolute)"),
    Setting("pulse_energy_normalise", "bool", False, "divide per-shot intensities by E / median(E) (needs "
            "pulse_energy_mj in the run)"),
    Setting("min_pulse_fraction", "float", 0.0, "reject shots with E < min_pulse_fraction * median(E)", min=0),
), "Shot quality control (reasons `outlier`, `low_signal`, `not_finite`, `low_pulse_energy`).", OWNER)

#: ``method`` plus the union of the registered estimators' parameters (a key of another
#: estimator is refused after the method is known; see :func:`baseline_params`)
_BASELINE_PARAMS: dict[str, Setting] = {}
for _entry in BASELINES.values():
    for _s in _entry.params:
        _BASELINE_PARAMS.setdefault(_s.key, _s)


def _union_doc(key: str) -> str:
    users = [e for e in BASELINES.values() if key in e.keys]
    defaults = ", ".join(f"{e.name}: {toml_text(e.params[e.keys.index(key)].default)}" for e in users)
    return f"{_BASELINE_PARAMS[key].doc} (default {defaults})"


BASELINE = Table("preprocess.baseline", (
    Setting("method", "str", "snip", "baseline estimator (registry compquant.preprocess.baseline.BASELINES)",
            choices=tuple(BASELINES)),
    *(Setting(s.key, s.type, None, _union_doc(s.key), unit=s.unit, min=s.min, max=s.max, min_open=s.min_open,
              max_open=s.max_open, fix=s.fix)
      for s in _BASELINE_PARAMS.values()),
), "Baseline removal. Keys of another estimator are refused (`p` with `snip` ...).", OWNER,
    notes=tuple(f"`{n}`: {e.doc}" + (f" ({e.reference}); keys {', '.join(e.keys)}" if e.function else "")
                for n, e in BASELINES.items()))

NORMALISE = Table("preprocess.normalise", (
    Setting("how", "str", "none", "per-shot normalisation of line intensities ('background' needs a baseline "
            "method)", choices=NORMALISATIONS),
    Setting("line", "str", None, 'line id (in [[lines]]) for how = "internal_standard"'),
), "Each shot's line intensities are divided by the shot's factor.", OWNER,
    notes=('how = "internal_standard" needs line, a line of [[lines]].',))

SHIFT = Table("preprocess.shift", (
    Setting("method", "str", "none", '"lines" (reference line positions) or "xcorr" (cross-correlation with a '
            "reference spectrum)", choices=SHIFT_METHODS),
    Setting("lines", "list", [], "reference line ids or wavelengths (nm): strong, isolated, never saturated",
            fix='write lines = ["Cu I 324.754", 510.554]'),
    Setting("reference_file", "str", None, 'CSV wavelength_nm,intensity for method = "xcorr"'),
    Setting("max_shift_nm", "float", 0.2, "larger corrections are not applied (status shift_too_large)",
            unit="nm", **_POS),
    Setting("search_nm", "float", 0.1, "half-width of the search around each reference line", unit="nm", **_POS),
    Setting("flag_nm", "float", None, "tolerance of the line flag `shifted`; not set: one pixel", unit="nm", **_POS),
    Setting("model", "str", "shift", '"shift": one offset per sample; "linear": offset + dispersion change',
            choices=SHIFT_MODELS),
    Setting("min_refs", "int", None, "agreeing references needed; not set: 2 (shift), 3 (linear)", **_POS),
    Setting("tolerance_nm", "float", None, "a reference farther than this from the consensus is an outlier; not "
            "set: one pixel", unit="nm", **_POS),
), "Wavelength shift correction per sample: moves the line windows (spectra are not resampled).", OWNER,
    notes=('method = "lines" needs lines; method = "xcorr" needs reference_file.',
           'model = "linear" needs min_refs >= 3 when min_refs is given.'))

TABLES = (DARK, RESPONSE, SATURATION, QC, BASELINE, NORMALISE, SHIFT)


def baseline_params(table: dict, method: str, where: str, error: type) -> dict:
    """The parameters of baseline ``method`` from a checked ``[preprocess.baseline]`` table,
    defaults filled in from the registry; a key of another estimator is refused."""
    entry = BASELINES[method]
    extra = sorted(set(table) - set(entry.keys) - {"method"})
    if extra:
        raise error(
            f"key {extra[0]!r} does not apply to method {method!r}",
            where=f"{where}.{extra[0]}",
            fix=f"keys for {method}: {', '.join(sorted(entry.keys)) or 'none'}",
        )
    return Table(f"preprocess.baseline ({method})", entry.params).parse(
        {k: v for k, v in table.items() if k != "method"}, where, error)


__all__ = ["BASELINE", "DARK", "NORMALISE", "QC", "RESPONSE", "SATURATION", "SHIFT", "SHIFT_METHODS",
           "SHIFT_MODELS", "TABLES", "baseline_params"]
