"""Scenario files for ``compquant simulate`` (TOML; format in docs/scenario.md).

A scenario states what was measured (samples with roles and true compositions,
or references to certified standards), the plasma, the laser, the spectrometer
and detector, an optional instrument drift, and dark frames.  Loading checks
every key and value and raises :class:`~compquant.errors.ConfigError` naming
the file and key.  True compositions of certified materials are drawn from
their certified values and standard uncertainties with a fixed seed
(``[standards] truth_seed``), so every run made from the same standards file
sees the same materials.
"""

from __future__ import annotations

import math
import zlib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from compquant.errors import ConfigError
from compquant.fileio import check_keys, load_toml

ROLES = ("standard", "blank", "check", "unknown", "setup")

_TOP = {"scenario", "standards", "plasma", "laser", "instrument", "drift", "dark", "samples", "lines"}
_SCENARIO = {"id", "title", "lab", "start_time", "seed", "matrix", "sample_interval_s", "description"}
_STANDARDS = {"file", "truth_seed", "truth_clip_sigma"}
_PLASMA = {
    "temperature_k",
    "temperature_rsd",
    "ne_cm3",
    "ne_rsd",
    "length_mm",
    "self_absorption",
    "continuum",
    "ionisation_lowering",
    "max_stage",
    "stark_fallback_fwhm_nm",
    "stark_fallback_ne_cm3",
    "temperature_energy_exponent",
    "ne_energy_exponent",
}
_LASER = {
    "wavelength_nm",
    "pulse_energy_mj",
    "pulse_energy_rsd",
    "spot_diameter_um",
    "repetition_rate_hz",
    "signal_energy_exponent",
    "signal_rsd",
    "raster_step_mm",
    "raster_columns",
}
_INSTRUMENT = {
    "name",
    "wavelength_min_nm",
    "wavelength_max_nm",
    "n_pixels",
    "resolving_power",
    "fwhm_nm",
    "oversample",
    "response_nm",
    "response",
    "photoelectrons_per_radiance",
    "gain_counts_per_pe",
    "bias_counts",
    "bias_pattern_counts",
    "dark_current_pe_per_s",
    "read_noise_counts",
    "saturation_counts",
    "exposure_s",
    "gate_delay_us",
    "gate_width_us",
    "atmosphere",
    "detector",
    "spectrometer",
    "pattern_seed",
}
_DRIFT = {"response_scale", "factor_nm", "factor", "wavelength_shift_nm", "description"}
_DARK = {"frames"}
_SAMPLE = {"id", "role", "standard", "composition", "shots", "description"}
_LINES = {"file", "elements", "levels"}


@dataclass(frozen=True)
class SampleSpec:
    """One sample of the scenario with its true composition (mass fractions, sum 1)."""

    sample_id: str
    role: str
    standard_ref: str
    description: str
    shots: int
    composition: dict


@dataclass(frozen=True)
class Scenario:
    """A validated scenario (see docs/scenario.md for every key)."""

    path: Path
    id: str
    title: str
    lab: str
    start_time: str
    seed: int
    matrix: str
    sample_interval_s: float
    plasma: dict
    laser: dict
    instrument: dict
    drift: dict
    dark_frames: int
    samples: tuple
    lines_file: Path | None
    levels_dir: Path | None
    line_elements: tuple | None
    standards_file: Path | None
    certified: dict = field(default_factory=dict)

    @property
    def elements(self) -> list:
        """All elements present in any sample, sorted (matrix first)."""
        els = sorted({e for s in self.samples for e in s.composition} - {self.matrix})
        return [self.matrix, *els]


def _num(table, key, where, default=None, lo=None, hi=None, integer=False, lo_open=False):
    if key not in table:
        if default is None:
            raise ConfigError(f"missing required key {key!r}", where=where, fix="add it; see docs/scenario.md")
        return default
    v = table[key]
    if isinstance(v, bool) or not isinstance(v, int | float):
        raise ConfigError(f"{key} must be a number, not {v!r}", where=f"{where}.{key}", fix="write a plain number")
    if integer and (not float(v).is_integer()):
        raise ConfigError(f"{key} must be a whole number, not {v!r}", where=f"{where}.{key}", fix="write an integer")
    v = float(v)
    bad = not math.isfinite(v) or (lo is not None and (v <= lo if lo_open else v < lo)) or (hi is not None and v > hi)
    if bad:
        rng = f"{'>' if lo_open else '>='} {lo}" if lo is not None else ""
        if hi is not None:
            rng += f"{' and ' if rng else ''}<= {hi}"
        raise ConfigError(f"{key} = {v:g} is out of range", where=f"{where}.{key}", fix=f"use a value {rng}")
    return int(v) if integer else v


def _bool(table, key, where, default):
    v = table.get(key, default)
    if not isinstance(v, bool):
        raise ConfigError(f"{key} must be true or false, not {v!r}", where=f"{where}.{key}", fix="write true or false")
    return v


def _str(table, key, where, default=None):
    v = table.get(key, default)
    if v is None:
        raise ConfigError(f"missing required key {key!r}", where=where, fix="add it; see docs/scenario.md")
    if not isinstance(v, str):
        raise ConfigError(f"{key} must be text, not {v!r}", where=f"{where}.{key}", fix="quote the value")
    return v


def _num_list(table, key, where, n_min=2):
    v = table.get(key)
    if (
        not isinstance(v, list)
        or len(v) < n_min
        or not all(isinstance(x, int | float) and not isinstance(x, bool) and math.isfinite(x) for x in v)
    ):
        raise ConfigError(
            f"{key} must be a list of at least {n_min} numbers",
            where=f"{where}.{key}",
            fix="e.g. [250.0, 400.0, 600.0]",
        )
    return [float(x) for x in v]


def load_standards_csv(path: Path) -> dict:
    """Certified values of a standards file, read and validated by
    :func:`compquant.calibrate.load_standards` (docs/architecture.md columns).

    Returns ``{standard_id: {element: (mass_fraction g/g, standard_uncertainty g/g)}}``.
    """
    from compquant.calibrate import load_standards

    out: dict = {}
    tab = load_standards(path)
    for sid, el, w, u in zip(tab["standard_id"], tab["element"], tab["mass_fraction"], tab["u"]):
        out.setdefault(str(sid), {})[str(el)] = (float(w), float(u))
    return out


def draw_true_composition(
    standard_id: str, certified: dict, matrix: str, truth_seed: int, clip_sigma: float = 2.5
) -> dict:
    """True mass fractions of a certified material (invented truth for simulations).

    Each certified element other than the matrix is ``w_cert + u z`` with z a
    standard normal truncated at +-``clip_sigma`` (seeded by ``truth_seed``, the
    standard id and the element, so the draw does not depend on anything else);
    the matrix element is the balance to 1.
    """
    comp = {}
    for el in sorted(certified):
        if el == matrix:
            continue
        w, u = certified[el]
        seq = np.random.SeedSequence([int(truth_seed), zlib.crc32(standard_id.encode()), zlib.crc32(el.encode())])
        z = float(np.clip(np.random.default_rng(seq).standard_normal(), -clip_sigma, clip_sigma))
        comp[el] = max(w + u * z, 0.0)
    rest = 1.0 - sum(comp.values())
    if rest <= 0:
        raise ConfigError(
            f"certified values of {standard_id} leave no room for the matrix {matrix}",
            where="standards",
            fix="check the certified values",
        )
    comp[matrix] = rest
    return comp


def _composition(table, matrix, where):
    if not isinstance(table, dict) or not table:
        raise ConfigError(
            "composition must be a table of element = mass fraction",
            where=where,
            fix="e.g. composition = { Zn = 0.35, Pb = 0.02 } (matrix = balance)",
        )
    comp = {}
    for el, v in table.items():
        if isinstance(v, bool) or not isinstance(v, int | float) or not (0 <= float(v) <= 1):
            raise ConfigError(
                f"mass fraction of {el} must be a number in [0, 1], not {v!r}",
                where=f"{where}.{el}",
                fix="mass fractions are g/g, e.g. 0.35 for 35 %",
            )
        comp[str(el)] = float(v)
    if matrix in comp:
        total = sum(comp.values())
        if abs(total - 1.0) > 1e-6:
            raise ConfigError(
                f"mass fractions sum to {total:.6f}, not 1",
                where=where,
                fix=f"fix the values or leave {matrix} out (it is then the balance)",
            )
    else:
        rest = 1.0 - sum(comp.values())
        if rest < 0:
            raise ConfigError("mass fractions sum to more than 1", where=where, fix="fix the values")
        comp[matrix] = rest
    return comp


def _curve(table: dict, x_key: str, y_key: str, where: str, meaning: str):
    """A positive curve given as two lists (wavelengths ``x_key`` increasing, values ``y_key`` > 0),
    or ``(None, None)`` when neither key is present."""
    if (x_key in table) != (y_key in table):
        raise ConfigError(f"give both {x_key} and {y_key}, or neither", where=where, fix=meaning)
    if x_key not in table:
        return None, None
    xs, ys = _num_list(table, x_key, where), _num_list(table, y_key, where)
    if len(xs) != len(ys) or np.any(np.diff(xs) <= 0) or min(ys) <= 0:
        raise ConfigError(
            f"{x_key} must increase, match {y_key} in length, and {y_key} be > 0",
            where=f"{where}.{y_key}",
            fix="give matching lists",
        )
    return xs, ys


def _section(doc: dict, name: str, keys, w: str, required: set) -> tuple[dict, str]:
    """A required table of the scenario, its keys checked, and its name for error messages."""
    table = doc[name]
    check_keys(table, keys, f"{w}: [{name}]", required=required)
    return table, f"{w}: {name}"


def _standards_table(doc: dict, w: str, path: Path):
    """``[standards]``: (certified values, file, truth seed, clip in sigma)."""
    certified, std_file, truth_seed, clip = {}, None, 0, 2.5
    if "standards" in doc:
        st = doc["standards"]
        check_keys(st, _STANDARDS, f"{w}: [standards]", required={"file"})
        std_file = (path.parent / _str(st, "file", f"{w}: standards")).resolve()
        truth_seed = _num(st, "truth_seed", f"{w}: standards", 0, lo=0, integer=True)
        clip = _num(st, "truth_clip_sigma", f"{w}: standards", 2.5, lo=0, lo_open=True)
        certified = load_standards_csv(std_file)
    return certified, std_file, truth_seed, clip


def _plasma_table(doc: dict, w: str) -> dict:
    """``[plasma]``: temperature, electron density, their shot-to-shot spread, the model switches."""
    pl, wp = _section(doc, "plasma", _PLASMA, w, {"temperature_k", "ne_cm3"})
    plasma = {
        "temperature_k": _num(pl, "temperature_k", wp, lo=3000, hi=30000),
        "temperature_rsd": _num(pl, "temperature_rsd", wp, 0.0, lo=0, hi=0.3),
        "ne_cm3": _num(pl, "ne_cm3", wp, lo=1e14, hi=1e19),
        "ne_rsd": _num(pl, "ne_rsd", wp, 0.0, lo=0, hi=0.5),
        "length_mm": _num(pl, "length_mm", wp, 1.0, lo=0, lo_open=True, hi=100),
        "self_absorption": _bool(pl, "self_absorption", wp, True),
        "continuum": _bool(pl, "continuum", wp, True),
        "ionisation_lowering": _bool(pl, "ionisation_lowering", wp, True),
        "max_stage": _num(pl, "max_stage", wp, 2, lo=2, hi=2, integer=True),
        "stark_fallback_fwhm_nm": _num(pl, "stark_fallback_fwhm_nm", wp, 0.0, lo=0, hi=1.0),
        "stark_fallback_ne_cm3": _num(pl, "stark_fallback_ne_cm3", wp, 1e17, lo=0, lo_open=True),
        "temperature_energy_exponent": _num(pl, "temperature_energy_exponent", wp, 0.0, lo=-2, hi=2),
        "ne_energy_exponent": _num(pl, "ne_energy_exponent", wp, 0.0, lo=-2, hi=2),
    }
    return plasma


def _laser_table(doc: dict, w: str) -> dict:
    """``[laser]``: wavelength, pulse energy and its spread, spot, repetition rate, raster."""
    la, wl_ = _section(doc, "laser", _LASER, w, {"wavelength_nm", "pulse_energy_mj"})
    laser = {
        "wavelength_nm": _num(la, "wavelength_nm", wl_, lo=100, hi=11000),
        "pulse_energy_mj": _num(la, "pulse_energy_mj", wl_, lo=0, lo_open=True, hi=10000),
        "pulse_energy_rsd": _num(la, "pulse_energy_rsd", wl_, 0.0, lo=0, hi=0.3),
        "spot_diameter_um": _num(la, "spot_diameter_um", wl_, 100.0, lo=0, lo_open=True),
        "repetition_rate_hz": _num(la, "repetition_rate_hz", wl_, 10.0, lo=0, lo_open=True, hi=1e5),
        "signal_energy_exponent": _num(la, "signal_energy_exponent", wl_, 1.0, lo=0, hi=5),
        "signal_rsd": _num(la, "signal_rsd", wl_, 0.0, lo=0, hi=0.5),
        "raster_step_mm": _num(la, "raster_step_mm", wl_, 0.3, lo=0),
        "raster_columns": _num(la, "raster_columns", wl_, 10, lo=1, integer=True),
    }
    return laser


def _instrument_table(doc: dict, w: str) -> dict:
    """``[instrument]``: wavelength range, pixels, resolution, detector, gate, response curve."""
    ins, wi = _section(
        doc, "instrument", _INSTRUMENT, w,
        {"wavelength_min_nm", "wavelength_max_nm", "n_pixels", "photoelectrons_per_radiance"},
    )
    instrument = {
        "name": _str(ins, "name", wi, "simulated spectrometer"),
        "spectrometer": _str(ins, "spectrometer", wi, ""),
        "detector": _str(ins, "detector", wi, ""),
        "wavelength_min_nm": _num(ins, "wavelength_min_nm", wi, lo=100, hi=2000),
        "wavelength_max_nm": _num(ins, "wavelength_max_nm", wi, lo=100, hi=2000),
        "n_pixels": _num(ins, "n_pixels", wi, lo=16, hi=1 << 16, integer=True),
        "oversample": _num(ins, "oversample", wi, 4, lo=1, hi=16, integer=True),
        "photoelectrons_per_radiance": _num(ins, "photoelectrons_per_radiance", wi, lo=0, lo_open=True),
        "gain_counts_per_pe": _num(ins, "gain_counts_per_pe", wi, 1.0, lo=0, lo_open=True),
        "bias_counts": _num(ins, "bias_counts", wi, 500.0, lo=0, hi=60000),
        "bias_pattern_counts": _num(ins, "bias_pattern_counts", wi, 0.0, lo=0),
        "dark_current_pe_per_s": _num(ins, "dark_current_pe_per_s", wi, 0.0, lo=0),
        "read_noise_counts": _num(ins, "read_noise_counts", wi, 0.0, lo=0),
        "saturation_counts": _num(ins, "saturation_counts", wi, 65535.0, lo=1, hi=65535),
        "exposure_s": _num(ins, "exposure_s", wi, 0.01, lo=0, lo_open=True),
        "gate_delay_us": _num(ins, "gate_delay_us", wi, 1.0, lo=0),
        "gate_width_us": _num(ins, "gate_width_us", wi, 10.0, lo=0, lo_open=True),
        "atmosphere": _str(ins, "atmosphere", wi, "air"),
        "pattern_seed": _num(ins, "pattern_seed", wi, 0, lo=0, integer=True),
    }
    if instrument["wavelength_max_nm"] <= instrument["wavelength_min_nm"]:
        raise ConfigError(
            "wavelength_max_nm must be above wavelength_min_nm",
            where=f"{wi}.wavelength_max_nm",
            fix="give the range as min < max",
        )
    if ("resolving_power" in ins) == ("fwhm_nm" in ins):
        raise ConfigError(
            "give exactly one of resolving_power and fwhm_nm",
            where=wi,
            fix="resolving_power = 3000 (FWHM = lambda/R) or fwhm_nm = 0.1",
        )
    instrument["resolving_power"] = (
        _num(ins, "resolving_power", wi, lo=10, hi=1e6) if "resolving_power" in ins else None
    )
    instrument["fwhm_nm"] = _num(ins, "fwhm_nm", wi, lo=0, lo_open=True, hi=10) if "fwhm_nm" in ins else None
    instrument["response_nm"], instrument["response"] = _curve(
        ins, "response_nm", "response", wi, "response is a list of relative values at the wavelengths response_nm"
    )
    return instrument


def _drift_table(doc: dict, w: str) -> dict:
    """``[drift]``: response scale and curve, wavelength shift (defaults: no drift)."""
    drift = {"response_scale": 1.0, "factor_nm": None, "factor": None, "wavelength_shift_nm": 0.0, "description": ""}
    if "drift" in doc:
        dr = doc["drift"]
        wd = f"{w}: drift"
        check_keys(dr, _DRIFT, f"{w}: [drift]")
        drift["response_scale"] = _num(dr, "response_scale", wd, 1.0, lo=0, lo_open=True, hi=10)
        drift["wavelength_shift_nm"] = _num(dr, "wavelength_shift_nm", wd, 0.0, lo=-1, hi=1)
        drift["description"] = _str(dr, "description", wd, "")
        drift["factor_nm"], drift["factor"] = _curve(
            dr, "factor_nm", "factor", wd, "factor is a list of response multipliers at wavelengths factor_nm"
        )
    return drift


def _lines_table(doc: dict, w: str, path: Path):
    """``[lines]``: (line-list file or None, element subset or None, level-table folder or None)."""
    lines_file, line_elements, levels_dir = None, None, None
    if "lines" in doc:
        li = doc["lines"]
        check_keys(li, _LINES, f"{w}: [lines]")
        if "file" in li:
            lines_file = (path.parent / _str(li, "file", f"{w}: lines")).resolve()
        if "levels" in li:
            levels_dir = (path.parent / _str(li, "levels", f"{w}: lines")).resolve()
            if not levels_dir.is_dir():
                raise ConfigError("levels directory not found", where=f"{w}: lines.levels",
                                  fix="name a directory of <El>_<ion>.csv level tables")
        if "elements" in li:
            v = li["elements"]
            if not isinstance(v, list) or not all(isinstance(x, str) for x in v):
                raise ConfigError(
                    "elements must be a list of symbols", where=f"{w}: lines.elements", fix='e.g. ["Cu", "Zn"]'
                )
            line_elements = tuple(v)
    return lines_file, line_elements, levels_dir


def _samples_table(doc: dict, w: str, certified: dict, matrix: str, truth_seed: int, clip: float) -> list:
    """``[[samples]]``: one SampleSpec each, true compositions drawn for certified materials."""
    samples_raw = doc["samples"]
    if not isinstance(samples_raw, list) or not samples_raw:
        raise ConfigError("no [[samples]]", where=w, fix="add at least one [[samples]] table")
    samples, seen = [], set()
    for i, s in enumerate(samples_raw):
        wsmp = f"{w}: samples[{i}]"
        check_keys(s, _SAMPLE, wsmp, required={"id", "role", "shots"})
        sid = _str(s, "id", wsmp)
        wsmp = f"{w}: sample {sid!r}"
        if not sid.strip() or sid in seen:
            raise ConfigError("sample id empty or used twice", where=wsmp, fix="give each sample a unique id")
        seen.add(sid)
        role = _str(s, "role", wsmp)
        if role not in ROLES:
            raise ConfigError(f"role {role!r} unknown", where=f"{wsmp}.role", fix=f"use one of {', '.join(ROLES)}")
        shots = _num(s, "shots", wsmp, lo=1, hi=100000, integer=True)
        ref = _str(s, "standard", wsmp, "")
        if ("composition" in s) == bool(ref):
            raise ConfigError(
                "give exactly one of 'standard' (a certified material) and 'composition'",
                where=wsmp,
                fix="certified materials take their truth from the standards file",
            )
        if ref:
            if ref not in certified:
                raise ConfigError(
                    f"standard {ref!r} is not in the standards file",
                    where=f"{wsmp}.standard",
                    fix="check the id or the [standards] file",
                )
            comp = draw_true_composition(ref, certified[ref], matrix, truth_seed, clip)
        else:
            comp = _composition(s["composition"], matrix, f"{wsmp}.composition")
        if role in ("standard", "check") and not ref:
            raise ConfigError(
                f"a sample with role {role!r} must reference a certified standard",
                where=wsmp,
                fix="set standard = '<id in the standards file>'",
            )
        samples.append(SampleSpec(sid, role, ref, _str(s, "description", wsmp, ""), shots, comp))
    return samples


def load_scenario(path) -> Scenario:
    """Read and validate a scenario TOML file.

    A scenario states what was measured (samples with roles and true compositions, or
    references to certified standards), the plasma, the laser, the spectrometer and detector, an
    optional instrument drift, and dark frames (docs/scenario.md).  Mass fractions are g/g;
    paths in the file are relative to it.  The true composition of a certified material is drawn
    as ``w = w_cert + u z`` per certified element other than the matrix, ``z`` a standard normal
    truncated at ``+-truth_clip_sigma`` and seeded by ``[standards] truth_seed``, so every run
    made from the same standards file sees the same materials.

    Parameters
    ----------
    path : str or path-like
        The scenario file (``.toml``).

    Returns
    -------
    Scenario
        The validated scenario (every key of docs/scenario.md, defaults filled in).

    Raises
    ------
    ConfigError
        Unknown keys, wrong types or out-of-range values, naming the file and key.

    See Also
    --------
    simulate_run : make a run file from it.

    References
    ----------
    .. [1] TOML v1.0.0, Tom's Obvious Minimal Language, specification (https://toml.io/en/v1.0.0).
    .. [2] ISO 8601, Date and time -- Representations for information interchange
       (``[scenario] start_time``).
    .. [3] compquant documentation: docs/scenario.md (every key) and docs/physics.md.

    Examples
    --------
    >>> from compquant import load_scenario
    >>> sc = load_scenario("demo_runs/scenario-day1.toml")
    >>> sc.id, sc.matrix
    ('demo-day1', 'Cu')
    """
    path = Path(path)
    doc = load_toml(path, "scenario file")
    w = str(path)
    check_keys(doc, _TOP, w, required={"scenario", "plasma", "laser", "instrument", "samples"})
    sc = doc["scenario"]
    check_keys(sc, _SCENARIO, f"{w}: [scenario]", required={"id"})
    ws = f"{w}: scenario"
    matrix = _str(sc, "matrix", ws, "Cu")
    seed = _num(sc, "seed", ws, 0, lo=0, integer=True)
    interval = _num(sc, "sample_interval_s", ws, 60.0, lo=0)

    certified, std_file, truth_seed, clip = _standards_table(doc, w, path)
    plasma = _plasma_table(doc, w)
    laser = _laser_table(doc, w)
    instrument = _instrument_table(doc, w)
    drift = _drift_table(doc, w)
    dark_frames = 0
    if "dark" in doc:
        check_keys(doc["dark"], _DARK, f"{w}: [dark]")
        dark_frames = _num(doc["dark"], "frames", f"{w}: dark", 0, lo=0, hi=10000, integer=True)

    lines_file, line_elements, levels_dir = _lines_table(doc, w, path)
    samples = _samples_table(doc, w, certified, matrix, truth_seed, clip)

    return Scenario(
        path=path,
        id=_str(sc, "id", ws),
        title=_str(sc, "title", ws, ""),
        lab=_str(sc, "lab", ws, ""),
        start_time=_str(sc, "start_time", ws, "2026-01-01T08:00:00Z"),
        seed=seed,
        matrix=matrix,
        sample_interval_s=interval,
        plasma=plasma,
        laser=laser,
        instrument=instrument,
        drift=drift,
        dark_frames=dark_frames,
        samples=tuple(samples),
        lines_file=lines_file,
        levels_dir=levels_dir,
        line_elements=line_elements,
        standards_file=std_file,
        certified=certified,
    )


__all__ = ["Scenario", "SampleSpec", "draw_true_composition", "load_scenario", "load_standards_csv"]
