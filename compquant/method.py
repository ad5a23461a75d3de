"""The method file: one TOML file per analytical method (docs/method-file.md).

:func:`load_method` reads the file, refuses unknown top-level tables and
unknown keys in the tables it owns (``[method]``, ``[preprocess.*]``,
``[measure]``, ``[[lines]]``), resolves each line (by id such as
``"Cu I 324.754"``, looked up in :func:`compquant.atomic.load_line_list` when
that is available, or by explicit ``wavelength_nm``) and keeps the tables
owned by other modules (``[calibration]``, ``[cf]``, ``[identify]``,
``[map]``) untouched in :attr:`Method.sections`; those modules validate them.

:meth:`Method.check_run` checks the lines against a run's wavelength range and
raises :class:`~compquant.errors.MethodError` naming the line that does not fit.
"""

from __future__ import annotations

import hashlib
import json
import re
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np

from compquant.errors import MethodError
from compquant.fileio import check_keys, load_toml, sha256_file

TOP_LEVEL = frozenset(
    {"method", "preprocess", "lines", "measure", "calibration", "cf", "identify", "map", "control_chart"}
)
OTHER_SECTIONS = ("calibration", "cf", "identify", "map", "control_chart")

METHOD_KEYS = frozenset({"id", "version", "technique", "description", "medium"})
MEDIA = ("air", "vacuum")
PREPROCESS_TABLES = frozenset({"dark", "response", "saturation", "qc", "baseline", "normalise", "shift"})
DARK_KEYS = frozenset({"enabled", "statistic", "scale_exposure"})
RESPONSE_KEYS = frozenset({"enabled", "file"})
SATURATION_KEYS = frozenset({"enabled", "level", "margin"})
QC_KEYS = frozenset(
    {"enabled", "quantity", "k", "min_fraction", "min_signal", "pulse_energy_normalise", "min_pulse_fraction"}
)
BASELINE_KEYS = frozenset(
    {"method", "max_half_window", "decreasing", "lls", "lam", "p", "diff_order", "max_iter", "tol"}
)
NORMALISE_KEYS = frozenset({"how", "line"})
SHIFT_KEYS = frozenset(
    {"method", "lines", "reference_file", "max_shift_nm", "search_nm", "flag_nm", "model", "min_refs", "tolerance_nm"}
)
SHIFT_MODELS = ("shift", "linear")
MEASURE_KEYS = frozenset(
    {
        "mode",
        "window_nm",
        "side_nm",
        "gap_nm",
        "profile",
        "shared_width",
        "fwhm_nm",
        "max_offset_nm",
        "snr_detect",
        "snr_min",
        "chunk_shots",
    }
)
LINE_KEYS = frozenset(
    {
        "id",
        "element",
        "ion",
        "wavelength_nm",
        "mode",
        "window_nm",
        "side_nm",
        "gap_nm",
        "group",
        "profile",
        "fwhm_nm",
        "label",
    }
)

TECHNIQUES = ("LIBS", "spark-OES", "arc-OES", "other")
MODES = ("window", "fit")
PROFILES = ("voigt", "lorentzian", "gaussian")
BASELINES = ("none", "snip", "asls", "arpls")
NORMALISATIONS = ("none", "total_area", "background", "internal_standard")
SHIFT_METHODS = ("none", "lines", "xcorr")

_ROMAN = {"I": 1, "II": 2, "III": 3, "IV": 4, "V": 5, "VI": 6}
_ROMAN_INV = {v: k for k, v in _ROMAN.items()}
_LINE_ID = re.compile(r"^\s*([A-Z][a-z]?)\s+(I|II|III|IV|V|VI)\s+(\d+(?:\.\d+)?)\s*$")


def parse_line_id(text: str) -> tuple[str, int, float] | None:
    """``"Cu I 324.754"`` -> ``("Cu", 1, 324.754)``; ``None`` if not of that form."""
    m = _LINE_ID.match(str(text))
    if not m:
        return None
    return m.group(1), _ROMAN[m.group(2)], float(m.group(3))


def make_line_id(element: str, ion: int, wavelength_nm: float) -> str:
    """Line id per docs/architecture.md: ``"<El> <roman> <air nm, 3 decimals>"``."""
    return f"{element} {_ROMAN_INV.get(int(ion), str(ion))} {wavelength_nm:.3f}"


# --------------------------------------------------------------------------- config dataclasses


@dataclass
class PreprocessConfig:
    """Settings of the preprocessing steps (defaults = a plain, safe pipeline)."""

    dark: bool = True
    dark_statistic: str = "median"
    dark_scale_exposure: bool = True
    response: bool = True
    response_file: str | None = None
    saturation: bool = True
    saturation_level: float | None = None
    saturation_margin: float = 0.0
    qc: bool = True
    qc_quantity: str = "total"
    qc_k: float = 5.0
    qc_min_fraction: float = 0.1
    qc_min_signal: float | None = None
    pulse_energy_normalise: bool = False
    min_pulse_fraction: float = 0.0
    baseline: str = "snip"
    baseline_params: dict = field(default_factory=lambda: {"max_half_window": 20})
    normalise: str = "none"
    normalise_line: str | None = None
    shift: str = "none"
    shift_lines: list = field(default_factory=list)
    shift_reference_file: str | None = None
    max_shift_nm: float = 0.2
    shift_search_nm: float = 0.1
    shift_flag_nm: float | None = None
    shift_model: str = "shift"
    shift_min_refs: int | None = None
    shift_tolerance_nm: float | None = None


@dataclass
class MeasureConfig:
    """Line-measurement defaults; each ``[[lines]]`` entry may override them."""

    mode: str = "window"
    window_nm: float | None = None
    side_nm: float | None = None
    gap_nm: float = 0.0
    profile: str = "voigt"
    shared_width: bool = True
    fwhm_nm: float | None = None
    max_offset_nm: float | None = None
    snr_detect: float = 3.0
    snr_min: float = 10.0
    chunk_shots: int = 4096


@dataclass
class LineSpec:
    """One line to measure, resolved to element, ion stage and wavelength."""

    line_id: str
    element: str
    ion: int
    wavelength_nm: float
    mode: str = "window"
    window_nm: float | None = None
    side_nm: float | None = None
    gap_nm: float | None = None
    group: str | None = None
    profile: str | None = None
    fwhm_nm: float | None = None
    label: str | None = None


@dataclass
class Method:
    """A loaded method file."""

    id: str
    version: str
    technique: str
    description: str
    preprocess: PreprocessConfig
    measure: MeasureConfig
    lines: list[LineSpec]
    sections: dict
    path: str | None = None
    sha256: str | None = None
    raw: dict = field(default_factory=dict, repr=False)
    medium: str = "air"

    @property
    def where(self) -> str:
        return self.path or "<method>"

    def line(self, line_id: str) -> LineSpec:
        for ln in self.lines:
            if ln.line_id == line_id:
                return ln
        raise MethodError(
            f"line {line_id!r} is not in the method's [[lines]]",
            where=self.where,
            fix="add it under [[lines]] or correct the id",
        )

    def resolve_path(self, relative: str) -> Path:
        """A path given in the method file, relative to the method file's folder."""
        p = Path(relative)
        if not p.is_absolute() and self.path:
            p = Path(self.path).parent / p
        return p

    def check_run(self, wavelength) -> None:
        """Refuse lines whose integration or fit window lies outside the run's wavelength range."""
        wl = np.asarray(wavelength, dtype=np.float64)
        lo, hi = float(wl[0]), float(wl[-1])
        pitch = float(np.median(np.diff(wl))) if wl.size > 1 else 0.0
        for ln in self.lines:
            half = 0.5 * window_width_nm(ln, pitch)
            if ln.wavelength_nm - half < lo or ln.wavelength_nm + half > hi:
                raise MethodError(
                    f"line {ln.line_id!r} at {ln.wavelength_nm:.3f} nm (window {2 * half:.3f} nm) "
                    f"lies outside the run's wavelength range {lo:.3f}-{hi:.3f} nm",
                    where=f"{self.where}: [[lines]] {ln.line_id}",
                    fix="remove the line from the method or use a run that covers it",
                )

    def provenance(self) -> dict:
        """Identifiers of the method for output provenance."""
        return {
            "method_id": self.id,
            "method_version": self.version,
            "method_path": self.path,
            "method_sha256": self.sha256,
        }

    def settings_digest(self) -> str:
        """SHA-256 of the resolved preprocessing, measurement and line settings."""
        blob = json.dumps(
            {
                **({"medium": self.medium} if self.medium != "air" else {}),
                "preprocess": _digest_preprocess(self.preprocess),
                "measure": asdict(self.measure),
                "lines": [asdict(x) for x in self.lines],
            },
            sort_keys=True,
            default=str,
        )
        return hashlib.sha256(blob.encode()).hexdigest()


def _digest_preprocess(pre: PreprocessConfig) -> dict:
    """Preprocessing settings for the digest; settings added later are left out while at their
    defaults, so digests of existing methods do not change."""
    d = asdict(pre)
    for key, default in (("shift_model", "shift"), ("shift_min_refs", None), ("shift_tolerance_nm", None)):
        if d.get(key) == default:
            d.pop(key)
    return d


def window_width_nm(line: LineSpec, pitch_nm: float) -> float:
    """Full width of a line's integration window: as given, else 3 FWHM, else 9 pixels.

    Three FWHM hold >= 97 % of a Voigt line's area for Gaussian-dominated
    profiles (common practice); 9 pixels suits the 3-4 pixel FWHM of
    typical echelle and Czerny-Turner spectrometers (common practice).
    """
    if line.window_nm:
        return float(line.window_nm)
    if line.fwhm_nm:
        return 3.0 * float(line.fwhm_nm)
    return 9.0 * float(pitch_nm)


def side_width_nm(line: LineSpec, pitch_nm: float) -> float:
    """Width of each background side window: as given, else half the line window (>= 3 pixels)."""
    if line.side_nm is not None:
        return float(line.side_nm)
    return max(0.5 * window_width_nm(line, pitch_nm), 3.0 * float(pitch_nm))


# --------------------------------------------------------------------------- parsing helpers


def _err(where: str, what: str, fix: str) -> MethodError:
    return MethodError(what, where=where, fix=fix)


def _num(
    table: dict,
    key: str,
    where: str,
    *,
    positive: bool = False,
    minimum: float | None = None,
    integer: bool = False,
    default=None,
):
    if key not in table:
        return default
    v = table[key]
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        raise _err(f"{where} {key}", f"expected a number, got {v!r}", "write a plain number")
    if integer and not float(v).is_integer():
        raise _err(f"{where} {key}", f"expected a whole number, got {v!r}", "write an integer")
    if not np.isfinite(v) or (positive and v <= 0) or (minimum is not None and v < minimum):
        cond = "> 0" if positive else f">= {minimum}"
        raise _err(f"{where} {key}", f"value {v!r} out of range", f"use a finite value {cond}")
    return int(v) if integer else float(v)


def _bool(table: dict, key: str, where: str, default: bool) -> bool:
    if key not in table:
        return default
    v = table[key]
    if not isinstance(v, bool):
        raise _err(f"{where} {key}", f"expected true or false, got {v!r}", "write true or false")
    return v


def _str(table: dict, key: str, where: str, default=None, choices=None):
    if key not in table:
        return default
    v = table[key]
    if not isinstance(v, str):
        raise _err(f"{where} {key}", f"expected text, got {v!r}", "quote the value")
    if choices is not None and v not in choices:
        raise _err(f"{where} {key}", f"unknown value {v!r}", f"use one of {', '.join(choices)}")
    return v


def _table(parent: dict, key: str, where: str) -> dict:
    v = parent.get(key, {})
    if not isinstance(v, dict):
        raise _err(f"{where}", f"[{key}] must be a table", f"write it as [{key}] with key = value lines")
    return v


def _parse_preprocess(pre: dict, src: str) -> PreprocessConfig:
    w = f"{src}: [preprocess]"
    if not isinstance(pre, dict):
        raise _err(w, "must be a table", "write [preprocess.<step>] tables")
    check_keys(pre, PREPROCESS_TABLES, w, MethodError)
    c = PreprocessConfig()

    t = _table(pre, "dark", w)
    wd = f"{src}: [preprocess.dark]"
    check_keys(t, DARK_KEYS, wd, MethodError)
    c.dark = _bool(t, "enabled", wd, c.dark)
    c.dark_statistic = _str(t, "statistic", wd, c.dark_statistic, ("mean", "median"))
    c.dark_scale_exposure = _bool(t, "scale_exposure", wd, c.dark_scale_exposure)

    t = _table(pre, "response", w)
    wr = f"{src}: [preprocess.response]"
    check_keys(t, RESPONSE_KEYS, wr, MethodError)
    c.response = _bool(t, "enabled", wr, c.response)
    c.response_file = _str(t, "file", wr, None)

    t = _table(pre, "saturation", w)
    ws = f"{src}: [preprocess.saturation]"
    check_keys(t, SATURATION_KEYS, ws, MethodError)
    c.saturation = _bool(t, "enabled", ws, c.saturation)
    c.saturation_level = _num(t, "level", ws, positive=True)
    c.saturation_margin = _num(t, "margin", ws, minimum=0.0, default=0.0)
    if c.saturation_margin >= 1:
        raise _err(f"{ws} margin", "margin must be below 1", "use a fraction such as 0.02")

    t = _table(pre, "qc", w)
    wq = f"{src}: [preprocess.qc]"
    check_keys(t, QC_KEYS, wq, MethodError)
    c.qc = _bool(t, "enabled", wq, c.qc)
    c.qc_quantity = _str(t, "quantity", wq, c.qc_quantity)
    c.qc_k = _num(t, "k", wq, positive=True, default=c.qc_k)
    c.qc_min_fraction = _num(t, "min_fraction", wq, minimum=0.0, default=c.qc_min_fraction)
    c.qc_min_signal = _num(t, "min_signal", wq)
    c.pulse_energy_normalise = _bool(t, "pulse_energy_normalise", wq, c.pulse_energy_normalise)
    c.min_pulse_fraction = _num(t, "min_pulse_fraction", wq, minimum=0.0, default=0.0)
    if c.qc_min_fraction >= 1:
        raise _err(f"{wq} min_fraction", "must be below 1", "use e.g. 0.1 (10 % of the median)")

    t = _table(pre, "baseline", w)
    wb = f"{src}: [preprocess.baseline]"
    check_keys(t, BASELINE_KEYS, wb, MethodError)
    c.baseline = _str(t, "method", wb, c.baseline, BASELINES)
    allowed = {
        "snip": {"max_half_window", "decreasing", "lls"},
        "asls": {"lam", "p", "diff_order", "max_iter", "tol"},
        "arpls": {"lam", "diff_order", "max_iter", "tol"},
        "none": set(),
    }[c.baseline]
    extra = sorted(set(t) - allowed - {"method"})
    if extra:
        raise _err(
            f"{wb} {extra[0]}",
            f"key {extra[0]!r} does not apply to method {c.baseline!r}",
            f"keys for {c.baseline}: {', '.join(sorted(allowed)) or 'none'}",
        )
    params: dict = {}
    if c.baseline == "snip":
        params["max_half_window"] = _num(t, "max_half_window", wb, positive=True, integer=True, default=20)
        params["decreasing"] = _bool(t, "decreasing", wb, False)
        params["lls"] = _bool(t, "lls", wb, False)
    elif c.baseline in ("asls", "arpls"):
        params["lam"] = _num(t, "lam", wb, positive=True, default=1e6 if c.baseline == "asls" else 1e5)
        if c.baseline == "asls":
            params["p"] = _num(t, "p", wb, positive=True, default=0.01)
            if params["p"] >= 1:
                raise _err(f"{wb} p", "p must be between 0 and 1", "use e.g. 0.01")
        params["diff_order"] = _num(t, "diff_order", wb, positive=True, integer=True, default=2)
        params["max_iter"] = _num(t, "max_iter", wb, positive=True, integer=True, default=50)
        params["tol"] = _num(t, "tol", wb, positive=True, default=1e-3)
    c.baseline_params = params

    t = _table(pre, "normalise", w)
    wn = f"{src}: [preprocess.normalise]"
    check_keys(t, NORMALISE_KEYS, wn, MethodError)
    c.normalise = _str(t, "how", wn, c.normalise, NORMALISATIONS)
    c.normalise_line = _str(t, "line", wn, None)
    if c.normalise == "internal_standard" and not c.normalise_line:
        raise _err(
            f"{wn} line", "internal-standard normalisation needs a line", 'add line = "<id of a line in [[lines]]>"'
        )

    t = _table(pre, "shift", w)
    wsh = f"{src}: [preprocess.shift]"
    check_keys(t, SHIFT_KEYS, wsh, MethodError)
    c.shift = _str(t, "method", wsh, c.shift, SHIFT_METHODS)
    lines = t.get("lines", [])
    if not isinstance(lines, list):
        raise _err(f"{wsh} lines", "expected a list", 'write lines = ["Cu I 324.754", 510.554]')
    c.shift_lines = list(lines)
    c.shift_reference_file = _str(t, "reference_file", wsh, None)
    c.max_shift_nm = _num(t, "max_shift_nm", wsh, positive=True, default=c.max_shift_nm)
    c.shift_search_nm = _num(t, "search_nm", wsh, positive=True, default=c.shift_search_nm)
    c.shift_flag_nm = _num(t, "flag_nm", wsh, positive=True)
    c.shift_model = _str(t, "model", wsh, c.shift_model, SHIFT_MODELS)
    c.shift_min_refs = _num(t, "min_refs", wsh, positive=True, integer=True)
    c.shift_tolerance_nm = _num(t, "tolerance_nm", wsh, positive=True)
    if c.shift_model == "linear" and c.shift_min_refs is not None and c.shift_min_refs < 3:
        raise _err(f"{wsh} min_refs", "a linear correction (shift + dispersion) needs at least 3 references",
                   "set min_refs = 3 or more, or model = \"shift\"")
    if c.shift == "lines" and not c.shift_lines:
        raise _err(
            f"{wsh} lines",
            "shift method 'lines' needs reference lines",
            "list line ids or wavelengths (nm) of strong, isolated lines",
        )
    if c.shift == "xcorr" and not c.shift_reference_file:
        raise _err(
            f"{wsh} reference_file",
            "shift method 'xcorr' needs a reference spectrum",
            "give a CSV file with columns wavelength_nm,intensity",
        )
    return c


def _parse_measure(t: dict, src: str) -> MeasureConfig:
    w = f"{src}: [measure]"
    if not isinstance(t, dict):
        raise _err(w, "must be a table", "write [measure] with key = value lines")
    check_keys(t, MEASURE_KEYS, w, MethodError)
    m = MeasureConfig()
    m.mode = _str(t, "mode", w, m.mode, MODES)
    m.window_nm = _num(t, "window_nm", w, positive=True)
    m.side_nm = _num(t, "side_nm", w, minimum=0.0)
    m.gap_nm = _num(t, "gap_nm", w, minimum=0.0, default=0.0)
    m.profile = _str(t, "profile", w, m.profile, PROFILES)
    m.shared_width = _bool(t, "shared_width", w, m.shared_width)
    m.fwhm_nm = _num(t, "fwhm_nm", w, positive=True)
    m.max_offset_nm = _num(t, "max_offset_nm", w, positive=True)
    m.snr_detect = _num(t, "snr_detect", w, minimum=0.0, default=m.snr_detect)
    m.snr_min = _num(t, "snr_min", w, minimum=0.0, default=m.snr_min)
    m.chunk_shots = _num(t, "chunk_shots", w, positive=True, integer=True, default=m.chunk_shots)
    return m


def _lookup_line(element: str, ion: int, wl: float) -> float | None:
    """Wavelength of the shipped line-list entry within 0.0015 nm of ``wl``; None if absent.

    The list is :func:`compquant.atomic.load_line_list` (docs/atomic-data.md).
    """
    from compquant.atomic import load_line_list

    table = load_line_list()
    species = f"{element} {_ROMAN_INV.get(ion, str(ion))}"
    sel = table[table["species"] == species]
    if len(sel) == 0:
        return None
    d = np.abs(sel["wavelength_nm"].to_numpy(dtype=float) - wl)
    j = int(np.argmin(d))
    if d[j] > 0.0015:
        return None
    return float(sel["wavelength_nm"].iloc[j])


def _check_species(element: str, ion: int, where: str) -> None:
    """Refuse an unknown element symbol or an ion stage the element cannot have (stage <= Z + 1)."""
    from compquant.atomic import element as element_data
    from compquant.atomic.elements import species_name
    from compquant.errors import AtomicDataError

    try:
        el = element_data(element)
        species_name(element, ion)
    except AtomicDataError as exc:
        raise _err(where, f"{exc.what} ({element!r}, ion {ion!r})",
                   "use a chemical symbol (Z = 1..92) and an ion stage 1 (neutral), 2 (singly ionised), ...") from exc
    if int(ion) > el.Z + 1:
        raise _err(where, f"{element} has no ion stage {ion} (Z = {el.Z})",
                   f"use an ion stage from 1 to {el.Z + 1}")


def _id_wavelength(parsed_nm: float, medium: str) -> float:
    """The wavelength an id stands for in the method's medium (ids carry air wavelengths)."""
    if medium == "air":
        return parsed_nm
    from compquant.atomic.airvac import air_to_vacuum

    return float(air_to_vacuum(parsed_nm))


def _parse_lines(items, src: str, measure: MeasureConfig, medium: str = "air") -> list[LineSpec]:
    if not isinstance(items, list) or not items:
        raise _err(
            f"{src}: [[lines]]",
            "the method lists no lines",
            'add at least one [[lines]] entry with id = "<El> <ion> <nm>"',
        )
    out: list[LineSpec] = []
    seen = set()
    for k, t in enumerate(items):
        w = f"{src}: [[lines]] #{k + 1}"
        if not isinstance(t, dict):
            raise _err(w, "each [[lines]] entry must be a table", "write [[lines]] then key = value")
        if "id" in t and isinstance(t["id"], str):
            w = f"{src}: [[lines]] {t['id']}"
        check_keys(t, LINE_KEYS, w, MethodError)
        lid = _str(t, "id", w)
        element = _str(t, "element", w)
        ion = _num(t, "ion", w, positive=True, integer=True)
        wl = _num(t, "wavelength_nm", w, positive=True)
        parsed = parse_line_id(lid) if lid else None
        if lid and parsed is None and (element is None or ion is None or wl is None):
            raise _err(
                f"{w} id",
                f"cannot read line id {lid!r}",
                "write '<Element> <ion roman> <wavelength nm>' e.g. 'Cu I 324.754', "
                "or give element, ion and wavelength_nm",
            )
        if parsed:
            for name, given, from_id in (("element", element, parsed[0]), ("ion", ion, parsed[1])):
                if given is not None and given != from_id:
                    raise _err(
                        f"{w} {name}",
                        f"{name} = {given!r} contradicts the id {lid!r}",
                        "correct the id or remove the key",
                    )
            if wl is not None and min(abs(wl - parsed[2]), abs(wl - _id_wavelength(parsed[2], medium))) > 0.0015:
                raise _err(
                    f"{w} wavelength_nm",
                    f"wavelength_nm = {wl} contradicts the id {lid!r}",
                    "make the id carry the same wavelength (3 decimals) or remove wavelength_nm",
                )
            element = element or parsed[0]
            ion = ion or parsed[1]
            if wl is None:
                found = _lookup_line(parsed[0], parsed[1], parsed[2])
                if found is None:
                    raise _err(
                        w,
                        f"line {lid!r} is not in the line list",
                        "check the id, or give wavelength_nm (and element, ion) explicitly",
                    )
                wl = _id_wavelength(found, medium)  # the line list holds air wavelengths
        if element is None or ion is None or wl is None:
            raise _err(
                w, "a line needs an id, or element + ion + wavelength_nm", 'add id = "Cu I 324.754" or the three keys'
            )
        _check_species(element, ion, w)
        if lid is None:
            lid = make_line_id(element, ion, wl)
        if lid in seen:
            raise _err(w, f"line {lid!r} is listed twice", "remove the duplicate")
        seen.add(lid)
        mode = _str(t, "mode", w, measure.mode, MODES)
        spec = LineSpec(
            line_id=lid,
            element=element,
            ion=ion,
            wavelength_nm=wl,
            mode=mode,
            window_nm=_num(t, "window_nm", w, positive=True, default=measure.window_nm),
            side_nm=_num(t, "side_nm", w, minimum=0.0, default=measure.side_nm),
            gap_nm=_num(t, "gap_nm", w, minimum=0.0, default=measure.gap_nm),
            group=_str(t, "group", w),
            profile=_str(t, "profile", w, measure.profile, PROFILES),
            fwhm_nm=_num(t, "fwhm_nm", w, positive=True, default=measure.fwhm_nm),
            label=_str(t, "label", w),
        )
        out.append(spec)
    return out


def method_from_dict(data: dict, *, source: str = "<method>", sha256: str | None = None) -> Method:
    """Build a :class:`Method` from an already parsed TOML document (same checks as the file)."""
    if not isinstance(data, dict):
        raise _err(source, "a method must be a TOML table", "see docs/method-file.md")
    unknown = sorted(set(data) - TOP_LEVEL)
    if unknown:
        raise _err(
            f"{source}: {unknown[0]}",
            f"unknown top-level table or key {unknown[0]!r}",
            f"allowed: {', '.join(sorted(TOP_LEVEL))}",
        )
    meta = data.get("method")
    if not isinstance(meta, dict):
        raise _err(f"{source}: [method]", "missing [method] table", "add [method] with id, version and technique")
    check_keys(meta, METHOD_KEYS, f"{source}: [method]", MethodError, required={"id"})
    wm = f"{source}: [method]"
    mid = _str(meta, "id", wm)
    version = meta.get("version", "1")
    if not isinstance(version, (str, int)) or isinstance(version, bool):
        raise _err(f"{wm} version", f"expected text or a whole number, got {version!r}", 'write version = "1.0"')
    technique = _str(meta, "technique", wm, "LIBS", TECHNIQUES)
    medium = _str(meta, "medium", wm, "air", MEDIA)
    pre = _parse_preprocess(data.get("preprocess", {}), source)
    measure = _parse_measure(data.get("measure", {}), source)
    lines = _parse_lines(data.get("lines"), source, measure, medium)
    ids = {ln.line_id for ln in lines}
    if pre.normalise == "internal_standard" and pre.normalise_line not in ids:
        raise _err(
            f"{source}: [preprocess.normalise] line",
            f"line {pre.normalise_line!r} is not in [[lines]]",
            "add it to [[lines]]",
        )
    if pre.qc_quantity != "total" and pre.qc_quantity not in ids:
        raise _err(
            f"{source}: [preprocess.qc] quantity",
            f"{pre.qc_quantity!r} is neither 'total' nor a line in [[lines]]",
            "use 'total' or the id of a measured line",
        )
    for ref in pre.shift_lines:
        if isinstance(ref, str) and parse_line_id(ref) is None:
            raise _err(
                f"{source}: [preprocess.shift] lines",
                f"cannot read line id {ref!r}",
                "use ids like 'Cu I 324.754' or wavelengths in nm",
            )
        if not isinstance(ref, (str, int, float)) or isinstance(ref, bool):
            raise _err(
                f"{source}: [preprocess.shift] lines",
                f"bad entry {ref!r}",
                "use ids like 'Cu I 324.754' or wavelengths in nm",
            )
    sections = {name: data[name] for name in OTHER_SECTIONS if name in data}
    for name, sec in sections.items():
        if not isinstance(sec, dict):
            raise _err(f"{source}: [{name}]", f"[{name}] must be a table", "see docs/method-file.md")
    return Method(
        id=mid,
        version=str(version),
        technique=technique,
        description=_str(meta, "description", wm, ""),
        preprocess=pre,
        measure=measure,
        lines=lines,
        sections=sections,
        path=None if source == "<method>" else source,
        sha256=sha256,
        raw=data,
        medium=medium,
    )


def load_method(path) -> Method:
    """Read and check a method file (docs/method-file.md)."""
    data = load_toml(path, "method file", MethodError)
    m = method_from_dict(data, source=str(path), sha256=sha256_file(path))
    return m


__all__ = [
    "LineSpec",
    "MeasureConfig",
    "Method",
    "PreprocessConfig",
    "load_method",
    "make_line_id",
    "method_from_dict",
    "parse_line_id",
    "side_width_nm",
    "window_width_nm",
]
