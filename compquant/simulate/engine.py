"""Scenario -> run file: the forward model plus the detector, shot by shot in batches.

Random numbers come from one :class:`numpy.random.SeedSequence` of the run
seed, split into independent streams for the detector's fixed pattern, the
dark frames and each sample (in scenario order), so a given seed regenerates
the same arrays bit for bit and changing one sample's shot count leaves the
other samples' shots unchanged.

Per shot i of a sample (nominal values from ``[plasma]`` and ``[laser]``)::

    E_i  = E0 (1 + s_E z1)                      pulse energy, recorded per shot
    T_i  = T0 (E_i/E0)^a_T exp(s_T z2)           temperature
    ne_i = ne0 (E_i/E0)^a_n exp(s_n z3)          electron density
    F_i  = (E_i/E0)^a_F exp(s_F z4)              collected light (emitting area)

with independent standard normals z (E clipped to >= 0.5 E0).
"""

from __future__ import annotations

import datetime as _dt
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy.interpolate import PchipInterpolator

from compquant.errors import ConfigError, ResourceLimitError
from compquant.plasma.forward import Instrument, LineSet, SpectrumModel
from compquant.run import memory_limit_from_env
from compquant.simulate.detector import Detector
from compquant.simulate.scenario import Scenario, load_scenario


@dataclass(frozen=True)
class SimulationResult:
    """What :func:`simulate_run` made."""

    path: Path
    n_shots: int
    n_pixels: int
    n_dark: int
    seconds: float
    bytes: int
    truth: dict  # sample_id -> {element: mass fraction}


def wavelength_axis(scenario: Scenario) -> np.ndarray:
    """Nominal pixel wavelengths (nm), evenly spaced over the stated range."""
    ins = scenario.instrument
    return np.linspace(ins["wavelength_min_nm"], ins["wavelength_max_nm"], ins["n_pixels"])


def _curve(nm, values, wl):
    if nm is None:
        return np.ones_like(wl)
    f = PchipInterpolator(np.asarray(nm), np.asarray(values), extrapolate=False)
    out = f(wl)
    out = np.where(wl < nm[0], values[0], out)
    out = np.where(wl > nm[-1], values[-1], out)
    return out


def stored_response(scenario: Scenario, wl: np.ndarray) -> np.ndarray:
    """The relative response the lab has on file (written to the run), max 1."""
    ins = scenario.instrument
    r = _curve(ins["response_nm"], ins["response"], wl)
    return r / r.max()


def true_response(scenario: Scenario, wl: np.ndarray) -> np.ndarray:
    """Response the detector really has on the day: stored x drift scale x drift factor(lambda)."""
    d = scenario.drift
    return stored_response(scenario, wl) * d["response_scale"] * _curve(d["factor_nm"], d["factor"], wl)


def scenario_lines(scenario: Scenario) -> LineSet:
    """Lines to model: the shipped list (or the scenario's file) for the scenario's elements."""
    from compquant.atomic import load_line_list

    df = load_line_list(scenario.lines_file)
    els = scenario.line_elements or tuple(scenario.elements)
    ins = scenario.instrument
    lo, hi = ins["wavelength_min_nm"] - 2.0, ins["wavelength_max_nm"] + 2.0
    df = df[df["element"].isin(list(els)) & (df["wavelength_nm"] >= lo) & (df["wavelength_nm"] <= hi)]
    if df.empty:
        raise ConfigError(
            "no lines of the scenario's elements in the wavelength range",
            where=str(scenario.path),
            fix="widen the range or check the line list",
        )
    lines = LineSet.from_frame(df.reset_index(drop=True))
    fb = scenario.plasma["stark_fallback_fwhm_nm"]
    if fb > 0:
        lines = lines.with_default_stark(fb, scenario.plasma["stark_fallback_ne_cm3"])
    return lines


def scenario_partition_function(scenario: Scenario):
    """U(T) from the scenario's own level tables (``[lines] levels = "<dir>"`` holding
    ``<El>_<ion>.csv`` in :func:`compquant.atomic.load_levels` columns), the shipped data for
    species without a file; None (the shipped data) when the scenario names no directory."""
    if scenario.levels_dir is None:
        return None
    from compquant.atomic import load_levels, parse_species, partition_function

    d = scenario.levels_dir
    cache: dict = {}

    def pf(species, T, **kw):
        sym, ion = parse_species(species)
        f = d / f"{sym}_{ion}.csv"
        if f not in cache:
            cache[f] = load_levels(f) if f.exists() else None
        return partition_function(species, T, levels=cache[f], **kw)

    return pf


def build_model(scenario: Scenario, wl_true: np.ndarray, lines: LineSet | None = None) -> SpectrumModel:
    """The :class:`SpectrumModel` of the scenario (true pixel wavelengths)."""
    ins, pl = scenario.instrument, scenario.plasma
    instrument = Instrument(
        wl_true, resolving_power=ins["resolving_power"], fwhm_nm=ins["fwhm_nm"], oversample=ins["oversample"]
    )
    return SpectrumModel(
        instrument,
        lines if lines is not None else scenario_lines(scenario),
        self_absorption=pl["self_absorption"],
        continuum=pl["continuum"],
        nominal_temperature_k=pl["temperature_k"],
        nominal_ne_cm3=pl["ne_cm3"],
        max_stage=pl["max_stage"],
        lowering=pl["ionisation_lowering"],
        partition_function=scenario_partition_function(scenario),
    )


def detector_of(scenario: Scenario) -> Detector:
    ins = scenario.instrument
    return Detector(
        photoelectrons_per_radiance=ins["photoelectrons_per_radiance"],
        gain_counts_per_pe=ins["gain_counts_per_pe"],
        bias_counts=ins["bias_counts"],
        bias_pattern_counts=ins["bias_pattern_counts"],
        dark_current_pe_per_s=ins["dark_current_pe_per_s"],
        read_noise_counts=ins["read_noise_counts"],
        saturation_counts=ins["saturation_counts"],
        exposure_s=ins["exposure_s"],
    )


def shot_conditions(scenario: Scenario, n: int, rng: np.random.Generator, noise: bool = True):
    """Per-shot pulse energy (mJ), T (K), n_e (cm^-3) and light factor (see module docstring)."""
    pl, la = scenario.plasma, scenario.laser
    z = rng.standard_normal((4, n)) if noise else np.zeros((4, n))
    e0 = la["pulse_energy_mj"]
    e = np.maximum(e0 * (1.0 + la["pulse_energy_rsd"] * z[0]), 0.5 * e0)
    r = e / e0
    t = pl["temperature_k"] * r ** pl["temperature_energy_exponent"] * np.exp(pl["temperature_rsd"] * z[1])
    ne = pl["ne_cm3"] * r ** pl["ne_energy_exponent"] * np.exp(pl["ne_rsd"] * z[2])
    f = r ** la["signal_energy_exponent"] * np.exp(la["signal_rsd"] * z[3])
    return e, t, ne, f


def _parse_time(text: str, where: str) -> _dt.datetime:
    try:
        t = _dt.datetime.fromisoformat(text.replace("Z", "+00:00"))
    except ValueError as exc:
        raise ConfigError(f"start_time {text!r} is not ISO 8601", where=where, fix="e.g. 2026-11-16T08:30:00Z") from exc
    return t if t.tzinfo else t.replace(tzinfo=_dt.timezone.utc)


def simulate_arrays(scenario: Scenario, seed: int | None = None, noise: bool = True, only=None):
    """All arrays of the run as a dict (no file written); see :func:`simulate_run`.

    ``only``: optional sample indices to compute; the other samples' spectra rows
    are left zero (their random streams are independent, so the computed rows are
    identical to those of the full run).
    """
    seed = scenario.seed if seed is None else int(seed)
    n_all = sum(s.shots for s in scenario.samples) + scenario.dark_frames
    n_pix = scenario.instrument["n_pixels"]
    # uint16 counts of the whole run + float64 work arrays of the largest sample
    need = n_all * n_pix * 2 + max(s.shots for s in scenario.samples) * n_pix * 8 * 3
    limit = memory_limit_from_env()
    if need > limit:
        raise ResourceLimitError(
            f"the run needs about {need / 2**30:.1f} GiB of memory, above the limit of {limit / 2**30:.1f} GiB",
            where=str(scenario.path),
            fix="fewer shots or pixels, or raise COMPQUANT_MEMORY_LIMIT",
        )
    if seed < 0:
        raise ConfigError(f"seed {seed} is negative", where="--seed", fix="use a seed >= 0")
    wl = wavelength_axis(scenario)
    wl_true = wl + scenario.drift["wavelength_shift_nm"]
    model = build_model(scenario, wl_true)
    det = detector_of(scenario)
    resp_true = true_response(scenario, wl)
    ss = np.random.SeedSequence(seed)
    s_dark, *s_samples = ss.spawn(1 + len(scenario.samples))
    pattern_rng = np.random.default_rng(np.random.SeedSequence([scenario.instrument["pattern_seed"], 7919]))
    pattern = det.bias_pattern(wl.size, pattern_rng)
    n_total = sum(s.shots for s in scenario.samples)
    wanted = set(range(len(scenario.samples))) if only is None else {int(i) for i in only}
    spectra = np.zeros((n_total, wl.size), dtype=np.uint16)
    index = np.empty(n_total, dtype=np.int32)
    energy = np.empty(n_total)
    times = np.empty(n_total)
    x = np.empty(n_total)
    y = np.empty(n_total)
    la = scenario.laser
    row, clock = 0, 0.0
    for k, (smp, sseq) in enumerate(zip(scenario.samples, s_samples)):
        rng = np.random.default_rng(sseq)
        n = smp.shots
        e, t, ne, f = shot_conditions(scenario, n, rng, noise)
        if k in wanted:
            rad = model.radiance(smp.composition, t, ne, length_mm=scenario.plasma["length_mm"], scale=f)
            spectra[row : row + n] = det.digitise(det.mean_photoelectrons(rad, resp_true), pattern, rng, noise)
        index[row : row + n] = k
        energy[row : row + n] = np.round(e, 4)
        shots = np.arange(n)
        times[row : row + n] = clock + shots / la["repetition_rate_hz"]
        x[row : row + n] = (shots % la["raster_columns"]) * la["raster_step_mm"]
        y[row : row + n] = (shots // la["raster_columns"]) * la["raster_step_mm"]
        clock += n / la["repetition_rate_hz"] + scenario.sample_interval_s
        row += n
    dark = None
    if scenario.dark_frames:
        dark = det.dark_frames(scenario.dark_frames, wl.size, pattern, np.random.default_rng(s_dark), noise)
    return {
        "wavelength": wl,
        "spectra": spectra,
        "sample_index": index,
        "pulse_energy_mj": energy,
        "time_s": times,
        "x_mm": x,
        "y_mm": y,
        "dark": dark,
        "response": stored_response(scenario, wl),
        "saturation": float(det.saturation_counts),
        "exposure_s": det.exposure_s,
        "seed": seed,
    }


def simulate_run(
    scenario: Scenario | str | Path, output: str | Path, seed: int | None = None, noise: bool = True
) -> SimulationResult:
    """Simulate the scenario and write the run file ``output`` (atomically).

    ``seed`` overrides the scenario's ``[scenario] seed``.  ``noise=False``
    gives the expected counts (rounded) without shot-to-shot fluctuation or
    detector noise.

    Per shot the plasma varies with the pulse energy (module docstring): ``E_i = E0 (1 + s_E z1)``,
    ``T_i = T0 (E_i/E0)^a_T exp(s_T z2)`` (K), ``ne_i = ne0 (E_i/E0)^a_n exp(s_n z3)`` (cm^-3) and
    the collected light ``F_i = (E_i/E0)^a_F exp(s_F z4)``; the forward model (LTE Boltzmann and
    Saha populations, Voigt line profiles, continuum, homogeneous-slab radiative transfer,
    docs/physics.md) gives the pixel radiance ``L_p`` (W m^-2 sr^-1), and the detector the counts
    ``c_p = clip(round(G Poisson(S R_p L_p + D t_exp) + N(0, sigma_read) + b + b_p), 0, c_sat)``
    (:mod:`compquant.simulate.detector`).  One :class:`numpy.random.SeedSequence` of the seed gives
    independent streams, so a given seed regenerates the same arrays bit for bit.

    Parameters
    ----------
    scenario : Scenario, str or path-like
        A loaded scenario or the path of its TOML file.
    output : str or path-like
        The run file to write (docs/run-format.md).
    seed : int, optional
        Overrides ``[scenario] seed``.
    noise : bool, default True
        False: expected counts only.

    Returns
    -------
    SimulationResult
        ``path``, ``n_shots``, ``n_pixels``, ``n_dark``, ``seconds``, ``bytes`` and ``truth``
        (``sample_id -> {element: mass fraction}``, g/g), which is never stored in the run.

    Raises
    ------
    ConfigError
        A bad scenario (named file and key).
    ResourceLimitError
        A run larger than the memory limit.

    See Also
    --------
    load_scenario : read a scenario.
    write_run : the writer used.

    References
    ----------
    .. [1] Saha (1920) (ionisation balance); Griem, Plasma Spectroscopy (1964), ch. 6 and eq. 6-40
       (Boltzmann and Saha populations).
    .. [2] Konjevic et al., J. Phys. Chem. Ref. Data 31 (2002) 819 (Stark widths); Olivero &
       Longbothum, J. Quant. Spectrosc. Radiat. Transfer 17 (1977) 233 (Voigt FWHM).
    .. [3] Rybicki & Lightman, Radiative Processes in Astrophysics (1979), eq. 1.30;
       Aragon & Aguilera, Spectrochim. Acta B 63 (2008) 893 (homogeneous slab).
    .. [4] Janesick, Scientific Charge-Coupled Devices (2001) (detector model).
    .. [5] compquant documentation: docs/physics.md and docs/scenario.md.

    Examples
    --------
    From the repository root (writes a run of the invented demo scenario)::

        from compquant import simulate_run
        res = simulate_run("demo_runs/scenario-day1.toml", "day1.h5")
        print(res.n_shots, res.truth)
    """
    from compquant.run import write_run

    t0 = time.perf_counter()
    sc = scenario if isinstance(scenario, Scenario) else load_scenario(scenario)
    arr = simulate_arrays(sc, seed, noise)
    start = _parse_time(sc.start_time, f"{sc.path}: scenario.start_time")
    samples = [
        {"sample_id": s.sample_id, "role": s.role, "standard_ref": s.standard_ref, "description": s.description}
        for s in sc.samples
    ]
    ins, la = sc.instrument, sc.laser
    instrument = {
        "name": ins["name"],
        "spectrometer": ins["spectrometer"],
        "detector": ins["detector"],
        "gain_counts_per_pe": ins["gain_counts_per_pe"],
        "read_noise_counts": ins["read_noise_counts"],
        "simulated": True,
        "simulator": "compquant simulate",
        "scenario": sc.id,
        "seed": arr["seed"],
    }
    if ins["resolving_power"]:
        instrument["resolving_power"] = ins["resolving_power"]
    else:
        instrument["fwhm_nm"] = ins["fwhm_nm"]
    # the plasma's true T and n_e stay out of the run, as they would in a measured one
    acquisition = {
        "technique": "LIBS",
        "gate_delay_us": ins["gate_delay_us"],
        "gate_width_us": ins["gate_width_us"],
        "laser_wavelength_nm": la["wavelength_nm"],
        "pulse_energy_mj": la["pulse_energy_mj"],
        "spot_size_um": la["spot_diameter_um"],
        "repetition_rate_hz": la["repetition_rate_hz"],
        "atmosphere": ins["atmosphere"],
        "accumulations": 1,
        "start_time": start.isoformat().replace("+00:00", "Z"),
        "lab": sc.lab,
    }
    out = write_run(
        output,
        arr["wavelength"],
        arr["spectra"],
        samples,
        arr["sample_index"],
        dark=arr["dark"],
        response=arr["response"],
        response_basis="energy",  # the detector model converts energy radiance (W m⁻² sr⁻¹) to counts
        saturation=arr["saturation"],
        exposure_s=arr["exposure_s"],
        dark_exposure_s=arr["exposure_s"] if arr["dark"] is not None else None,
        pulse_energy_mj=arr["pulse_energy_mj"],
        time_s=arr["time_s"],
        x_mm=arr["x_mm"],
        y_mm=arr["y_mm"],
        instrument=instrument,
        acquisition=acquisition,
        medium="air",
        dtype="uint16",
        compression="gzip",
        # the simulated measurement's start, not the wall clock: regenerating gives the same bytes
        created=start.isoformat().replace("+00:00", "Z"),
    )
    size = Path(out).stat().st_size
    truth = {s.sample_id: dict(s.composition) for s in sc.samples}
    return SimulationResult(
        path=Path(out),
        n_shots=int(arr["spectra"].shape[0]),
        n_pixels=int(arr["wavelength"].size),
        n_dark=0 if arr["dark"] is None else int(arr["dark"].shape[0]),
        seconds=time.perf_counter() - t0,
        bytes=size,
        truth=truth,
    )


def truth_table(scenario: Scenario):
    """True compositions as a DataFrame (sample_id, role, standard_ref, element, mass_fraction)."""
    import pandas as pd

    rows = [
        {"sample_id": s.sample_id, "role": s.role, "standard_ref": s.standard_ref, "element": el, "mass_fraction": w}
        for s in scenario.samples
        for el, w in sorted(s.composition.items())
    ]
    return pd.DataFrame(rows)


__all__ = [
    "SimulationResult",
    "build_model",
    "detector_of",
    "scenario_lines",
    "shot_conditions",
    "simulate_arrays",
    "simulate_run",
    "stored_response",
    "true_response",
    "truth_table",
    "wavelength_axis",
]
