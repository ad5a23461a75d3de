"""Rastered samples with a known, spatially varying composition, simulated shot by shot.

A raster scan fires the laser on a rectangular grid of spots (``nx`` x ``ny`` nodes, step
``step_mm``), ``shots_per_spot`` pulses on each, and stores every shot's stage position in
the run (``shots/x_mm``, ``shots/y_mm``; docs/run-format.md, "Rastered runs"). The sample's
composition (mass fractions, g/g) is a function of position:

* the matrix composition everywhere;
* :class:`DiffusionProfile` -- one element's mass fraction changed near an edge by
  diffusion from (or loss to) the surface, the constant-surface-concentration solution for
  a semi-infinite medium (Crank, *The Mathematics of Diffusion*, 2nd ed. 1975, eq. 3.13;
  from memory of that book)::

      c(d) = c_bulk + (c_surface - c_bulk) · erfc(d / L),   L = 2·sqrt(D·t)  (mm)

  with ``d >= 0`` the distance (mm) from the edge into the sample;
* :class:`Inclusion` -- a disc of radius ``r`` (mm) of another composition (sharp edge).

The balance element absorbs the changes so every composition sums to 1. Shots are then
made by the forward model (:class:`compquant.plasma.forward.SpectrumModel`): one model
call per distinct composition, with per-shot plasma temperature and electron density.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
from scipy.special import erfc

from compquant.errors import ConfigError


def _check_composition(comp: Mapping[str, float], where: str) -> dict[str, float]:
    out = {str(k): float(v) for k, v in comp.items()}
    if not out:
        raise ConfigError("composition is empty", where=where, fix="give element = mass fraction pairs")
    bad = [k for k, v in out.items() if not (0.0 <= v <= 1.0)]
    if bad:
        raise ConfigError(
            f"mass fraction of {', '.join(bad)} outside 0..1",
            where=where,
            fix="give mass fractions in g/g (0.3 for 30 %)",
        )
    total = sum(out.values())
    if abs(total - 1.0) > 1e-6:
        raise ConfigError(
            f"mass fractions sum to {total:.6g}, not 1",
            where=where,
            fix="make the composition add up to 1 (include the balance element)",
        )
    return out


@dataclass(frozen=True)
class Inclusion:
    """A disc-shaped inclusion: centre ``(x_mm, y_mm)``, ``radius_mm``, its own composition."""

    x_mm: float
    y_mm: float
    radius_mm: float
    composition: Mapping[str, float]

    def inside(self, x, y) -> np.ndarray:
        return (np.asarray(x) - self.x_mm) ** 2 + (np.asarray(y) - self.y_mm) ** 2 <= self.radius_mm**2


@dataclass(frozen=True)
class DiffusionProfile:
    """``element``'s mass fraction goes from ``surface_fraction`` at the edge to the bulk value.

    ``edge_mm``: position of the edge on ``axis`` (``"x"`` or ``"y"``); the sample lies at
    coordinates >= ``edge_mm`` (``direction = +1``) or <= it (``direction = -1``).
    ``length_mm``: the diffusion length ``L = 2·sqrt(D·t)`` (mm).
    """

    element: str
    surface_fraction: float
    edge_mm: float
    length_mm: float
    axis: str = "x"
    direction: int = 1

    def distance(self, x, y) -> np.ndarray:
        c = np.asarray(x if self.axis == "x" else y, dtype=np.float64)
        return np.maximum(0.0, (c - self.edge_mm) * (1 if self.direction >= 0 else -1))

    def fraction(self, bulk: float, x, y) -> np.ndarray:
        """``c(d) = c_bulk + (c_s - c_bulk) erfc(d / L)`` (Crank 1975, eq. 3.13)."""
        return bulk + (self.surface_fraction - bulk) * erfc(self.distance(x, y) / self.length_mm)


@dataclass
class RasterSample:
    """A rastered sample: grid, matrix composition, balance element and features.

    Shot order (as stored in the run): row by row in y (``j = 0 .. ny-1``), x increasing
    along each row (``serpentine=True`` reverses every other row, as a stage that scans
    back and forth does), ``shots_per_spot`` consecutive shots on each node.
    """

    sample_id: str
    matrix: Mapping[str, float]
    balance: str
    nx: int
    ny: int
    step_mm: float
    x0_mm: float = 0.0
    y0_mm: float = 0.0
    shots_per_spot: int = 1
    serpentine: bool = False
    inclusions: list[Inclusion] = field(default_factory=list)
    profiles: list[DiffusionProfile] = field(default_factory=list)
    description: str = "rastered sample (simulated)"

    def __post_init__(self):
        where = f"raster sample {self.sample_id!r}"
        self.matrix = _check_composition(self.matrix, f"{where} matrix")
        if self.balance not in self.matrix:
            raise ConfigError(
                f"balance element {self.balance!r} is not in the matrix",
                where=where,
                fix="name the main element of the matrix as balance",
            )
        if self.nx < 1 or self.ny < 1 or not self.step_mm > 0 or self.shots_per_spot < 1:
            raise ConfigError(
                "grid needs nx, ny, shots_per_spot >= 1 and step_mm > 0",
                where=where,
                fix="e.g. nx = 40, ny = 30, step_mm = 0.05",
            )
        for k, inc in enumerate(self.inclusions):
            _check_composition(inc.composition, f"{where} inclusion {k + 1}")
            if not inc.radius_mm > 0:
                raise ConfigError(
                    "inclusion radius must be > 0 mm", where=f"{where} inclusion {k + 1}", fix="give radius_mm > 0"
                )
        for p in self.profiles:
            if p.element == self.balance or p.element not in self.matrix:
                raise ConfigError(
                    f"profile element {p.element!r} must be a matrix element other than the balance",
                    where=where,
                    fix="profile an alloying element of the matrix",
                )
            if not p.length_mm > 0 or p.axis not in ("x", "y"):
                raise ConfigError(
                    "profile needs length_mm > 0 and axis 'x' or 'y'",
                    where=where,
                    fix="e.g. axis = 'x', length_mm = 0.3",
                )

    @property
    def elements(self) -> list[str]:
        els = list(self.matrix)
        for inc in self.inclusions:
            els += [e for e in inc.composition if e not in els]
        return els

    @property
    def n_shots(self) -> int:
        return self.nx * self.ny * self.shots_per_spot

    def node_positions(self) -> tuple[np.ndarray, np.ndarray]:
        """Node x, y (mm) in scan order, one entry per node."""
        j, i = np.divmod(np.arange(self.nx * self.ny), self.nx)
        if self.serpentine:
            i = np.where(j % 2 == 1, self.nx - 1 - i, i)
        return self.x0_mm + self.step_mm * i, self.y0_mm + self.step_mm * j

    def shot_positions(self) -> tuple[np.ndarray, np.ndarray]:
        """x, y (mm) of every shot in stored order."""
        x, y = self.node_positions()
        return np.repeat(x, self.shots_per_spot), np.repeat(y, self.shots_per_spot)

    def composition_at(self, x, y) -> dict[str, np.ndarray]:
        """Mass fractions (g/g) of every element at positions ``x, y`` (mm)."""
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        comp = {e: np.zeros(x.shape) for e in self.elements}
        for e, v in self.matrix.items():
            comp[e] += v
        for p in self.profiles:
            comp[p.element] = p.fraction(self.matrix[p.element], x, y)
        others = [e for e in self.matrix if e != self.balance]
        comp[self.balance] = 1.0 - sum(comp[e] for e in others if e in comp)
        for inc in self.inclusions:
            m = inc.inside(x, y)
            for e in comp:
                comp[e] = np.where(m, float(inc.composition.get(e, 0.0)), comp[e])
        return comp


def distinct_compositions(comp: Mapping[str, np.ndarray], decimals: int = 9) -> tuple[list[dict], np.ndarray]:
    """Group positions of equal composition: ``(list of compositions, group index per position)``."""
    elements = list(comp)
    table = np.round(np.stack([np.asarray(comp[e]) for e in elements], axis=1), decimals)
    uniq, inverse = np.unique(table, axis=0, return_inverse=True)
    groups = [{e: float(v) for e, v in zip(elements, row) if v > 0} for row in uniq]
    return groups, inverse.reshape(-1)


__all__ = ["DiffusionProfile", "Inclusion", "RasterSample", "distinct_compositions"]


# --------------------------------------------------------------------------- simulation

#: nodes simulated per block (bounded memory: block x shots_per_spot x n_pixels x 8 bytes)
BLOCK_NODES = 2048

_RASTER_KEYS = frozenset(
    {
        "scenario",
        "sample_id",
        "description",
        "matrix",
        "balance",
        "nx",
        "ny",
        "step_mm",
        "x0_mm",
        "y0_mm",
        "shots_per_spot",
        "serpentine",
        "include_scenario_samples",
        "inclusions",
        "profiles",
    }
)
_INCLUSION_KEYS = frozenset({"x_mm", "y_mm", "radius_mm", "composition"})
_PROFILE_KEYS = frozenset({"element", "surface_fraction", "edge_mm", "length_mm", "axis", "direction"})


def load_raster(path):
    """Read a raster file: ``(scenario, RasterSample, include_scenario_samples)``.

    The file has one ``[raster]`` table naming a simulation scenario (instrument, plasma,
    laser, detector and the other samples; docs/scenario.md) and describing the rastered
    sample; ``[[raster.inclusions]]`` and ``[[raster.profiles]]`` add features (see
    docs/scale.md).
    """
    from pathlib import Path

    from compquant.fileio import check_keys, load_toml
    from compquant.simulate.scenario import load_scenario

    path = Path(path)
    doc = load_toml(path, "raster file")
    w = f"{path}: [raster]"
    check_keys(doc, {"raster"}, str(path), required={"raster"})
    r = doc["raster"]
    check_keys(r, _RASTER_KEYS, w, required={"scenario", "sample_id", "matrix", "balance", "nx", "ny", "step_mm"})
    sc = load_scenario((path.parent / str(r["scenario"])).resolve())

    def num(t, k, where, default=None, integer=False):
        v = t.get(k, default)
        ok = isinstance(v, int | float) and not isinstance(v, bool) and np.isfinite(v)
        if not ok or (integer and float(v) != int(v)):
            raise ConfigError(
                f"{k} = {v!r} is not a {'whole ' if integer else ''}number",
                where=f"{where} {k}",
                fix="write a plain number",
            )
        return int(v) if integer else float(v)

    incs = []
    for k, t in enumerate(r.get("inclusions", [])):
        wi = f"{w} inclusions[{k}]"
        check_keys(t, _INCLUSION_KEYS, wi, required=_INCLUSION_KEYS)
        incs.append(Inclusion(num(t, "x_mm", wi), num(t, "y_mm", wi), num(t, "radius_mm", wi), dict(t["composition"])))
    profs = []
    for k, t in enumerate(r.get("profiles", [])):
        wp = f"{w} profiles[{k}]"
        check_keys(t, _PROFILE_KEYS, wp, required={"element", "surface_fraction", "edge_mm", "length_mm"})
        profs.append(
            DiffusionProfile(
                str(t["element"]),
                num(t, "surface_fraction", wp),
                num(t, "edge_mm", wp),
                num(t, "length_mm", wp),
                str(t.get("axis", "x")),
                num(t, "direction", wp, 1, integer=True),
            )
        )
    sample = RasterSample(
        sample_id=str(r["sample_id"]),
        matrix=dict(r["matrix"]),
        balance=str(r["balance"]),
        nx=num(r, "nx", w, integer=True),
        ny=num(r, "ny", w, integer=True),
        step_mm=num(r, "step_mm", w),
        x0_mm=num(r, "x0_mm", w, 0.0),
        y0_mm=num(r, "y0_mm", w, 0.0),
        shots_per_spot=num(r, "shots_per_spot", w, 1, integer=True),
        serpentine=bool(r.get("serpentine", False)),
        inclusions=incs,
        profiles=profs,
        description=str(r.get("description", "rastered sample (simulated)")),
    )
    return sc, sample, bool(r.get("include_scenario_samples", True))


def _run_samples(sc, sample: RasterSample, include_scenario_samples: bool) -> list[dict]:
    """The run's sample table: the scenario's samples (if included), then the rastered one."""
    samples = []
    if include_scenario_samples:
        samples = [
            {"sample_id": s.sample_id, "role": s.role, "standard_ref": s.standard_ref, "description": s.description}
            for s in sc.samples
        ]
    if sample.sample_id in {s["sample_id"] for s in samples}:
        raise ConfigError(
            f"raster sample id {sample.sample_id!r} is already a scenario sample",
            where="[raster] sample_id",
            fix="give the rastered sample its own id",
        )
    samples.append(
        {"sample_id": sample.sample_id, "role": "unknown", "standard_ref": "", "description": sample.description}
    )
    return samples


def _run_metadata(sc, sample: RasterSample, seed: int) -> tuple[dict, dict]:
    """The run's ``acquisition`` and ``instrument`` records for a rastered simulation."""
    la = sc.laser
    acquisition = {
        "technique": "LIBS",
        "gate_delay_us": sc.instrument["gate_delay_us"],
        "gate_width_us": sc.instrument["gate_width_us"],
        "laser_wavelength_nm": la["wavelength_nm"],
        "pulse_energy_mj": la["pulse_energy_mj"],
        "spot_size_um": la["spot_diameter_um"],
        "repetition_rate_hz": la["repetition_rate_hz"],
        "atmosphere": sc.instrument["atmosphere"],
        "accumulations": 1,
        "raster_step_mm": sample.step_mm,
    }
    instrument = {
        "name": sc.instrument["name"],
        "simulated": True,
        "simulator": "compquant simulate-raster",
        "scenario": sc.id,
        "seed": seed,
    }
    return acquisition, instrument


def simulate_raster_run(
    scenario,
    sample: RasterSample,
    output,
    *,
    seed: int | None = None,
    noise: bool = True,
    include_scenario_samples: bool = True,
) -> dict:
    """Write a run: the scenario's samples (spot measurements, positions NaN) then the raster.

    Uses the scenario's forward model, detector and per-shot plasma fluctuations
    (:mod:`compquant.simulate.engine`). The raster's random stream is its own (seeded from
    the run seed), so the scenario samples' shots equal those of ``compquant simulate``.
    Returns ``{"path", "n_shots", "n_raster_shots", "first_raster_shot", "elements"}``; the
    true composition at any position is ``sample.composition_at(x, y)``.
    """
    from compquant.run import RunWriter
    from compquant.simulate.engine import (
        build_model,
        detector_of,
        shot_conditions,
        simulate_arrays,
        stored_response,
        true_response,
        wavelength_axis,
    )

    sc = scenario
    seed = sc.seed if seed is None else int(seed)
    wl = wavelength_axis(sc)
    model = build_model(sc, wl + sc.drift["wavelength_shift_nm"])
    det = detector_of(sc)
    resp_true = true_response(sc, wl)
    pattern = det.bias_pattern(
        wl.size, np.random.default_rng(np.random.SeedSequence([sc.instrument["pattern_seed"], 7919]))
    )
    base = simulate_arrays(sc, seed, noise) if include_scenario_samples else None
    n_base = 0 if base is None else int(base["spectra"].shape[0])
    n_raster = sample.n_shots
    n = n_base + n_raster
    samples = _run_samples(sc, sample, include_scenario_samples)
    index = np.concatenate(
        [base["sample_index"] if base else np.zeros(0, np.int32), np.full(n_raster, len(samples) - 1, dtype=np.int32)]
    )
    xr, yr = sample.shot_positions()
    x = np.concatenate([np.full(n_base, np.nan), xr])
    y = np.concatenate([np.full(n_base, np.nan), yr])
    rng = np.random.default_rng(np.random.SeedSequence([seed, 104729]))
    e, t, ne, f = shot_conditions(sc, n_raster, rng, noise)
    la = sc.laser
    t0 = float(base["time_s"][-1]) + sc.sample_interval_s if base else 0.0
    t_raster = t0 + np.arange(n_raster) / la["repetition_rate_hz"]
    times = np.concatenate([base["time_s"] if base else np.zeros(0), t_raster])
    energy = np.concatenate([base["pulse_energy_mj"] if base else np.zeros(0), np.round(e, 4)])
    dark = base["dark"] if base else None
    if dark is None and sc.dark_frames:
        dark = det.dark_frames(sc.dark_frames, wl.size, pattern, rng, noise)
    acquisition, instrument = _run_metadata(sc, sample, seed)
    sp = sample.shots_per_spot
    with RunWriter(
        output,
        wl,
        n,
        samples,
        index,
        dtype="uint16",
        dark=dark,
        response=stored_response(sc, wl),
        saturation=float(det.saturation_counts),
        exposure_s=det.exposure_s,
        dark_exposure_s=det.exposure_s,
        pulse_energy_mj=energy,
        time_s=times,
        x_mm=x,
        y_mm=y,
        instrument=instrument,
        acquisition=acquisition,
    ) as w:
        if base:
            w.write_spectra(0, base["spectra"])
        for a in range(0, n_raster, BLOCK_NODES * sp):
            b = min(n_raster, a + BLOCK_NODES * sp)
            comp = sample.composition_at(xr[a:b], yr[a:b])
            groups, which = distinct_compositions(comp)
            rad = np.empty((b - a, wl.size))
            for g, c in enumerate(groups):
                m = which == g
                rad[m] = model.radiance(c, t[a:b][m], ne[a:b][m], length_mm=sc.plasma["length_mm"], scale=f[a:b][m])
            w.write_spectra(n_base + a, det.digitise(det.mean_photoelectrons(rad, resp_true), pattern, rng, noise))
    return {
        "path": str(output),
        "n_shots": n,
        "n_raster_shots": n_raster,
        "first_raster_shot": n_base,
        "elements": sample.elements,
    }


__all__ += ["BLOCK_NODES", "load_raster", "simulate_raster_run"]
