"""From the analysis objects to certificate parts (used by :mod:`compquant.analyse`).

Adapters from the outputs of the earlier steps -- the results table of
:mod:`compquant.quantify`, a :class:`compquant.calibrate.Calibration`, a
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

from compquant.errors import CompquantError
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
    """Time of the sample's first shot: run start time + shot time, ISO 8601 UTC; else the run's date."""
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
    created = getattr(run, "attrs", {}).get("created")
    try:
        t = _dt.datetime.fromisoformat(str(created).replace("Z", "+00:00"))
    except ValueError:
        return ""  # free text ("yesterday", "x") is never printed as the date of measurement
    if t.tzinfo is None:
        t = t.replace(tzinfo=_dt.timezone.utc)
    return t.astimezone(_dt.timezone.utc).replace(microsecond=0).isoformat().replace("+00:00", "Z")


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


def check_results(checks) -> list[CheckResult]:
    out = []
    if checks is None:
        return out
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
            )
        )
    return out


def curve_figure(c, sample_row: ResultRow | None, matrix_w: float | None) -> bytes | None:
    from compquant.report.figures import calibration_png

    used = [s for s in c.standards if s.get("used", True)]
    if len(used) < 2:
        return None
    ratio = c.basis == "ratio"
    f = 1.0 if ratio else 100.0
    xs = np.array([float(s["x"]) for s in used]) * f
    ys = np.array([float(s["y"]) for s in used])
    xe = np.array([float(s.get("u_x", 0.0) or 0.0) for s in used]) * 2 * f
    ye = np.array([float(s.get("u_y", 0.0) or 0.0) for s in used]) * 2
    lo, hi = float(xs.min()), float(xs.max())
    grid = np.linspace(0.0 if lo > 0 else lo, hi * 1.08, 120)
    try:
        fit_y = np.asarray(c.response(grid / f), float)
    except Exception:  # a curve that cannot be evaluated on the grid: draw the standards only
        fit_y = None
    sx = sy = None
    if sample_row is not None and finite(sample_row.mass_fraction):
        x0 = sample_row.mass_fraction
        if ratio:
            x0 = x0 / matrix_w if matrix_w else None
        if x0 is not None:
            sx = x0 * f
            sy = float(np.asarray(c.response(np.array([x0])), float)[0])
    xl = f"{c.element} / matrix mass-fraction ratio" if ratio else f"{c.element} mass fraction (%)"
    yl = f"{c.line_id}" + (f" / {c.internal_standard}" if c.internal_standard else "")
    return calibration_png(
        xs,
        ys,
        fit_x=grid if fit_y is not None else None,
        fit_y=fit_y,
        x_err=xe,
        y_err=ye,
        labels=[str(s.get("standard_id", "")) for s in used],
        sample_x=sx,
        sample_y=sy,
        sample_label="this sample",
        xlabel=xl,
        ylabel=yl,
        title=f"Calibration curve {c.element} ({c.model})",
    )


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
    """(Saha-)Boltzmann plot of the lines used, with the fitted values."""
    from compquant.report.figures import boltzmann_png

    pts = [ln for ln in (res.lines or []) if _f(ln.get("x_ev")) is not None and _f(ln.get("y")) is not None]
    if len(pts) < 2:
        return None
    E = np.array([float(p["x_ev"]) for p in pts])
    Y = np.array([float(p["y"]) for p in pts])
    yfit = np.array([_f(p.get("y_fit")) if _f(p.get("y_fit")) is not None else np.nan for p in pts])
    yerr = np.array([_f(p.get("u_ordinate")) or 0.0 for p in pts])
    sp = [str(p.get("species", "lines")) for p in pts]
    saha = str(res.fit_mode) == "saha-boltzmann"
    return boltzmann_png(
        E,
        Y,
        sp,
        fit_y=yfit,
        yerr=yerr,
        title=f"{'Saha-' if saha else ''}Boltzmann plot, T = {res.temperature_k:.0f} K",
        xlabel="upper level energy (eV)" + (", ions shifted by the ionisation energy" if saha else ""),
        ylabel="ln(I·λ / (g_k·A_ki))" + (" (ions Saha-corrected)" if saha else ""),
    )


def printed(r: ResultRow) -> dict:
    rep = r.reported()
    return {"value": rep.value, "U": rep.U, "unit": rep.unit, "flags": ";".join(r.all_flags())}


def blank_text(curves: dict) -> str:
    srcs = sorted({str(c.lod_source) for c in curves.values() if getattr(c, "lod_source", "")})
    return "; ".join(srcs)


def sample_figures(
    sid, stem, outdir: Path, wavelength, mean_spec, lines_marked, curves, rows, matrix_w, cf_res, run_path, method
) -> list[FigureItem]:
    from compquant.report.figures import spectrum_png

    figdir = outdir / "figures" / stem
    items: list[FigureItem] = []
    spec = mean_spec.get(sid)
    if spec is None:
        try:
            from compquant.lines import mean_spectrum
            from compquant.run import Run

            with Run.open(run_path) as run:
                wl, spec, _info = mean_spectrum(run, method, sid)
                wavelength = np.asarray(wl, float)
        except CompquantError:
            spec = None
    if spec is not None and np.asarray(spec).shape == wavelength.shape:
        png = spectrum_png(
            wavelength,
            np.asarray(spec, float),
            lines_marked,
            title="Mean preprocessed spectrum of the accepted shots",
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
        p = figdir / f"fig{k}-{it.kind}.png"
        with atomic_path(p) as tmp:
            Path(tmp).write_bytes(it.png)
        it.path = str(Path("figures") / stem / p.name)
    return items


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
    "technique",
]
