"""What the review page shows beside the numbers, stored with the analysis: the evidence.

An analysis stores, at the time it runs (:func:`store_evidence`, called by
:func:`compquant.record.store.store_analysis`):

* the wavelength axis of the run (float64) and each sample's mean preprocessed spectrum (float32),
  as zlib-compressed little-endian arrays with the SHA-256 of the uncompressed bytes
  (table ``evidence_arrays``);
* per sample and line: the line's window (integration window and background side windows, or the
  fit window), the mean spectrum in it, the fitted profile and the residuals ``y - model`` for
  fitted lines, the measured intensity and flags (table ``evidence``, ``kind = "line"``);
* per calibration curve: the standards (certified content, response, their standard
  uncertainties, used or not, fitted response and residual), the fitted curve on a grid and the
  LOD/LOQ (``kind = "curve"``); per sample the point where the sample falls on each curve
  (``kind = "mark"``);
* per calibration-free sample: the (Saha-)Boltzmann plot points, their fitted ordinates and the
  plasma temperature (``kind = "boltzmann"``);
* element maps, when a caller has them (:func:`map_item`): the grid of mass fractions with the
  LOD, so the page can mask the nodes below it (``kind = "map"``); ``compquant map --db`` adds the
  maps of a run already in the record afterwards (:func:`maps_evidence`, :func:`store_maps`).

Both tables are append-only (migration r0002): the evidence of a recorded analysis never changes.
Everything here reads what the analysis already computed; nothing is measured or fitted again
except the profile of a fitted group, which is the linear least-squares solution of the stored
design matrix (:class:`compquant.lines.fit.GroupFit`), i.e. the fit itself at its solution.
"""

from __future__ import annotations

import hashlib
import json
import math
import zlib
from dataclasses import dataclass, field

import numpy as np
import sqlalchemy as sa

from compquant.record import schema as S

#: how an array is kept: little-endian IEEE floats, deflated (RFC 1950 zlib stream)
CODEC = "zlib"


def _f(v):
    try:
        x = float(v)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None


def _floats(a, digits: int = 7) -> list:
    """A JSON list of floats (None for non-finite), ``digits`` significant digits (float32 precision)."""
    out = []
    for x in np.asarray(a, float).ravel().tolist():
        out.append(float(f"{x:.{digits}g}") if math.isfinite(x) else None)
    return out


def pack_array(a, dtype: str = "<f4") -> dict:
    """``a`` as ``{dtype, length, codec, data, sha256}``; ``sha256`` is of the uncompressed bytes."""
    raw = np.ascontiguousarray(np.asarray(a, float).ravel(), dtype=np.dtype(dtype)).tobytes()
    return {"dtype": dtype, "length": len(raw) // np.dtype(dtype).itemsize, "codec": CODEC,
            "data": zlib.compress(raw, 6), "sha256": hashlib.sha256(raw).hexdigest()}


def unpack_array(row) -> np.ndarray | None:
    """The array of a row of ``evidence_arrays``; None when its bytes no longer have their SHA-256."""
    if row["codec"] != CODEC or row["dtype"] not in ("<f4", "<f8"):
        return None
    try:
        raw = zlib.decompress(bytes(row["data"]))
    except zlib.error:
        return None
    if hashlib.sha256(raw).hexdigest() != row["sha256"]:
        return None
    a = np.frombuffer(raw, dtype=np.dtype(row["dtype"]))
    return a.astype(float) if a.size == int(row["length"]) else None


@dataclass
class AnalysisEvidence:
    """What :func:`compquant.analyse.analyse` already holds when it stores the record.

    ``meas``: the :class:`compquant.lines.measure.LineMeasurement` (wavelength, mean spectra, line
    table, group fits and the groups); ``method``: the method (its lines); ``curves``: element -> calibration
    curve; ``cf``: sample id -> :class:`compquant.cflibs.result.CFResult`; ``matrix_fraction``:
    sample id -> (matrix mass fraction, u) for ratio-basis curves; ``maps``: optional list of
    :func:`map_item` dicts.
    """

    meas: object = None
    method: object = None
    curves: dict = field(default_factory=dict)
    cf: dict = field(default_factory=dict)
    matrix_fraction: dict = field(default_factory=dict)
    maps: list = field(default_factory=list)


# ------------------------------------------------------------------------- lines and their windows


def _rows_of(table, sid: str) -> dict[str, dict]:
    """The line-table rows of one sample, by line id."""
    if table is None or len(table) == 0:
        return {}
    hit = table[table["sample_id"].astype(str) == sid]
    return {str(r["line_id"]): r for r in hit.to_dict("records")}


def _shift_of(meas, sid: str) -> float:
    sh = getattr(meas, "shifts", None)
    if sh is None or len(sh) == 0 or "shift_nm" not in sh.columns:
        return 0.0
    hit = sh[sh["sample_id"].astype(str) == sid]
    v = _f(hit["shift_nm"].iloc[0]) if len(hit) else None
    return v or 0.0


def _window_line(ln, wl, y, shift: float) -> dict:
    from compquant.lines.windows import side_background, window_geometry
    from compquant.method import side_width_nm, window_width_nm

    pitch = float(np.median(np.diff(wl))) if wl.size > 1 else 1.0
    g = window_geometry(ln.wavelength_nm + shift, window_width_nm(ln, pitch), side_width_nm(ln, pitch),
                        ln.gap_nm or 0.0)
    lo = g.left[0] if g.left else g.a
    hi = g.right[1] if g.right else g.b
    m = (wl >= lo - pitch) & (wl <= hi + pitch)
    x, yy = wl[m], y[m]
    background = None
    kind, alpha, beta = side_background(wl, y, g)  # the straight background the window integral removes
    if kind != "none":
        background = alpha + beta * (x - g.centre_nm)
    return {"x": _floats(x), "y": _floats(yy), "window": [g.a, g.b], "sides": [list(r) for r in (g.left, g.right) if r],
            "background": None if background is None else _floats(background), "model": None, "residual": None}


def _fit_line(gf, j: int, wl, y) -> dict:
    pix = np.asarray(gf.pixels)
    x, yy = wl[pix], y[pix]
    D = np.asarray(gf.design, float)
    coef, *_ = np.linalg.lstsq(D, yy, rcond=None)  # the linear part of the fit at its (non-linear) solution
    model = D @ coef
    n = np.asarray(gf.areas).size
    bg = D[:, n:] @ coef[n:]
    this = D[:, j] * coef[j] + bg
    return {"x": _floats(x), "y": _floats(yy), "window": [float(x[0]), float(x[-1])], "sides": [],
            "background": _floats(bg), "model": _floats(model), "component": _floats(this),
            "residual": _floats(yy - model), "fit_ok": bool(gf.success), "rss": _f(gf.rss), "dof": int(gf.dof)}


def line_items(meas, method, sid: str) -> list[dict]:
    """Per line of the method: its window, the mean spectrum there and (fit mode) the fit and residuals."""
    wl = np.asarray(meas.wavelength, float)
    spec = (getattr(meas, "mean_spectra", None) or {}).get(sid)
    if spec is None or np.asarray(spec).shape != wl.shape:
        return []
    y = np.asarray(spec, float)
    lines = list(method.lines)
    # line index -> (its group, its place in the group), as the measurement grouped and fitted them
    where_fit = {i: (g, j) for g, members in enumerate(getattr(meas, "fit_groups", None) or [])
                 for j, i in enumerate(members)}
    shift = _shift_of(meas, sid)
    table = _rows_of(getattr(meas, "table", None), sid)
    out = []
    for i, ln in enumerate(lines):
        gf = None
        if i in where_fit:
            gf = (getattr(meas, "fits", None) or {}).get((sid, where_fit[i][0]))
        item = _fit_line(gf, where_fit[i][1], wl, y) if gf is not None else _window_line(ln, wl, y, shift)
        row = table.get(ln.line_id, {})
        item.update(line_id=ln.line_id, element=ln.element, wavelength_nm=float(ln.wavelength_nm), mode=ln.mode,
                    intensity=_f(row.get("intensity")), u_intensity=_f(row.get("u_intensity")),
                    snr=_f(row.get("snr")), centre_nm=_f(row.get("centre_nm")), fwhm_nm=_f(row.get("fwhm_nm")),
                    flags=str(row.get("flags", "") or ""))
        out.append(item)
    return out


# ------------------------------------------------------------------------- calibration curves


def curve_item(c) -> dict:
    """One calibration curve: standards with residuals, the fit on a grid, LOD/LOQ (content units)."""
    stds = []
    for s in c.standards:
        stds.append({"id": str(s.get("standard_id", "")), "x": _f(s.get("x")), "u_x": _f(s.get("u_x")),
                     "y": _f(s.get("y")), "u_y": _f(s.get("u_y")), "used": bool(s.get("used", True)),
                     "fitted": _f(s.get("fitted")), "residual": _f(s.get("residual")),
                     "studentized": _f(s.get("studentized")), "reason": str(s.get("reason", "") or "")})
    xs = [s["x"] for s in stds if s["x"] is not None and s["used"]]
    grid = gy = []
    if xs:
        lo, hi = min(xs), max(xs)
        pos = [x for x in xs if x > 0]
        # a grid even in log spacing, so the low end is drawn as finely as the top on a log axis
        lin = np.linspace(0.0 if lo > 0 else lo, hi * 1.08, 80)
        lg = np.geomspace(min(pos) / 10, hi * 1.08, 80) if pos else np.zeros(0)
        g = np.unique(np.concatenate([lin, lg]))
        try:
            gy = _floats(np.asarray(c.response(g), float))
            grid = _floats(g)
        except Exception:  # a curve that cannot be evaluated: the standards only (as the certificate figure)
            grid = gy = []
    return {"element": c.element, "line_id": c.line_id, "internal_standard": c.internal_standard or "",
            "basis": c.basis, "model": c.model, "standards": stds, "grid_x": grid, "grid_y": gy,
            "lod_x": _f(getattr(c, "lod_x", None)), "loq_x": _f(getattr(c, "loq_x", None)),
            "lod": _f(getattr(c, "lod", None)), "residual_sd": _f(getattr(c, "residual_sd", None)),
            "r2": _f(getattr(c, "r2", None))}


def mark_items(curves: dict, rows, matrix_w) -> list[dict]:
    """Where the sample falls on each curve (content x, response y), as the certificate's figure marks it."""
    out = []
    by_el = {r.element: r for r in rows}
    for el, c in curves.items():
        r = by_el.get(el)
        if r is None:
            continue
        x0 = _f(r.mass_fraction)
        shown = x0 is not None and not r.below_lod and (c.basis != "ratio" or bool(matrix_w))
        if shown and c.basis == "ratio":
            x0 = x0 / matrix_w
        y0 = None
        if shown:
            try:
                y0 = _f(np.asarray(c.response(np.array([x0])), float)[0])
            except Exception:
                y0 = None
        out.append({"element": el, "x": x0 if shown else None, "y": y0, "below_lod": bool(r.below_lod),
                    "mass_fraction": _f(r.mass_fraction), "U": _f(r.U), "lod": _f(r.lod)})
    return out


# ------------------------------------------------------------------------- calibration-free


def boltzmann_item(res) -> dict | None:
    """The (Saha-)Boltzmann plot of a calibration-free result: points, fitted ordinates, temperature."""
    pts = []
    for p in res.lines or []:
        if _f(p.get("x_ev")) is None or _f(p.get("y")) is None:
            continue
        pts.append({"line_id": str(p.get("line_id", p.get("line", ""))), "species": str(p.get("species", "")),
                    "x_ev": _f(p.get("x_ev")), "y": _f(p.get("y")), "y_fit": _f(p.get("y_fit")),
                    "u": _f(p.get("u_ordinate"))})
    if len(pts) < 2:
        return None
    return {"fit_mode": str(res.fit_mode), "temperature_k": _f(res.temperature_k),
            "u_temperature_k": _f(res.u_temperature_k), "electron_density_cm3": _f(res.electron_density_cm3),
            "points": pts}


# ------------------------------------------------------------------------- maps


def map_item(name: str, x, y, values, lod: float | None, *, unit: str = "g/g", element: str = "") -> dict:
    """An element map: node coordinates ``x`` (n_x,) and ``y`` (n_y,), ``values`` (n_y, n_x) mass
    fractions and the LOD; nodes below the LOD are masked when shown (:func:`masked_below_lod`)."""
    v = np.asarray(values, float)
    if v.shape != (len(y), len(x)):
        raise ValueError("map values must have shape (len(y), len(x))")
    return {"name": str(name), "element": str(element), "x": _floats(x), "y": _floats(y),
            "values": [_floats(r) for r in v], "lod": _f(lod), "unit": unit}


def masked_below_lod(values, lod) -> np.ndarray:
    """``values`` with every node below ``lod`` (and every non-finite node) set to NaN.

    A mass fraction below the limit of detection, LOD = 3 s_blank / slope (IUPAC, Long and
    Winefordner, Anal. Chem. 55 (1983) 712A), is not distinguished from zero: a map must not show
    it as a number (e.g. -0.1 % to +0.1 % of noise), so the node is left blank.
    """
    v = np.array(values, dtype=float, copy=True)
    if lod is not None and math.isfinite(float(lod)):
        v[~(v >= float(lod))] = np.nan
    else:
        v[~np.isfinite(v)] = np.nan
    return v


def _node_lods(results, sample_id: str, element: str, nx: int, ny: int):
    """(LOD of each node or None, below-LOD mask) of an element map from the per-node results of
    :func:`compquant.maps.build.make_maps` (node ids ``SAMPLE@i,j``)."""
    lods = np.full(nx * ny, np.nan)
    below = np.zeros(nx * ny, bool)
    if results is None or len(results) == 0 or "lod" not in results.columns:
        return None, below.reshape(ny, nx)
    r = results[(results["element"].astype(str) == element)
                & results["sample_id"].astype(str).str.startswith(f"{sample_id}@")]
    for nid, lod, bl in zip(r["sample_id"].astype(str), r["lod"], r.get("below_lod", [False] * len(r))):
        i, _, j = nid.rpartition("@")[2].partition(",")
        try:
            k = int(j) * nx + int(i)
        except ValueError:
            continue
        if 0 <= k < nx * ny:
            lods[k] = _f(lod) if _f(lod) is not None else np.nan
            below[k] = bool(bl)
    return lods.reshape(ny, nx), below.reshape(ny, nx)


def maps_evidence(result) -> list[dict]:
    """The element maps of a :class:`compquant.maps.build.MapResult` as :func:`map_item` dicts
    (with ``sample_id``), ready for :func:`store_maps`.

    Mass-fraction maps carry the LOD of their nodes (LOD = 3 s_blank / slope, IUPAC; Long and
    Winefordner, Anal. Chem. 55 (1983) 712A) as quantify gave it.  When nodes have different LODs
    (ratio basis: the LOD scales with each node's matrix fraction) the map keeps the smallest and
    every node that quantify found below its own LOD is stored blank, so no node below its LOD is
    ever shown.  Intensity maps have no LOD (``lod`` None) and are shown as measured.
    """
    out = []
    for sm in result.samples:
        g = sm.grid
        for em in sm.maps:
            values = np.array(em.values, float)
            lod = None
            if em.quantity == "mass_fraction":
                lods, below = _node_lods(getattr(result, "results", None), sm.sample_id, em.element, g.nx, g.ny)
                if lods is not None and np.isfinite(lods).any():
                    lod = float(np.nanmin(lods))
                    values[below | (values < lods)] = np.nan  # each node against its own LOD
            name = f"{em.element} {em.quantity.replace('_', ' ')} ({em.line_id})"
            item = map_item(name, g.x_mm, g.y_mm, values, lod, unit=em.units, element=em.element)
            out.append({**item, "sample_id": sm.sample_id, "line_id": em.line_id, "quantity": em.quantity})
    return out


def store_maps(conn, run_id: int, sample_ids: dict[str, int], maps: list[dict]) -> list[str]:
    """Insert map items (:func:`maps_evidence`) of a recorded run in the caller's transaction; return
    the names stored.  A map already stored for its sample with the same content is not stored again;
    a different map under a name already used gets `` #2``, `` #3``, ... (the tables are append-only)."""
    E = S.evidence
    stored = []
    for m in maps:
        row = sample_ids[m["sample_id"]]
        old = {r.key: r.sha256 for r in conn.execute(sa.select(E.c.key, E.c.sha256).where(
            E.c.run_id == run_id, E.c.kind == "map", E.c.sample_row == row)).all()}
        base, n = m["name"], 1
        while True:
            item = _item_row(run_id, row, "map", m["name"], m)
            if old.get(m["name"]) in (None, item["sha256"]):
                break
            n += 1
            m = {**m, "name": f"{base} #{n}"}
        if old.get(m["name"]) == item["sha256"]:
            continue
        conn.execute(E.insert().values(**item))
        stored.append(m["name"])
    return stored


# ------------------------------------------------------------------------- storing and reading


def _item_row(run_id, sample_row, kind: str, key: str, data: dict) -> dict:
    text = json.dumps(data, sort_keys=True, ensure_ascii=False, allow_nan=False, separators=(",", ":"))
    return {"run_id": run_id, "sample_row": sample_row, "kind": kind, "key": key, "data": text,
            "sha256": hashlib.sha256(text.encode("utf-8")).hexdigest()}


def evidence_rows(ev: AnalysisEvidence, run_id: int, sample_ids: dict[str, int], certificates) -> tuple[list, list]:
    """(array rows, item rows) of one analysis for ``evidence_arrays`` and ``evidence``."""
    arrays, items = [], []
    meas = ev.meas
    if meas is not None and getattr(meas, "wavelength", None) is not None:
        arrays.append({"run_id": run_id, "sample_row": None, "name": "wavelength",
                       **pack_array(meas.wavelength, "<f8")})
        for sid, spec in (getattr(meas, "mean_spectra", None) or {}).items():
            row = sample_ids.get(str(sid))
            if row is None or np.asarray(spec).shape != np.asarray(meas.wavelength).shape:
                continue
            arrays.append({"run_id": run_id, "sample_row": row, "name": "mean_spectrum", **pack_array(spec, "<f4")})
            if ev.method is not None:
                items += [_item_row(run_id, row, "line", it["line_id"], it) for it in line_items(meas, ev.method, sid)]
    for el, c in (ev.curves or {}).items():
        items.append(_item_row(run_id, None, "curve", str(el), curve_item(c)))
    for cert in certificates or ():
        sid = cert.sample.sample_id
        row = sample_ids.get(sid)
        if row is None:
            continue
        if ev.curves:
            mw = (ev.matrix_fraction or {}).get(sid, (None, None))[0]
            if any(r.line_id == "by difference" and _f(r.mass_fraction) is None for r in cert.results):
                mw = None  # as the certificate's figure: no matrix, no ratio-basis mark
            for m in mark_items(ev.curves, cert.results, mw):
                items.append(_item_row(run_id, row, "mark", m["element"], m))
        res = (ev.cf or {}).get(sid)
        if res is not None:
            b = boltzmann_item(res)
            if b is not None:
                items.append(_item_row(run_id, row, "boltzmann", sid, b))
    for m in ev.maps or ():
        items.append(_item_row(run_id, sample_ids.get(m.get("sample_id", "")), "map", m["name"], m))
    return arrays, items


def store_evidence(conn, ev: AnalysisEvidence | None, run_id: int, sample_ids: dict[str, int], certificates) -> int:
    """Insert the evidence of one analysis in the caller's transaction; return the number of rows."""
    if ev is None:
        return 0
    arrays, items = evidence_rows(ev, run_id, sample_ids, certificates)
    if arrays:
        conn.execute(S.evidence_arrays.insert(), arrays)
    if items:
        conn.execute(S.evidence.insert(), items)
    return len(arrays) + len(items)


def read_array(conn, run_id: int, sample_row: int | None, name: str) -> np.ndarray | None:
    A = S.evidence_arrays
    cond = A.c.sample_row.is_(None) if sample_row is None else A.c.sample_row == sample_row
    row = conn.execute(sa.select(A).where(A.c.run_id == run_id, A.c.name == name, cond)
                       .order_by(A.c.id)).mappings().first()
    return None if row is None else unpack_array(row)


def read_items(conn, run_id: int, kind: str, sample_row: int | None = None, *, run_wide: bool = False) -> list[dict]:
    """Items of ``kind`` of a sample (or run-wide ones with ``run_wide``), each checked against its SHA-256."""
    E = S.evidence
    cond = E.c.sample_row.is_(None) if run_wide else E.c.sample_row == sample_row
    out = []
    for r in conn.execute(sa.select(E.c.data, E.c.sha256).where(E.c.run_id == run_id, E.c.kind == kind, cond)
                          .order_by(E.c.id)).all():
        if hashlib.sha256(r.data.encode("utf-8")).hexdigest() == r.sha256:
            out.append(json.loads(r.data))
    return out


__all__ = ["AnalysisEvidence", "boltzmann_item", "curve_item", "evidence_rows", "line_items", "map_item",
           "maps_evidence", "mark_items", "masked_below_lod", "pack_array", "read_array", "read_items",
           "store_evidence", "store_maps", "unpack_array"]
