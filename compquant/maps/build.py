"""Element maps of a rastered run: line intensity, or mass fraction through a calibration.

Flow (``make_maps``):

1. every shot is preprocessed and measured by :func:`compquant.lines.measure_run` (streamed
   chunk by chunk; on Dask workers when an executor is given -- the same numbers);
2. for each rastered sample the grid is inferred from its shot positions
   (:class:`compquant.maps.grid.RasterGrid`) and the per-shot intensities are added into
   it block by block (:class:`compquant.maps.grid.GridAccumulator`): a node's value is the
   mean over its shots accepted by shot QC (saturated lines left out), in the method's
   intensity units;
3. with a calibration, every node becomes a pseudo-sample of the line table (mean
   intensity, ``u = s_shots / sqrt(n_node)`` with ``s_shots`` the sample's shot-to-shot
   standard deviation, since a spot is usually fired once) and
   :func:`compquant.calibrate.apply.quantify` turns it into mass fractions exactly as for a
   sample: the same curves, internal-standard closure and drift standardisation.

Memory: the spectra are streamed; held in memory are the per-shot intensities
(``8 * n_lines`` bytes per shot, from ``measure_run``) and the grids.

``[map]`` table of the method file (owned here)::

    [map]
    lines = ["Zn I 481.053", "Cu I 510.554"]   # one line per element to map (default: the
                                               # first line of each element in [[lines]])
    step_mm = 0.05                             # grid step (mm); number or [dx, dy]; default inferred
    samples = ["SCAN-1"]                       # samples to map (default: every rastered sample)
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from compquant.errors import DataQualityError, MethodError
from compquant.maps.grid import GridAccumulator, RasterGrid
from compquant.maps.output import ElementMap, SampleMaps
from compquant.settings import Setting, Table, settings_dataclass

#: shots added to the grids per block (bounded working memory)
BLOCK_SHOTS = 65536


def _step(v, where, error):
    """A grid step: one positive number (mm) or ``[dx, dy]``."""
    vals = v if isinstance(v, list) else [v]
    ok = len(vals) in (1, 2) and all(
        isinstance(x, int | float) and not isinstance(x, bool) and math.isfinite(x) and x > 0 for x in vals)
    if not ok:
        raise error(f"step_mm {v!r} is not a positive finite number or [dx, dy]", where=where,
                    fix="write step_mm = 0.05 or step_mm = [0.05, 0.1]")
    return float(vals[0]) if len(vals) == 1 else (float(vals[0]), float(vals[1]))


#: the ``[map]`` table of a method file (owned here)
MAP_TABLE = Table("map", (
    Setting("lines", "list", None, "one line per element to map (default: the first line of each element in "
            "[[lines]])", item="str", nonempty=True, fix='write lines = ["..."]'),
    Setting("step_mm", "any", None, "grid step, one number or [dx, dy] (default: inferred from the shot positions)",
            "mm", check=_step),
    Setting("samples", "list", None, "samples to map (default: every rastered sample)", item="str", nonempty=True,
            fix='write samples = ["..."]'),
), doc="Element maps of rastered samples (compquant map).", owner="compquant.maps.build")

#: the validated ``[map]`` table: ``lines``, ``step_mm`` (a float or ``(dx, dy)``), ``samples``
MapSettings = settings_dataclass(MAP_TABLE, "MapSettings", module=__name__, doc="Validated ``[map]`` table.")


def parse_map_section(section: dict | None, where: str = "method") -> MapSettings:
    """Check the method's ``[map]`` table through :data:`MAP_TABLE`."""
    return MapSettings(**MAP_TABLE.parse(section or {}, f"{where}: [map]", MethodError))


def map_lines(method, settings: MapSettings) -> list[tuple[str, str]]:
    """``[(element, line_id), ...]``: the ``[map] lines``, else the first line of each element."""
    where = f"{method.where}: [map] lines"
    if settings.lines:
        out, seen = [], set()
        for lid in settings.lines:
            ln = method.line(lid)
            if ln.element in seen:
                raise MethodError(f"element {ln.element} is mapped twice", where=where, fix="give one line per element")
            seen.add(ln.element)
            out.append((ln.element, ln.line_id))
        return out
    out, seen = [], set()
    for ln in method.lines:
        if ln.element not in seen:
            seen.add(ln.element)
            out.append((ln.element, ln.line_id))
    return out


def rastered_samples(run, wanted: list[str] | None = None) -> list[int]:
    """Sample rows to map: ``wanted`` ids, else every sample with finite positions on >= 2 spots."""
    if not run.has_positions:
        raise DataQualityError(
            "the run stores no shot positions (shots/x_mm, shots/y_mm)",
            where=str(run.path),
            fix="map a rastered run (docs/run-format.md, 'Rastered runs')",
        )
    idx = run.shots["sample_index"].to_numpy()
    x = run.shots["x_mm"].to_numpy(dtype=float)
    y = run.shots["y_mm"].to_numpy(dtype=float)
    ids = [str(s) for s in run.samples["sample_id"]]
    if wanted:
        missing = [w for w in wanted if w not in ids]
        if missing:
            raise DataQualityError(
                f"no sample {missing[0]!r} in this run",
                where=str(run.path),
                fix="list the samples with 'compquant inspect'",
            )
        return [ids.index(w) for w in wanted]
    out = []
    for s in range(len(ids)):
        m = (idx == s) & np.isfinite(x) & np.isfinite(y)
        if m.sum() >= 2 and np.unique(np.round(np.stack([x[m], y[m]], 1), 6), axis=0).shape[0] >= 2:
            out.append(s)
    if not out:
        raise DataQualityError(
            "no sample of the run is rastered (finite positions on two or more spots)",
            where=str(run.path),
            fix="map a rastered run",
        )
    return out


def intensity_units(method) -> str:
    """Units of the mapped line intensities under the method's normalisation."""
    pre = method.preprocess
    return {
        "none": "counts nm",
        "internal_standard": f"relative to {pre.normalise_line}",
        "total_area": "relative to total emission",
        "background": "relative to background",
    }.get(pre.normalise, f"relative ({pre.normalise})")


@dataclass
class MapResult:
    """Maps of every mapped sample, the measurement they came from and their provenance."""

    samples: list[SampleMaps]
    measurement: object
    quantity: str
    provenance: dict = field(default_factory=dict)
    results: pd.DataFrame | None = None  # per-node quantify results (concentration maps)


def _accumulate(lm, rows: np.ndarray, grid: RasterGrid, x, y, cols: list[int]) -> GridAccumulator:
    acc = GridAccumulator(grid, len(cols))
    for a in range(0, rows.size, BLOCK_SHOTS):
        r = rows[a : a + BLOCK_SHOTS]
        vals = lm.shot_intensity[np.ix_(r, cols)].copy()
        bad = ~lm.shot_accepted[r][:, None] | lm.shot_saturated[np.ix_(r, cols)]
        vals[bad] = np.nan
        acc.add(grid.node_index(x[r], y[r]), vals)
    return acc


def _node_ids(sample_id: str, grid: RasterGrid) -> np.ndarray:
    j, i = np.divmod(np.arange(grid.nx * grid.ny), grid.nx)
    return np.array([f"{sample_id}@{a},{b}" for a, b in zip(i, j)], dtype=object)


def _node_table(lm, s: int, sid: str, acc: GridAccumulator, grid: RasterGrid) -> pd.DataFrame:
    """Line table with one pseudo-sample per grid node (all method lines)."""
    means = acc.mean().reshape(len(lm.line_ids), -1)
    counts = acc.counts
    lt = lm.table[lm.table["sample_id"] == sid].set_index("line_id")
    ids = _node_ids(sid, grid)
    frames = []
    for q, lid in enumerate(lm.line_ids):
        have = counts[q] > 0
        sd = float(lt.loc[lid, "sd_shots"]) if lid in lt.index else np.nan
        n = counts[q][have]
        row = lt.loc[lid]
        frames.append(
            pd.DataFrame(
                {
                    "sample_id": ids[have],
                    "role": "unknown",
                    "line_id": lid,
                    "element": row["element"],
                    "ion": int(row["ion"]),
                    "wavelength_nm": float(row["wavelength_nm"]),
                    "intensity": means[q][have],
                    "u_intensity": sd / np.sqrt(n),
                    "sd_shots": sd,
                    "n_shots": n,
                    "centre_nm": np.nan,
                    "fwhm_nm": np.nan,
                    "snr": means[q][have] / (sd / np.sqrt(n)),
                    "flags": np.where(n == 1, "single_shot", ""),
                }
            )
        )
    return pd.concat(frames, ignore_index=True)


def make_maps(
    run,
    method,
    *,
    calibration=None,
    chunk_shots: int | None = None,
    executor=None,
    progress=None,
    samples: list[str] | None = None,
) -> MapResult:
    """Maps of every rastered sample of ``run`` (module docstring)."""
    from compquant.lines import measure_run
    from compquant.parallel.lines import chunk_mapper

    settings = parse_map_section(method.sections.get("map"), method.where)
    wanted = samples or settings.samples
    rows_of = rastered_samples(run, wanted)
    pairs = map_lines(method, settings)
    if calibration is not None:
        calibration.check_method(method.id, None, where="--calibration")
    lm = measure_run(run, method, chunk_shots=chunk_shots, progress=progress, chunk_mapper=chunk_mapper(executor))
    x = run.shots["x_mm"].to_numpy(dtype=float)
    y = run.shots["y_mm"].to_numpy(dtype=float)
    idx = run.shots["sample_index"].to_numpy()
    col = {lid: k for k, lid in enumerate(lm.line_ids)}
    out, node_tables, grids, notes = [], [], {}, []
    for s in rows_of:
        sid = lm.sample_ids[s]
        rows = np.flatnonzero(idx == s)
        grid = RasterGrid.from_positions(x[rows], y[rows], settings.step_mm, where=f"{run.path}: sample {sid}")
        grids[sid] = grid
        _note_outliers(notes, sid, grid, x[rows], y[rows])
        acc = _accumulate(lm, rows, grid, x, y, list(range(len(lm.line_ids))))
        role = str(run.samples["role"].iloc[s])
        sm = SampleMaps(sid, role, grid, acc.count_map())
        if calibration is None:
            means = acc.mean()
            units = intensity_units(method)
            for el, lid in pairs:
                sm.maps.append(ElementMap(el, lid, "intensity", units, means[col[lid]]))
        else:
            node_tables.append(_node_table(lm, s, sid, acc, grid))
        out.append(sm)
    results = None
    if calibration is not None:
        from compquant.calibrate.apply import quantify

        # the run's own samples come too, so drift standardisation uses its setup samples
        lt = pd.concat([lm.table, *node_tables], ignore_index=True)
        node_samples = pd.DataFrame(
            {
                "sample_id": pd.concat([t["sample_id"] for t in node_tables]).unique(),
                "role": "unknown",
                "standard_ref": "",
                "description": "map node",
            }
        )
        samples_df = pd.concat(
            [run.samples[["sample_id", "role", "standard_ref", "description"]], node_samples], ignore_index=True
        )
        q = quantify(lt, calibration, run_sha256=run.sha256(), samples=samples_df)
        results = q.results
        for sm in out:
            grid = sm.grid
            ids = _node_ids(sm.sample_id, grid)
            pos = {nid: k for k, nid in enumerate(ids)}
            for el, curve in calibration.curves.items():
                r = results[(results["element"] == el) & results["sample_id"].isin(pos)]
                vals = np.full(grid.nx * grid.ny, np.nan)
                vals[[pos[v] for v in r["sample_id"]]] = r["mass_fraction"].to_numpy(dtype=float)
                sm.maps.append(ElementMap(el, curve.line_id, "mass_fraction", "g/g", vals.reshape(grid.ny, grid.nx)))
    prov = {
        "run": str(run.path),
        "run_sha256": run.sha256(),
        "method_id": method.id,
        "method_sha256": method.sha256 or "",
        "quantity": "mass_fraction" if calibration else "intensity",
        "calibration": calibration.calibration_id if calibration else "",
        "grids": {
            sid: {"x0_mm": g.x0_mm, "y0_mm": g.y0_mm, "dx_mm": g.dx_mm, "dy_mm": g.dy_mm, "nx": g.nx, "ny": g.ny}
            for sid, g in grids.items()
        },
        "measurement": lm.provenance,
        "notes": notes,
    }
    return MapResult(out, lm, prov["quantity"], prov, results)


def _note_outliers(notes: list, sid: str, grid: RasterGrid, x: np.ndarray, y: np.ndarray) -> None:
    """Say how many shots of ``sid`` lie off the grid (stray stage positions), and where."""
    ok = np.isfinite(x) & np.isfinite(y)
    off = ok & (grid.node_index(x, y) < 0)
    if off.any():
        k = int(np.argmax(off))
        notes.append(
            f"sample {sid}: {int(off.sum())} shot(s) at stray stage positions (first at x = {x[k]:.6g}, "
            f"y = {y[k]:.6g} mm) lie outside the raster and are left out of the map"
        )
    if (~ok).any():
        notes.append(f"sample {sid}: {int((~ok).sum())} shot(s) without a finite position are left out of the map")


__all__ = [
    "BLOCK_SHOTS",
    "MapResult",
    "MapSettings",
    "intensity_units",
    "make_maps",
    "map_lines",
    "parse_map_section",
    "rastered_samples",
]
