"""From the analysis objects to certificate parts (used by :mod:`compquant.analyse`).

Adapters from the outputs of the earlier steps -- the results table of
:mod:`compquant.calibrate.apply`, a :class:`compquant.calibrate.Calibration`, a
:class:`compquant.cflibs.result.CFResult`, the run -- to the plain certificate
dataclasses of :mod:`compquant.report.certificate`, and the figures of one
sample.  The objects are read by attribute (duck typing), so this module
imports none of those packages.
"""

from __future__ import annotations

import datetime as _dt
import math
from pathlib import Path

import numpy as np

from compquant.fileio import atomic_path
from compquant.report.certificate import (
    CalibrationInfo,
    CheckResult,
    CurveInfo,
    DriftInfo,
    FigureItem,
    LTECheck,
    PlasmaInfo,
    ResultRow,
    StandardValue,
)
from compquant.report.numbers import finite

#: flags that the certificate derives from the numbers itself (kept once)
_DERIVED = {"below_lod", "above_range"}


def _flags(text) -> list[str]:
    if text is None or (isinstance(text, float) and math.isnan(text)):
        return []
    return [f for f in str(text).split(";") if f]


def _f(x):
    try:
        v = float(x)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def result_rows(results, sample_id: str) -> list[ResultRow]:
    rows = []
    sub = results[results["sample_id"].astype(str) == sample_id]
    for r in sub.itertuples(index=False):
        fl = _flags(r.flags)
        below = bool(r.below_lod)
        rows.append(
            ResultRow(
                element=str(r.element),
                mass_fraction=None if below else _f(r.mass_fraction),
                U=None if below else _f(r.U),
                k=_f(r.k) or 2.0,
                u=None if below else _f(r.u),
                lod=_f(r.lod),
                loq=_f(r.loq),
                below_lod=below,
                above_range="above_range" in fl,
                flags=[f for f in fl if f not in _DERIVED],
                line_id=str(r.line_id),
                basis=str(r.basis),
            )
        )
    return rows


def measured_when(run, sample_id: str) -> str:
    """Time of the sample's first shot: run start time + shot time, ISO 8601 UTC; "" when unknown.

    The start time comes from the run's acquisition record (``start_time``, ``start_utc``,
    ``measured_utc`` or ``date``), never from the file's creation time.
    """
    acq = run.acquisition or {}
    start = None
    for key in ("start_time", "start_utc", "measured_utc", "date"):
        if acq.get(key):
            start = str(acq[key])
            break
    if start:
        try:
            t0 = _dt.datetime.fromisoformat(start.replace("Z", "+00:00"))
        except ValueError:
            return ""  # free text is not a date of measurement: the certificate says "not recorded"
        if t0.tzinfo is None:
            t0 = t0.replace(tzinfo=_dt.timezone.utc)
        shots = run.shots
        if "time_s" in shots.columns:
            ts = shots.loc[shots["sample_id"].astype(str) == sample_id, "time_s"]
            if len(ts) and np.isfinite(ts.min()):
                t0 = t0 + _dt.timedelta(seconds=float(ts.min()))
        return t0.astimezone(_dt.timezone.utc).replace(microsecond=0).isoformat().replace("+00:00", "Z")
    # the file's creation time is when it was written (e.g. converted), not when it was measured
    return ""


def technique(method, run) -> str:
    acq = run.acquisition or {}
    parts = [method.technique]
    if acq.get("laser_wavelength_nm"):
        parts.append(f"laser {acq['laser_wavelength_nm']} nm")
    if acq.get("pulse_energy_mj"):
        parts.append(f"{acq['pulse_energy_mj']} mJ")
    if acq.get("gate_delay_us") is not None:
        parts.append(f"gate delay {acq['gate_delay_us']} µs")
    if acq.get("gate_width_us") is not None:
        parts.append(f"gate width {acq['gate_width_us']} µs")
    if acq.get("atmosphere"):
        parts.append(str(acq["atmosphere"]))
    return ", ".join(str(p) for p in parts)


# ------------------------------------------------------------------------- calibration path


def calibration_info(cal, cal_file: str, cal_sha: str) -> CalibrationInfo:
    curves = []
    used_refs: dict[str, set[str]] = {}
    for el, c in cal.curves.items():
        used = [s for s in c.standards if s.get("used", True)]
        used_refs[el] = {str(s.get("standard_id", "")) for s in used}
        lo, hi = (list(c.range_mass_fraction) + [None, None])[:2]
        model = c.model + (", through origin" if c.through_origin else "")
        if c.basis == "ratio" and c.internal_standard:
            model += f"; ratio to {c.internal_standard}"
        curves.append(
            CurveInfo(
                el, c.line_id, model, c.internal_standard or "", _f(lo), _f(hi), len(used), _f(c.r2), str(c.lod_source)
            )
        )
    standards = []
    for s in cal.standards:
        el = str(s.get("element"))
        sid = str(s.get("standard_id"))
        if el in used_refs and sid in used_refs[el]:
            standards.append(
                StandardValue(
                    sid, el, float(s["mass_fraction"]), _f(s.get("U")), _f(s.get("k")) or 2.0, str(s.get("source", ""))
                )
            )
    order = {el: i for i, el in enumerate(cal.curves)}
    standards.sort(key=lambda v: (v.standard_id, order.get(v.element, len(order)), v.element))
    desc = f"{cal.basis} basis"
    if cal.matrix_element:
        desc += f"; matrix element {cal.matrix_element} by difference"
    desc += f"; method {cal.method_id} {cal.method_version}; from run {Path(cal.run_path).name or '?'}"
    if cal.rejected:
        desc += "; not calibrated: " + "; ".join(f"{k}: {v}" for k, v in sorted(cal.rejected.items()))
    return CalibrationInfo(cal.calibration_id, cal.created_utc, desc, curves, standards, cal_file, cal_sha)


def drift_info(drift: dict) -> DriftInfo:
    coefs = drift.get("coefficients") or {}
    factors = {str(k): float(v["alpha"]) for k, v in coefs.items() if _f(v.get("alpha")) is not None}
    kinds = sorted({str(v.get("kind", "")) for v in coefs.values() if v.get("kind")})
    if drift.get("applied"):
        desc = "per-line correction with setup samples"
        if kinds:
            desc += f" ({', '.join(kinds)})"
        desc += "; factors are the slopes alpha mapping measured setup intensities to their references"
        if drift.get("uncorrected_lines"):
            desc += "; not corrected: " + ", ".join(map(str, drift["uncorrected_lines"]))
        if drift.get("reason"):
            desc += f"; {drift['reason']}"
    else:
        desc = str(drift.get("reason", ""))
    return DriftInfo(bool(drift.get("applied")), desc, [str(s) for s in drift.get("setup_samples", [])], factors)


def check_results(checks, results=None) -> list[CheckResult]:
    """Check-sample comparisons; ``results`` (the results table) gives each check its result flags."""
    out = []
    if checks is None:
        return out
    flags, loqs = {}, {}
    if results is not None and len(results):
        for r in results.itertuples(index=False):
            fl = _flags(r.flags) + (["below_lod"] if bool(r.below_lod) else [])
            flags[(str(r.sample_id), str(r.element))] = list(dict.fromkeys(fl))
            loqs[(str(r.sample_id), str(r.element))] = _f(r.loq)
    for r in checks.itertuples(index=False):
        z = _f(getattr(r, "z", None))
        crit = "|En| <= 1" + (" and |z| < 3" if z is not None else "")
        out.append(
            CheckResult(
                str(r.sample_id),
                str(r.standard_id),
                str(r.element),
                _f(r.measured),
                _f(r.U),
                float(r.certified),
                _f(r.U_certified),
                z,
                _f(r.En),
                bool(r.passed),
                crit,
                flags.get((str(r.sample_id), str(r.element)), []),
                loqs.get((str(r.sample_id), str(r.element))),
            )
        )
    return out


def curve_figure(c, sample_row: ResultRow | None, matrix_w: float | None) -> bytes | None:
    """The calibration-curve figure of the certificate (:func:`compquant.calibrate.plots.curve_png`,
    the figure ``compquant calibrate --plots`` draws too) with this sample marked when it has a value
    (for a curve on the ratio basis, also a matrix mass fraction ``matrix_w``)."""
    from compquant.calibrate.plots import curve_png

    x0 = None
    if sample_row is not None and finite(sample_row.mass_fraction):
        x0 = sample_row.mass_fraction
        if c.basis == "ratio":
            x0 = x0 / matrix_w if matrix_w else None
    return curve_png(c, sample_x=x0, sample_label="this sample")


# ------------------------------------------------------------------------- calibration-free path


_LTE_NAMES = {
    "mcwhirter": "McWhirter criterion",
    "transient": "Transient plasma (relaxation time)",
    "inhomogeneous": "Inhomogeneous plasma (diffusion length)",
}
_NE_METHODS = {
    "saha_balance": "Saha balance of neutral and ion lines",
    "h_alpha_stark_width": "Stark width of H alpha",
    "stark_widths": "Stark widths of the lines",
    "fixed": "fixed value",
}


def plasma_info(res) -> PlasmaInfo:
    """Plasma conditions of a :class:`compquant.cflibs.result.CFResult` (U = 2u)."""
    checks, unchecked = [], []
    for it in (res.lte or {}).get("checks", []):
        name = _LTE_NAMES.get(str(it.get("name")), str(it.get("name")))
        if not it.get("checked") or it.get("passed") is None:
            unchecked.append(f"{name}: not checked ({it.get('note', '')})")
            continue
        checks.append(
            LTECheck(
                name,
                str(it.get("note", "")),
                _f(it.get("value")),
                _f(it.get("limit")),
                str(it.get("unit", "")).replace("cm-3", "cm⁻³"),
                bool(it.get("passed")),
            )
        )
    u_t, u_ne = _f(res.u_temperature_k), _f(res.u_electron_density_cm3)
    method = f"T from the {res.fit_mode} plot; nₑ from the {_NE_METHODS.get(str(res.ne_method), str(res.ne_method))}"
    if unchecked:
        method += "; " + "; ".join(unchecked)
    return PlasmaInfo(
        float(res.temperature_k),
        2 * u_t if u_t else None,
        _f(res.electron_density_cm3),
        2 * u_ne if u_ne else None,
        method,
        checks,
    )


def boltzmann_figure(res) -> bytes | None:
    """(Saha-)Boltzmann plot of the lines used, with the fitted values
    (:func:`compquant.cflibs.plots.saha_boltzmann_png`, the figure ``compquant cf --plots`` draws too)."""
    from compquant.cflibs.plots import saha_boltzmann_png

    return saha_boltzmann_png(res)


def printed(r: ResultRow) -> dict:
    rep = r.reported()
    return {"value": rep.value, "U": rep.U, "unit": rep.unit, "flags": ";".join(r.all_flags())}


def blank_text(curves: dict) -> str:
    srcs = sorted({str(c.lod_source) for c in curves.values() if getattr(c, "lod_source", "")})
    return "; ".join(srcs)


def sample_figures(
    sid, stem, outdir: Path, wavelength, mean_spec, lines_marked, curves, rows, matrix_w, cf_res, write: bool = True,
) -> list[FigureItem]:
    """The sample's figures; ``path`` is relative to ``outdir``; written there when ``write``.

    ``mean_spec`` maps sample ids to the mean spectra the line measurement already computed
    (:attr:`compquant.lines.LineMeasurement.mean_spectra`, on ``wavelength``); the run is not
    read again.  A sample without one gets no spectrum figure.
    """
    from compquant.report.figures import spectrum_png

    items: list[FigureItem] = []
    spec = mean_spec.get(sid)
    if spec is not None and np.asarray(spec).shape == np.shape(wavelength):
        png = spectrum_png(
            np.asarray(wavelength, float),
            np.asarray(spec, float),
            lines_marked,
            title="Mean preprocessed spectrum of all the sample's shots (before shot QC)",
            ylabel="intensity (a.u.)",
        )
        items.append(
            FigureItem("Mean spectrum of the sample with the analytical lines used (dashed).", "", "spectrum", png)
        )
    by_el = {r.element: r for r in rows}

    def marked(row, c) -> bool:
        return (
            row is not None
            and not row.below_lod
            and finite(row.mass_fraction)
            and (c.basis != "ratio" or bool(matrix_w))
        )

    for el, c in curves.items():
        png = curve_figure(c, by_el.get(el), matrix_w)
        if png is not None:
            items.append(
                FigureItem(
                    f"Calibration curve for {el} ({c.line_id})"
                    + (" with this sample marked." if marked(by_el.get(el), c) else "."),
                    "Error bars: expanded uncertainties (k = 2) of the standards."
                    + (
                        ""
                        if marked(by_el.get(el), c)
                        else " The sample is below the limit of detection or not determined, so it is not marked."
                    ),
                    "calibration",
                    png,
                )
            )
    if cf_res is not None:
        png = boltzmann_figure(cf_res)
        if png is not None:
            items.append(
                FigureItem(
                    "Boltzmann plot of the lines used.", "Lines: fitted slopes, common temperature.", "boltzmann", png
                )
            )
    for k, it in enumerate(items, 1):
        it.path = str(Path("figures") / stem / f"fig{k}-{it.kind}.png")
    if write:
        write_figures(outdir, items)
    return items


def write_figures(outdir: Path, items) -> None:
    """Write the PNG of each figure to ``outdir / item.path`` (atomically)."""
    for it in items:
        if it.png is not None and it.path:
            with atomic_path(Path(outdir) / it.path) as tmp:
                Path(tmp).write_bytes(it.png)


__all__ = [
    "blank_text",
    "boltzmann_figure",
    "calibration_info",
    "check_results",
    "curve_figure",
    "drift_info",
    "measured_when",
    "plasma_info",
    "printed",
    "result_rows",
    "sample_figures",
    "write_figures",
    "technique",
]
