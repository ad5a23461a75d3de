"""Run-specific settings of line measurement: the :class:`_Setup` shared by
:func:`compquant.lines.measure_run` and :func:`compquant.lines.mean_spectrum` (dark and
response vectors, saturation threshold, the wavelength axis in the method's medium, fit
groups, window geometry per sample) and the chunk size.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from compquant.errors import MethodError
from compquant.lines.chunk import (
    ChunkPlan,
)
from compquant.lines.wavecal import WavecalResult
from compquant.lines.windows import (
    WindowWeights,
    build_window_weights,
    window_geometry,
)
from compquant.method import LineSpec, Method, parse_line_id, side_width_nm, window_width_nm
from compquant.preprocess.corrections import dark_reference, exposure_ratio, trapezoid_weights


def _pitch(wl: np.ndarray) -> float:
    return float(np.median(np.diff(wl)))


def _load_curve_csv(path, columns: tuple[str, str], where: str):
    from compquant.fileio import require_file

    p = require_file(path, "file")
    try:
        df = pd.read_csv(p)
    except (OSError, ValueError, pd.errors.ParserError) as exc:
        raise MethodError(
            f"cannot read CSV ({exc})", where=f"{where}: {p}", fix=f"give a CSV with columns {columns[0]},{columns[1]}"
        ) from exc
    if not set(columns) <= set(df.columns):
        raise MethodError(
            f"CSV lacks columns {columns}",
            where=f"{where}: {p}",
            fix=f"give a CSV with columns {columns[0]},{columns[1]}",
        )
    x = pd.to_numeric(df[columns[0]], errors="coerce").to_numpy(float)
    y = pd.to_numeric(df[columns[1]], errors="coerce").to_numpy(float)
    ok = np.isfinite(x) & np.isfinite(y)
    if ok.sum() < 2 or np.any(np.diff(x[ok]) <= 0):
        raise MethodError(
            "CSV needs >= 2 rows of finite numbers with increasing wavelength",
            where=f"{where}: {p}",
            fix="sort by wavelength and remove empty cells",
        )
    return x[ok], y[ok]


def _response_vector(run, method: Method, notes: list) -> np.ndarray | None:
    pre = method.preprocess
    if not pre.response:
        return None
    if pre.response_file:
        where = f"{method.where}: [preprocess.response] file"
        x, r = _load_curve_csv(method.resolve_path(pre.response_file), ("wavelength_nm", "response"), where)
        wl = run.wavelength
        if wl[0] < x[0] or wl[-1] > x[-1]:
            raise MethodError(
                f"response file covers {x[0]:.2f}-{x[-1]:.2f} nm, run covers {wl[0]:.2f}-{wl[-1]:.2f} nm",
                where=where,
                fix="give a response curve over the whole run range",
            )
        from compquant.run._checks import check_response

        curve = np.interp(wl, x, r)
        check_response(curve, where)  # positive, finite, a sane range: the same rule as a stored response
        return curve
    r = run.response()
    if r is None:
        notes.append("response correction asked for but the run stores no response: not applied")
    return r


def _inverse_response(r: np.ndarray | None) -> np.ndarray | None:
    if r is None:
        return None
    good = np.isfinite(r) & (r > 0)
    return np.where(good, 1.0 / np.where(good, r, 1.0), 0.0)


def _dark_vector(run, method: Method, notes: list) -> tuple[np.ndarray | None, float]:
    pre = method.preprocess
    if not pre.dark:
        return None, 1.0
    d = run.dark()
    if d is None or d.shape[0] == 0:
        explicit = ((method.raw or {}).get("preprocess") or {}).get("dark") or {}
        if isinstance(explicit, dict) and explicit.get("enabled") is True:
            # the method file itself demands dark subtraction: results without it would be wrong
            raise MethodError(
                "the run stores no dark frames, but the method requires dark subtraction "
                f"([preprocess.dark] enabled = true in {method.where})",
                where=str(run.path),
                fix="use a run recorded with dark frames, or set [preprocess.dark] enabled = false",
            )
        notes.append("dark subtraction asked for but the run stores no dark frames: not applied")
        return None, 1.0
    scale = exposure_ratio(run.exposure_s, run.dark_exposure_s) if pre.dark_scale_exposure else 1.0
    return dark_reference(d, pre.dark_statistic) * scale, scale


def _fit_groups(lines: list[LineSpec], wl: np.ndarray) -> list[list[int]]:
    """Group fit-mode lines: by their ``group`` name, else lines whose fit windows overlap."""
    pitch = _pitch(wl)
    idx = [i for i, ln in enumerate(lines) if ln.mode == "fit"]
    named: dict[str, list[int]] = {}
    auto = []
    for i in idx:
        if lines[i].group:
            named.setdefault(lines[i].group, []).append(i)
        else:
            auto.append(i)
    groups = list(named.values())
    auto.sort(key=lambda i: lines[i].wavelength_nm)
    cur: list[int] = []
    cur_hi = -np.inf
    for i in auto:
        half = 0.5 * window_width_nm(lines[i], pitch)
        lo, hi = lines[i].wavelength_nm - half, lines[i].wavelength_nm + half
        if cur and lo <= cur_hi:
            cur.append(i)
            cur_hi = max(cur_hi, hi)
        else:
            if cur:
                groups.append(cur)
            cur, cur_hi = [i], hi
    if cur:
        groups.append(cur)
    return groups


def _shift_lines_nm(method: Method) -> list[float]:
    out = []
    for ref in method.preprocess.shift_lines:
        if isinstance(ref, str):
            try:
                out.append(method.line(ref).wavelength_nm)
            except MethodError:
                out.append(parse_line_id(ref)[2])
        else:
            out.append(float(ref))
    return out


def _chunk_size(run, chunk_shots: int | None, method: Method) -> int:
    c = int(method.measure.chunk_shots if chunk_shots is None else chunk_shots)  # 0 is refused, not "default"
    if c < 1:
        raise MethodError(f"chunk size {c} is not positive", where="chunk_shots", fix="use >= 1 shot")
    limit = getattr(run, "memory_limit", None)
    if limit:  # the run's memory limit holds for the chunk buffers too (about 24 bytes per value)
        fit = int(limit) // (24 * max(1, int(run.n_pixels)))
        if fit < 1:
            from compquant.errors import ResourceLimitError

            raise ResourceLimitError(f"one shot of {run.n_pixels} pixels needs {24 * run.n_pixels} bytes to process, "
                                     f"above the memory limit of {int(limit)} bytes", where="memory limit",
                                     fix="raise COMPQUANT_MEMORY_LIMIT")
        c = min(c, fit)
    align = max(1, int(getattr(run, "chunk_rows", 1)))
    if c > align:
        c = (c // align) * align
    return c


def _axis_in_method_medium(run, method: Method) -> tuple[np.ndarray, str]:
    """The run's wavelength axis in the method's medium (air or vacuum).

    When the media differ the axis is converted with the Edlen (1966) / Birch & Downs
    (1994) refractive index of standard air as given by Morton (2000, ApJS 130, 403,
    eq. 8) (:mod:`compquant.atomic.airvac`); the note says so for the provenance.
    """
    from compquant.atomic.airvac import air_to_vacuum, vacuum_to_air

    wl = np.asarray(run.wavelength, dtype=np.float64)
    run_medium = getattr(run, "medium", "air")
    want = getattr(method, "medium", "air")
    if run_medium == want:
        return wl, f"run and method wavelengths both in {want}: no conversion"
    conv = vacuum_to_air(wl) if want == "air" else air_to_vacuum(wl)
    return np.asarray(conv, dtype=np.float64), (
        f"run axis converted from {run_medium} to {want} wavelengths (Edlen 1966 / Birch & Downs 1994 "
        f"refractive index of standard air, Morton 2000 eq. 8); shift at {wl[0]:.3f} nm: {conv[0] - wl[0]:+.5f} nm"
    )


class _Setup:
    """Resolved, run-specific settings shared by measure_run and mean_spectrum."""

    def __init__(self, run, method: Method):
        self.notes: list[str] = []
        self.wl, self.medium_note = _axis_in_method_medium(run, method)
        method.check_run(self.wl)
        self.method = method
        self.threads = 1
        pre = method.preprocess
        self.pitch = _pitch(self.wl)
        self.corr: dict[int, WavecalResult] = {}
        self.masked_line: np.ndarray | None = None
        self.masked_ranges: list[tuple[int, int, int]] = []
        self.dark, self.dark_scale = _dark_vector(run, method, self.notes)
        self.response = _response_vector(run, method, self.notes)
        self.inv_response = _inverse_response(self.response)
        level = pre.saturation_level if pre.saturation_level is not None else run.saturation
        if pre.saturation and level is None:
            self.notes.append("run states no saturation level: saturation not checked")
        self.sat_threshold = (level * (1.0 - pre.saturation_margin)) if (pre.saturation and level) else None
        if pre.normalise == "background" and pre.baseline == "none":
            raise MethodError(
                "background normalisation needs a baseline method",
                where=f"{method.where}: [preprocess.normalise] how",
                fix="set [preprocess.baseline] method, or choose another normalisation",
            )
        self.sample_index = np.asarray(run.shots["sample_index"].to_numpy(), dtype=np.int64)  # no copy
        self.shot_number = run.shots["shot"].to_numpy() if "shot" in run.shots.columns else np.arange(run.n_shots)
        self.samples = run.samples.reset_index(drop=True)
        self.sample_ids = [str(s) for s in self.samples["sample_id"]]
        self.pulse = None
        if pre.pulse_energy_normalise or pre.min_pulse_fraction > 0:
            if "pulse_energy_mj" not in run.shots.columns:
                raise MethodError(
                    "the method uses pulse energies but the run stores none",
                    where=f"{method.where}: [preprocess.qc]",
                    fix="set pulse_energy_normalise = false and min_pulse_fraction = 0",
                )
            self.pulse = run.shots["pulse_energy_mj"].to_numpy(dtype=float)
        self.lines = method.lines
        self.win_idx = [i for i, ln in enumerate(self.lines) if ln.mode == "window"]
        self.groups = _fit_groups(self.lines, self.wl)
        self.fit_idx = [i for g in self.groups for i in g]

    def shift_of(self, s: int | None, wavelength_nm: float) -> float:
        """Wavelength correction (nm) of sample ``s`` at a table wavelength (0 without one)."""
        c = self.corr.get(s) if s is not None else None
        return 0.0 if c is None else float(c.shift_at(wavelength_nm))

    def geometry(self, i: int, s: int | None = None):
        ln = self.lines[i]
        return window_geometry(
            ln.wavelength_nm + self.shift_of(s, ln.wavelength_nm),
            window_width_nm(ln, self.pitch),
            side_width_nm(ln, self.pitch),
            ln.gap_nm or 0.0,
        )

    def window_weights(self, s: int | None = None) -> WindowWeights:
        return build_window_weights(self.wl, [self.geometry(i, s) for i in self.win_idx])

    def base_plan(self) -> ChunkPlan:
        pre = self.method.preprocess
        return ChunkPlan(
            n_pixels=self.wl.size,
            dark=self.dark,
            inv_response=self.inv_response,
            saturation_threshold=self.sat_threshold,
            baseline=pre.baseline,
            baseline_params=dict(pre.baseline_params),
            total_weights=trapezoid_weights(self.wl),
            background_level=pre.normalise == "background",
        )
