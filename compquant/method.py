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
from compquant.preprocess.settings import BASELINE as BASELINE_TABLE
from compquant.preprocess.settings import TABLES as PREPROCESS_SCHEMAS
from compquant.preprocess.settings import baseline_params
from compquant.settings import REQUIRED, Setting, Table, settings_dataclass

TOP_LEVEL = frozenset(
    {"method", "preprocess", "lines", "measure", "calibration", "cf", "identify", "map", "control_chart"}
)
OTHER_SECTIONS = ("calibration", "cf", "identify", "map", "control_chart")

MEDIA = ("air", "vacuum")
TECHNIQUES = ("LIBS", "spark-OES", "arc-OES", "other")
MODES = ("window", "fit")
PROFILES = ("voigt", "lorentzian", "gaussian")
PREPROCESS_TABLES = frozenset(t.name.split(".", 1)[1] for t in PREPROCESS_SCHEMAS)
_POS = {"min": 0, "min_open": True}


def _version(v, where, error):
    if not isinstance(v, (str, int)) or isinstance(v, bool):
        raise error(f"expected text or a whole number, got {v!r}", where=where, fix='write version = "1.0"')
    return str(v)


METHOD_TABLE = Table("method", (
    Setting("id", "str", REQUIRED, "method identifier, printed on every output"),
    Setting("version", "any", "1", "method version (text or a whole number)", check=_version),
    Setting("technique", "str", "LIBS", "excitation technique", choices=TECHNIQUES),
    Setting("description", "str", "", "free text"),
    Setting("medium", "str", "air", "medium of the method's wavelengths (line ids always carry the air "
            "wavelength; a run in the other medium is converted, Morton 2000 eq. 8)", choices=MEDIA),
), "The method's identity.", "compquant.method")

MEASURE_TABLE = Table("measure", (
    Setting("mode", "str", "window", '"window": integration minus a local linear background; "fit": '
            "least-squares profile fit", choices=MODES),
    Setting("window_nm", "float", None, "full width of the integration window; not set: 3 x fwhm_nm, else "
            "9 pixels", unit="nm", **_POS),
    Setting("side_nm", "float", None, "width of each background side window; not set: half the window "
            "(>= 3 pixels)", unit="nm", min=0),
    Setting("gap_nm", "float", 0.0, "gap between the window and each side window", unit="nm", min=0),
    Setting("profile", "str", "voigt", "line profile of fit mode", choices=PROFILES),
    Setting("shared_width", "bool", True, "one width for all lines of a fitted group"),
    Setting("fwhm_nm", "float", None, "starting FWHM of fitted lines; not set: 3 pixels", unit="nm", **_POS),
    Setting("max_offset_nm", "float", None, "fitted centres stay within this of the table position; not set: "
            "max(FWHM/2, 1.5 pixels)", unit="nm", **_POS),
    Setting("snr_detect", "float", 3.0, "below: flag not_found", min=0),
    Setting("snr_min", "float", 10.0, "below: flag low_snr", min=0),
    Setting("chunk_shots", "int", 4096, "shots streamed per chunk (memory about chunk x pixels x 24 bytes)",
            **_POS),
), "Line-measurement defaults; each [[lines]] entry may override mode, window_nm, side_nm, gap_nm, profile, "
   "fwhm_nm.", "compquant.method (used by compquant.lines)")

LINE_TABLE = Table("lines", (
    Setting("id", "str", None, '"<Element> <ion roman> <air wavelength nm>", e.g. "Cu I 324.754"; without '
            "wavelength_nm it must match the shipped line list within 0.0015 nm"),
    Setting("element", "str", None, "element symbol of an explicit line"),
    Setting("ion", "int", None, "ion stage of an explicit line (1 = neutral)", **_POS),
    Setting("wavelength_nm", "float", None, "wavelength of an explicit line", unit="nm", **_POS),
    Setting("mode", "str", None, "override of [measure] mode", choices=MODES),
    Setting("window_nm", "float", None, "override of [measure] window_nm", unit="nm", **_POS),
    Setting("side_nm", "float", None, "override of [measure] side_nm", unit="nm", min=0),
    Setting("gap_nm", "float", None, "override of [measure] gap_nm", unit="nm", min=0),
    Setting("group", "str", None, "lines of one group are fitted together"),
    Setting("profile", "str", None, "override of [measure] profile", choices=PROFILES),
    Setting("fwhm_nm", "float", None, "override of [measure] fwhm_nm", unit="nm", **_POS),
    Setting("label", "str", None, "label shown in plots"),
), "One entry per line to measure: an id, or element + ion + wavelength_nm.", "compquant.method (used by "
   "compquant.lines)", notes=("A line is listed once; element, ion and wavelength_nm must agree with the id.",),
    array=True)

#: one line to measure, resolved to element, ion stage and wavelength (the rest: :data:`LINE_TABLE`)
LineSpec = settings_dataclass(
    LINE_TABLE, "LineSpec", module=__name__, leading=(("line_id", "str"), ("element", "str"), ("ion", "int"),
                                                      ("wavelength_nm", "float")),
    skip=("id", "element", "ion", "wavelength_nm"), defaults={"mode": "window"},
    doc="One line to measure, resolved to element, ion stage and wavelength.")

#: the method file's own tables, in the order of the generated reference
TABLES = (METHOD_TABLE, *PREPROCESS_SCHEMAS, MEASURE_TABLE, LINE_TABLE)
LINE_KEYS = frozenset(LINE_TABLE.keys)

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


#: line-measurement defaults; each ``[[lines]]`` entry may override them (fields: :data:`MEASURE_TABLE`)
MeasureConfig = settings_dataclass(MEASURE_TABLE, "MeasureConfig", module=__name__,
                                   doc="Line-measurement defaults; each ``[[lines]]`` entry may override them.")


@dataclass
class Method:
    """A loaded method file.

    One TOML file describes one analytical method: how spectra are cleaned (``[preprocess.*]``),
    which lines are measured and how (``[measure]``, ``[[lines]]``), and the tables owned by
    other modules (``[calibration]``, ``[cf]``, ``[identify]``, ``[map]``, ``[control_chart]``),
    kept untouched in :attr:`sections` and checked by their owners.  Wavelengths are in nm, in
    the method's ``medium``; line ids always carry the air wavelength.

    Attributes
    ----------
    id, version, technique, description : str
        The ``[method]`` table (``technique``: ``"LIBS"``, ``"spark-OES"``, ``"arc-OES"``,
        ``"other"``).
    preprocess : PreprocessConfig
        The resolved ``[preprocess.*]`` settings.
    measure : MeasureConfig
        Line-measurement defaults (``[measure]``).
    lines : list of LineSpec
        The lines to measure, resolved to element, ion stage and wavelength (nm).
    sections : dict
        The tables owned by other modules, as parsed.
    path : str or None
        The file's path (provenance).
    sha256 : str or None
        SHA-256 of the file (provenance).
    raw : dict
        The whole parsed document.
    medium : {"air", "vacuum"}
        Medium of the method's wavelengths.

    See Also
    --------
    load_method : read a method file.
    method_from_dict : build one from a parsed document.

    References
    ----------
    .. [1] TOML v1.0.0, Tom's Obvious Minimal Language, specification (https://toml.io/en/v1.0.0),
       read with Python's ``tomllib``.
    .. [2] Morton, Astrophys. J. Suppl. Ser. 130 (2000) 403, eq. 8: the Edlen (1966) / Birch &
       Downs (1994) refractive index of standard air, for a run axis in the other medium.
    .. [3] FIPS 180-4, Secure Hash Standard (SHA-256 of the file, ``Method.sha256``).
    .. [4] compquant documentation: docs/method-file.md and the generated docs/method-reference.md.

    Examples
    --------
    >>> from compquant import load_method
    >>> m = load_method("demo_runs/method.toml")
    >>> m.lines[0].line_id, m.medium
    ('Cu I 510.554', 'air')
    """

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


def _table(parent: dict, key: str, where: str) -> dict:
    v = parent.get(key, {})
    if not isinstance(v, dict):
        raise _err(f"{where}", f"[{key}] must be a table", f"write it as [{key}] with key = value lines")
    return v


def _parse_preprocess(pre: dict, src: str) -> PreprocessConfig:
    """``[preprocess.*]`` through the tables of :mod:`compquant.preprocess.settings`, then the rules
    that tie settings together."""
    w = f"{src}: [preprocess]"
    if not isinstance(pre, dict):
        raise _err(w, "must be a table", "write [preprocess.<step>] tables")
    check_keys(pre, PREPROCESS_TABLES, w, MethodError)
    v = {}
    for schema in PREPROCESS_SCHEMAS:
        step = schema.name.split(".", 1)[1]
        t = _table(pre, step, w)
        only = ("method",) if schema is BASELINE_TABLE else None
        v[step] = schema.parse(t, f"{src}: [{schema.name}]", MethodError, only=only)
    d, r, sa, q, b, n, sh = (v[k] for k in ("dark", "response", "saturation", "qc", "baseline", "normalise", "shift"))
    c = PreprocessConfig(
        dark=d["enabled"], dark_statistic=d["statistic"], dark_scale_exposure=d["scale_exposure"],
        response=r["enabled"], response_file=r["file"],
        saturation=sa["enabled"], saturation_level=sa["level"], saturation_margin=sa["margin"],
        qc=q["enabled"], qc_quantity=q["quantity"], qc_k=q["k"], qc_min_fraction=q["min_fraction"],
        qc_min_signal=q["min_signal"], pulse_energy_normalise=q["pulse_energy_normalise"],
        min_pulse_fraction=q["min_pulse_fraction"],
        baseline=b["method"],
        baseline_params=baseline_params(_table(pre, "baseline", w), b["method"], f"{src}: [preprocess.baseline]",
                                        MethodError),
        normalise=n["how"], normalise_line=n["line"],
        shift=sh["method"], shift_lines=sh["lines"], shift_reference_file=sh["reference_file"],
        max_shift_nm=sh["max_shift_nm"], shift_search_nm=sh["search_nm"], shift_flag_nm=sh["flag_nm"],
        shift_model=sh["model"], shift_min_refs=sh["min_refs"], shift_tolerance_nm=sh["tolerance_nm"],
    )
    wn, wsh = f"{src}: [preprocess.normalise]", f"{src}: [preprocess.shift]"
    if c.normalise == "internal_standard" and not c.normalise_line:
        raise _err(
            f"{wn}.line", "internal-standard normalisation needs a line", 'add line = "<id of a line in [[lines]]>"'
        )
    if c.shift_model == "linear" and c.shift_min_refs is not None and c.shift_min_refs < 3:
        raise _err(f"{wsh}.min_refs", "a linear correction (shift + dispersion) needs at least 3 references",
                   "set min_refs = 3 or more, or model = \"shift\"")
    if c.shift == "lines" and not c.shift_lines:
        raise _err(
            f"{wsh}.lines",
            "shift method 'lines' needs reference lines",
            "list line ids or wavelengths (nm) of strong, isolated lines",
        )
    if c.shift == "xcorr" and not c.shift_reference_file:
        raise _err(
            f"{wsh}.reference_file",
            "shift method 'xcorr' needs a reference spectrum",
            "give a CSV file with columns wavelength_nm,intensity",
        )
    return c


def _parse_measure(t: dict, src: str) -> MeasureConfig:
    w = f"{src}: [measure]"
    if not isinstance(t, dict):
        raise _err(w, "must be a table", "write [measure] with key = value lines")
    return MeasureConfig(**MEASURE_TABLE.parse(t, w, MethodError))


def _lookup_line(element: str, ion: int, wl: float) -> float | None:
    """``wl`` (the id's wavelength, 3 decimals) if the shipped line list holds a line of the
    species within :data:`compquant.atomic.LINE_ID_TOLERANCE_NM`; None if absent.

    The list is :func:`compquant.atomic.load_line_list` (docs/atomic-data.md); see
    :func:`compquant.atomic.find_line`.  The id's wavelength is kept (not the list's, which may
    differ in the fourth decimal or, for ids written from older tables, by up to the tolerance)
    so that a method measures where it always did.
    """
    from compquant.atomic import find_line, load_line_list
    from compquant.atomic.elements import known_symbols

    species = f"{element} {_ROMAN_INV.get(ion, str(ion))}"
    if species.split()[1] not in ("I", "II") or element not in known_symbols():
        return None
    row = find_line(species, wl, lines=load_line_list())
    return None if row is None else float(wl)


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


def _or(value, default):
    """A line's own setting, else the [measure] default."""
    return default if value is None else value


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
        v = LINE_TABLE.parse(t, w, MethodError)
        lid, element, ion, wl = v["id"], v["element"], v["ion"], v["wavelength_nm"]
        parsed = parse_line_id(lid) if lid else None
        if lid and parsed is None and (element is None or ion is None or wl is None):
            raise _err(
                f"{w}.id",
                f"cannot read line id {lid!r}",
                "write '<Element> <ion roman> <wavelength nm>' e.g. 'Cu I 324.754', "
                "or give element, ion and wavelength_nm",
            )
        if parsed:
            for name, given, from_id in (("element", element, parsed[0]), ("ion", ion, parsed[1])):
                if given is not None and given != from_id:
                    raise _err(
                        f"{w}.{name}",
                        f"{name} = {given!r} contradicts the id {lid!r}",
                        "correct the id or remove the key",
                    )
            if wl is not None and min(abs(wl - parsed[2]), abs(wl - _id_wavelength(parsed[2], medium))) > 0.0015:
                raise _err(
                    f"{w}.wavelength_nm",
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
        spec = LineSpec(
            line_id=lid,
            element=element,
            ion=ion,
            wavelength_nm=wl,
            mode=_or(v["mode"], measure.mode),
            window_nm=_or(v["window_nm"], measure.window_nm),
            side_nm=_or(v["side_nm"], measure.side_nm),
            gap_nm=_or(v["gap_nm"], measure.gap_nm),
            group=v["group"],
            profile=_or(v["profile"], measure.profile),
            fwhm_nm=_or(v["fwhm_nm"], measure.fwhm_nm),
            label=v["label"],
        )
        out.append(spec)
    return out


def method_from_dict(data: dict, *, source: str = "<method>", sha256: str | None = None) -> Method:
    """Build a :class:`Method` from an already parsed TOML document (same checks as the file).

    Refuses unknown top-level tables and unknown keys in the tables the method owns
    (``[method]``, ``[preprocess.*]``, ``[measure]``, ``[[lines]]``), resolves each line (by id
    such as ``"Cu I 324.754"``, looked up in the shipped line list within 0.0015 nm, or by explicit
    ``element``, ``ion`` and ``wavelength_nm`` in nm) and keeps the tables owned by other modules
    in :attr:`Method.sections`.

    Parameters
    ----------
    data : dict
        The parsed document (e.g. from ``tomllib.loads``).
    source : str, default ``"<method>"``
        Name used in error messages and as :attr:`Method.path`.
    sha256 : str, optional
        SHA-256 of the source file, kept for provenance.

    Returns
    -------
    Method

    Raises
    ------
    MethodError
        Naming the table and key at fault (``<source>: [table] key``), what is wrong and how to
        fix it.

    See Also
    --------
    load_method : the same from a file.

    References
    ----------
    .. [1] TOML v1.0.0, Tom's Obvious Minimal Language, specification (https://toml.io/en/v1.0.0),
       read with Python's ``tomllib``.
    .. [2] Morton, Astrophys. J. Suppl. Ser. 130 (2000) 403, eq. 8: the Edlen (1966) / Birch &
       Downs (1994) refractive index of standard air, for a run axis in the other medium.
    .. [3] FIPS 180-4, Secure Hash Standard (SHA-256 of the file, ``Method.sha256``).
    .. [4] compquant documentation: docs/method-file.md and the generated docs/method-reference.md.

    Examples
    --------
    >>> from compquant import method_from_dict
    >>> m = method_from_dict({"method": {"id": "demo"},
    ...                      "lines": [{"element": "Cu", "ion": 1, "wavelength_nm": 324.754}]})
    >>> m.id, len(m.lines), m.lines[0].element
    ('demo', 1, 'Cu')
    """
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
    wm = f"{source}: [method]"
    mv = METHOD_TABLE.parse(meta, wm, MethodError)
    mid, version, technique, medium = mv["id"], mv["version"], mv["technique"], mv["medium"]
    pre = _parse_preprocess(data.get("preprocess", {}), source)
    measure = _parse_measure(data.get("measure", {}), source)
    lines = _parse_lines(data.get("lines"), source, measure, medium)
    ids = {ln.line_id for ln in lines}
    if pre.normalise == "internal_standard" and pre.normalise_line not in ids:
        raise _err(
            f"{source}: [preprocess.normalise].line",
            f"line {pre.normalise_line!r} is not in [[lines]]",
            "add it to [[lines]]",
        )
    if pre.qc_quantity != "total" and pre.qc_quantity not in ids:
        raise _err(
            f"{source}: [preprocess.qc].quantity",
            f"{pre.qc_quantity!r} is neither 'total' nor a line in [[lines]]",
            "use 'total' or the id of a measured line",
        )
    for ref in pre.shift_lines:
        if isinstance(ref, str) and parse_line_id(ref) is None:
            raise _err(
                f"{source}: [preprocess.shift].lines",
                f"cannot read line id {ref!r}",
                "use ids like 'Cu I 324.754' or wavelengths in nm",
            )
        if not isinstance(ref, (str, int, float)) or isinstance(ref, bool):
            raise _err(
                f"{source}: [preprocess.shift].lines",
                f"bad entry {ref!r}",
                "use ids like 'Cu I 324.754' or wavelengths in nm",
            )
    sections = {name: data[name] for name in OTHER_SECTIONS if name in data}
    for name, sec in sections.items():
        if not isinstance(sec, dict):
            raise _err(f"{source}: [{name}]", f"[{name}] must be a table", "see docs/method-file.md")
    return Method(
        id=mid,
        version=str(version),  # the default "1" when absent
        technique=technique,
        description=mv["description"],
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
    """Read and check a method file (docs/method-file.md).

    The file is parsed as TOML and checked by :func:`method_from_dict`; its SHA-256 and path are
    kept for provenance.  Relative file paths in the method (response curve, reference spectrum)
    are relative to the method file.

    Parameters
    ----------
    path : str or path-like
        The method file (``.toml``).

    Returns
    -------
    Method

    Raises
    ------
    MethodError
        The file cannot be read, is not valid TOML, or a table or key is unknown or wrong (named
        with the file and key).

    See Also
    --------
    method_from_dict : the same from a parsed document.
    Method.check_run : check the lines against a run's wavelength range.

    References
    ----------
    .. [1] TOML v1.0.0, Tom's Obvious Minimal Language, specification (https://toml.io/en/v1.0.0),
       read with Python's ``tomllib``.
    .. [2] Morton, Astrophys. J. Suppl. Ser. 130 (2000) 403, eq. 8: the Edlen (1966) / Birch &
       Downs (1994) refractive index of standard air, for a run axis in the other medium.
    .. [3] FIPS 180-4, Secure Hash Standard (SHA-256 of the file, ``Method.sha256``).
    .. [4] compquant documentation: docs/method-file.md and the generated docs/method-reference.md.

    Examples
    --------
    >>> from compquant import load_method
    >>> load_method("demo_runs/method.toml").id
    'demo-cu-alloys-libs'
    """
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
