"""Inputs of a calibration-free analysis: the sample's rows, instrument width, gate delay,
shot deviations and the intensity basis (steps of :mod:`compquant.cflibs.analysis`).

Equations and sources: docs/calibration-free.md.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from compquant.errors import InputError

_INSTR_KEYS = ("instrument_fwhm_nm", "resolution_fwhm_nm", "fwhm_nm", "resolution_nm")


def _instrument_width(settings, instrument, warn):
    """Instrumental FWHM as a function of wavelength (nm → nm).

    From ``[cf] instrument_fwhm_nm`` or ``[cf] resolving_power`` (FWHM = λ/R), else the
    run's instrument attributes (same names), else 0 with a warning.
    """
    if settings.instrument_fwhm_nm is not None:
        v = float(settings.instrument_fwhm_nm)
        return lambda wl: np.full(np.shape(wl), v)
    if settings.resolving_power is not None:
        r = float(settings.resolving_power)
        return lambda wl: np.asarray(wl, float) / r
    instrument = instrument or {}
    for k in _INSTR_KEYS:
        if k in instrument:
            try:
                v = float(instrument[k])
            except (TypeError, ValueError):
                continue
            if math.isfinite(v) and v >= 0:
                return lambda wl, v=v: np.full(np.shape(wl), v)
    if "resolving_power" in instrument:
        try:
            r = float(instrument["resolving_power"])
        except (TypeError, ValueError):
            r = float("nan")
        if math.isfinite(r) and r > 0:
            return lambda wl: np.asarray(wl, float) / r
    warn("instrumental FWHM unknown ([cf] instrument_fwhm_nm / resolving_power or run instrument "
         "attrs): width-based nₑ assumes 0")
    return lambda wl: np.zeros(np.shape(wl))


def _gate_delay_s(acquisition) -> float | None:
    if not acquisition:
        return None
    for key, scale in (("gate_delay_s", 1.0), ("gate_delay_us", 1e-6), ("gate_delay_ns", 1e-9),
                       ("delay_s", 1.0), ("delay_us", 1e-6), ("delay_ns", 1e-9)):
        if key in acquisition:
            try:
                v = float(acquisition[key]) * scale
            except (TypeError, ValueError):
                continue
            if math.isfinite(v) and v > 0:
                return v
    return None


def _select_sample(line_table: pd.DataFrame, sample_id, where):
    if not isinstance(line_table, pd.DataFrame):
        raise InputError("line table must be a pandas DataFrame", where=where,
                         fix="pass the table from compquant.lines.measure_run")
    if "sample_id" in line_table.columns:
        ids = list(dict.fromkeys(line_table["sample_id"].astype(str)))
        if sample_id is None:
            if len(ids) != 1:
                raise InputError(f"line table holds {len(ids)} samples", where=where,
                                 fix="pass sample_id=..., or use analyse_cf_samples")
            sample_id = ids[0]
        rows = line_table[line_table["sample_id"].astype(str) == str(sample_id)]
        if rows.empty:
            raise InputError(f"sample {sample_id!r} not in the line table", where=where,
                             fix=f"choose one of {', '.join(ids[:10])}")
    else:
        rows = line_table
        sample_id = "sample" if sample_id is None else sample_id
    return str(sample_id), rows


def _shot_deviations(measurement, sample_id, line_ids) -> np.ndarray | None:
    """Relative deviations I_k/Ī − 1 of the accepted shots of one sample, (n_shots, n_lines) in the
    order of ``line_ids`` (0 for a line the measurement lacks or a shot without a value); ``None``
    without a measurement or with fewer than 3 shots."""
    if measurement is None:
        return None
    try:
        s_idx = list(map(str, measurement.sample_ids)).index(str(sample_id))
    except ValueError:
        return None
    rows = (np.asarray(measurement.shot_sample) == s_idx) & np.asarray(measurement.shot_accepted, bool)
    if rows.sum() < 3:
        return None
    col = {str(x): j for j, x in enumerate(measurement.line_ids)}
    M = np.asarray(measurement.shot_intensity)[rows]
    out = np.zeros((M.shape[0], len(line_ids)))
    for i, lid in enumerate(line_ids):
        j = col.get(str(lid))
        if j is None:
            continue
        v = M[:, j]
        ok = np.isfinite(v)
        if ok.sum() < 3 or not np.all(ok):
            continue  # incomplete shots: independent draws for this line
        mean = float(np.mean(v))
        if mean > 0:
            out[:, i] = v / mean - 1.0
    return out


def _intensity_basis(s, given, where) -> str:
    """Basis of the line intensities: ``[cf] response_basis`` wins over the run's attribute.

    ``None`` (the run does not say) is taken as energy — compquant's convention — when the run
    carries no response curve; a run whose response curve has no stated basis is refused
    (``"unknown"``): a photon-basis curve read as energy biases T by tens of per cent."""
    basis = s.response_basis or given or "energy"
    if basis not in ("energy", "photon"):
        raise InputError(f"the run's response curve has an unknown basis ({basis!r})", where=where,
                         fix="record response_basis = 'photon' or 'energy' in the run (compquant convert "
                         "--response-basis), or set [cf] response_basis in the method")
    return basis

