"""Interactive plots for the review page (Bokeh; its JavaScript ships inside the Python package,
so the page works offline).

* control charts: the one :func:`compquant.record.charts.draw_chart` draws as PNG (same points,
  centre line, warning and action limits, broken tests circled), with zoom, pan and a tooltip;
* from the evidence an analysis stored (:mod:`compquant.record.evidence`): the sample's mean
  spectrum with the analytical lines marked and labelled without overlap
  (:func:`compquant.web.labels.stagger`), each line's window with its fit and residuals, the
  calibration curves with a residual panel, the sample marked and a log option, the
  (Saha-)Boltzmann plot and element maps with the nodes below the LOD left blank.

Optional: without Bokeh the page shows the certificate's static figures only.
"""

from __future__ import annotations

import math
from pathlib import Path

from compquant.web.labels import label_width_px, stagger, to_px

#: plot width the spectrum's labels are first laid out for (pixels; the page re-lays them out)
SPECTRUM_WIDTH_PX = 1000
COLOURS = ["#1f3b73", "#b03a2e", "#1e8449", "#7d3c98", "#b9770e", "#2e86c1"]


def available() -> bool:
    try:
        import bokeh  # noqa: F401
    except ImportError:
        return False
    return True


def bokehjs_file() -> Path:
    """The BokehJS bundle inside the installed bokeh package (a fixed file, never from a request)."""
    from bokeh.util.paths import bokehjs_path

    return Path(bokehjs_path()) / "js" / "bokeh.min.js"


def chart_item(chart) -> dict:
    """The chart as a Bokeh JSON item (``bokeh.embed.json_item``) for ``Bokeh.embed.embed_item``."""
    from bokeh.embed import json_item
    from bokeh.models import ColumnDataSource, HoverTool, Span, WheelZoomTool
    from bokeh.plotting import figure

    pts = chart.points
    viol = chart.violations or [[] for _ in pts]
    src = ColumnDataSource({
        "n": list(range(1, len(pts) + 1)), "value": [p["value"] for p in pts], "file": [p["file"] for p in pts],
        "at": [p["measured_at"] for p in pts], "tests": [" ".join(map(str, v)) or "none" for v in viol],
        "colour": ["#b0171f" if v else "#1f3b73" for v in viol], "size": [11 if v else 6 for v in viol],
    })
    lim = chart.limits
    title = f"{chart.title}  (limits: {lim.basis})" if lim else f"{chart.title}  (too few runs for limits)"
    fig = figure(title=title, height=300, sizing_mode="stretch_width", tools="pan,wheel_zoom,box_zoom,reset,save",
                 x_axis_label="run (in order of measurement)",
                 y_axis_label="mass fraction (g/g)" if chart.kind == "check" else "drift factor")
    fig.line("n", "value", source=src, color="#1f3b73")
    fig.scatter("n", "value", source=src, color="colour", size="size")
    if lim is not None:
        fig.add_layout(Span(location=lim.centre, dimension="width", line_color="black"))
        for v in lim.warning:
            fig.add_layout(Span(location=v, dimension="width", line_color="#c77c00", line_dash="dashed"))
        for v in lim.action:
            fig.add_layout(Span(location=v, dimension="width", line_color="#b0171f"))
    fig.toolbar.active_scroll = fig.select_one(WheelZoomTool)  # the mouse wheel zooms
    fig.add_tools(HoverTool(tooltips=[("run", "@file"), ("measured", "@at"), ("value", "@value{0.0000000}"),
                                      ("tests broken", "@tests")]))
    return json_item(fig)


def _ok(v) -> bool:
    return v is not None and isinstance(v, (int, float)) and math.isfinite(v)


def spectrum_labels(lines, x_start: float, x_end: float, width_px: float = SPECTRUM_WIDTH_PX,
                    top: float = 1.0) -> dict:
    """Label columns for the spectrum: x, text, row (0 = top) and y (data units above ``top``)."""
    xs = [float(w) for _, w in lines]
    texts = [str(t) for t, _ in lines]
    rows = stagger(to_px(xs, x_start, x_end, width_px), [label_width_px(t) for t in texts])
    n = max(rows, default=-1) + 1
    return {"x": xs, "text": texts, "row": rows, "y": [top * (1.02 + 0.075 * (n - 1 - r)) for r in rows]}


def spectrum_item(wavelength, intensity, lines) -> dict:
    """The mean spectrum, zoomable along the wavelength axis, with each analytical line dashed and
    labelled in staggered rows so no two labels overlap (re-laid out after a zoom by evidence.js)."""
    from bokeh.embed import json_item
    from bokeh.models import ColumnDataSource, LabelSet, Range1d, Segment, WheelZoomTool
    from bokeh.plotting import figure

    wl = [float(v) for v in wavelength]
    y = [float(v) if math.isfinite(float(v)) else float("nan") for v in intensity]
    finite = [v for v in y if math.isfinite(v)]
    top = max(finite) if finite else 1.0
    bottom = min(0.0, min(finite)) if finite else 0.0
    lab = spectrum_labels(lines, wl[0], wl[-1], SPECTRUM_WIDTH_PX, top)
    n_rows = max(lab["row"], default=-1) + 1
    fig = figure(title="Mean preprocessed spectrum of all the sample's shots (before shot QC), analytical lines dashed",
                 height=420,
                 sizing_mode="stretch_width", tools="xpan,xwheel_zoom,xbox_zoom,reset,save", name="spectrum",
                 x_axis_label="wavelength (nm)", y_axis_label="intensity (a.u.)",
                 x_range=Range1d(wl[0], wl[-1], name="spectrum-x"),
                 y_range=Range1d(bottom, top * (1.06 + 0.075 * n_rows)))
    fig.line(wl, y, color="#1f3b73", line_width=1)
    seg = ColumnDataSource({"x": lab["x"], "y0": [bottom] * len(lab["x"]), "y1": [top] * len(lab["x"])})
    fig.add_glyph(seg, Segment(x0="x", y0="y0", x1="x", y1="y1", line_color="#b03a2e", line_dash="dashed",
                               line_width=1))
    src = ColumnDataSource({**lab, "top": [top] * len(lab["x"])}, name="line-labels")
    fig.add_layout(LabelSet(x="x", y="y", text="text", source=src, text_font_size="11px", text_color="#b03a2e",
                            x_offset=1, text_baseline="bottom"))
    fig.toolbar.active_scroll = fig.select_one(WheelZoomTool)
    return json_item(fig)


def _line_panel(it: dict):
    from bokeh.layouts import column
    from bokeh.models import BoxAnnotation, Span
    from bokeh.plotting import figure

    x, y = it["x"], it["y"]
    flags = f"  [{it['flags'].replace(';', ' ')}]" if it.get("flags") else ""
    main = figure(title=f"{it['line_id']} ({it['mode']}){flags}", width=330, height=230,
                  tools="pan,wheel_zoom,box_zoom,reset", y_axis_label="intensity (a.u.)")
    main.title.text_font_size = "11px"
    lo, hi = it["window"]
    if it.get("model") is None:  # window mode: the integration window and the background side windows
        main.add_layout(BoxAnnotation(left=lo, right=hi, fill_color="#1f3b73", fill_alpha=0.10))
        for a, b in it.get("sides") or []:
            main.add_layout(BoxAnnotation(left=a, right=b, fill_color="#c77c00", fill_alpha=0.15))
    main.scatter(x, y, size=4, color="#1f3b73")
    if it.get("background"):
        main.line(x, it["background"], color="#888888", line_dash="dashed")
    if it.get("model"):
        main.line(x, it["model"], color="#b03a2e", line_width=1.5)
    if it.get("component") and it.get("model") and it["component"] != it["model"]:
        main.line(x, it["component"], color="#2ca02c", line_width=2, line_dash="dashed")
    main.add_layout(Span(location=it["wavelength_nm"], dimension="height", line_color="#b03a2e",
                         line_dash="dotted"))
    if it.get("residual"):
        res = figure(width=330, height=110, x_range=main.x_range, tools="", x_axis_label="wavelength (nm)",
                     y_axis_label="residual")
        res.scatter(x, it["residual"], size=3, color="#b03a2e")
        res.add_layout(Span(location=0, dimension="width", line_color="#444444"))
        return column(main, res)
    main.xaxis.axis_label = "wavelength (nm)"
    return column(main)


def lines_item(items: list[dict]) -> dict:
    """Every line's window: the mean spectrum there, the integration window and background side
    windows, or the fitted profile with its residuals below."""
    from bokeh.embed import json_item
    from bokeh.layouts import gridplot

    panels = [_line_panel(it) for it in items]
    return json_item(gridplot(panels, ncols=3, toolbar_location=None))


def _scaled(curve: dict) -> tuple[float, str]:
    ratio = curve["basis"] == "ratio"
    return (1.0, f"{curve['element']} / matrix mass-fraction ratio") if ratio else (
        100.0, f"{curve['element']} mass fraction (%)")


def curve_item(curve: dict, mark: dict | None, log: bool = False) -> dict:
    """A calibration curve (standards with k = 2 error bars, fit, sample, LOD) over its residual panel;
    ``log``: both axes logarithmic, so the low end is as readable as the top (non-positive values left out)."""
    from bokeh.embed import json_item
    from bokeh.layouts import column
    from bokeh.models import ColumnDataSource, HoverTool, Span, Whisker
    from bokeh.plotting import figure

    f, xlabel = _scaled(curve)
    ylabel = curve["line_id"] + (f" / {curve['internal_standard']}" if curve.get("internal_standard") else "")
    kind = "log" if log else "linear"

    def keep(x, y):
        return _ok(x) and _ok(y) and (not log or (x > 0 and y > 0))

    std = [s for s in curve["standards"] if keep(s["x"], s["y"])]
    cols = {"x": [s["x"] * f for s in std], "y": [s["y"] for s in std], "id": [s["id"] for s in std],
            "xl": [s["x"] * f - 2 * (s["u_x"] or 0) * f for s in std],
            "xh": [s["x"] * f + 2 * (s["u_x"] or 0) * f for s in std],
            "yl": [s["y"] - 2 * (s["u_y"] or 0) for s in std], "yh": [s["y"] + 2 * (s["u_y"] or 0) for s in std],
            "res": [s["residual"] if _ok(s["residual"]) else float("nan") for s in std],
            "used": ["used" if s["used"] else f"not used: {s['reason']}" for s in std],
            "colour": ["#1f3b73" if s["used"] else "#aaaaaa" for s in std]}
    if log:  # an error bar reaching zero or below is cut at a tenth of the point on a log axis
        cols["xl"] = [max(a, x / 10) for a, x in zip(cols["xl"], cols["x"])]
        cols["yl"] = [max(a, y / 10) for a, y in zip(cols["yl"], cols["y"])]
    src = ColumnDataSource(cols)
    title = f"Calibration curve {curve['element']} ({curve['model']}), {kind} axes"
    top = figure(title=title, height=330, width=520, x_axis_type=kind, y_axis_type=kind,
                 tools="pan,wheel_zoom,box_zoom,reset,save", y_axis_label=ylabel, name=f"curve-{kind}")
    gx = [x * f for x, y in zip(curve["grid_x"], curve["grid_y"]) if keep(x, y)]
    gy = [y for x, y in zip(curve["grid_x"], curve["grid_y"]) if keep(x, y)]
    if gx:
        top.line(gx, gy, color="#444444", legend_label="fit")
    top.add_layout(Whisker(source=src, base="x", lower="yl", upper="yh", dimension="height", line_color="#7f8fa6"))
    top.add_layout(Whisker(source=src, base="y", lower="xl", upper="xh", dimension="width", line_color="#7f8fa6"))
    pts = top.scatter("x", "y", source=src, size=7, color="colour", legend_label="standards (U, k = 2)")
    top.add_tools(HoverTool(renderers=[pts], tooltips=[("standard", "@id"), ("x", "@x"), ("response", "@y"),
                                                       ("residual", "@res"), ("", "@used")]))
    ys = [v for v in cols["y"] + gy if _ok(v)]
    if _ok(curve.get("lod_x")) and (not log or curve["lod_x"] > 0) and ys:
        top.line([curve["lod_x"] * f] * 2, [min(ys), max(ys)], color="#c77c00", line_dash="dashed",
                 legend_label="LOD")
    if mark and keep(mark.get("x"), mark.get("y")):
        top.scatter([mark["x"] * f], [mark["y"]], marker="diamond", size=13, color="#b03a2e",
                    legend_label="this sample")
    top.legend.location = "bottom_right"
    top.legend.label_text_font_size = "10px"
    top.legend.background_fill_alpha = 0.7
    res = figure(height=150, width=520, x_range=top.x_range, x_axis_type=kind, tools="",
                 x_axis_label=xlabel, y_axis_label="residual (response)")
    rs = ColumnDataSource({k: [v for v, r in zip(cols[k], cols["res"]) if _ok(r)] for k in ("x", "res", "colour")})
    res.scatter("x", "res", source=rs, size=6, color="colour")
    res.add_layout(Span(location=0, dimension="width", line_color="#444444"))
    if _ok(curve.get("residual_sd")):
        for v in (-2 * curve["residual_sd"], 2 * curve["residual_sd"]):
            res.add_layout(Span(location=v, dimension="width", line_color="#999999", line_dash="dotted"))
    return json_item(column(top, res))


def boltzmann_item(b: dict) -> dict:
    """The (Saha-)Boltzmann plot: ln(I lambda / (g_k A_ki)) against the upper level energy, one colour
    per species, fitted lines, tooltips naming each line."""
    from bokeh.embed import json_item
    from bokeh.models import ColumnDataSource, HoverTool, Whisker
    from bokeh.plotting import figure

    saha = b["fit_mode"] == "saha-boltzmann"
    t = b.get("temperature_k")
    fig = figure(title=f"{'Saha-' if saha else ''}Boltzmann plot" + (f", T = {t:.0f} K" if _ok(t) else ""),
                 height=380, width=640, tools="pan,wheel_zoom,box_zoom,reset,save", name="boltzmann",
                 x_axis_label="upper level energy (eV)" + (", ions shifted by the ionisation energy" if saha else ""),
                 y_axis_label="ln(I·λ / (g_k·A_ki))" + (" (ions Saha-corrected)" if saha else ""))
    species = list(dict.fromkeys(p["species"] for p in b["points"]))
    for i, sp in enumerate(species):
        pts = [p for p in b["points"] if p["species"] == sp]
        c = COLOURS[i % len(COLOURS)]
        src = ColumnDataSource({"x": [p["x_ev"] for p in pts], "y": [p["y"] for p in pts],
                                "lo": [p["y"] - (p["u"] or 0) for p in pts],
                                "hi": [p["y"] + (p["u"] or 0) for p in pts], "line": [p["line_id"] for p in pts]})
        fig.add_layout(Whisker(source=src, base="x", lower="lo", upper="hi", line_color=c))
        r = fig.scatter("x", "y", source=src, size=7, color=c, legend_label=sp or "lines")
        fig.add_tools(HoverTool(renderers=[r], tooltips=[("line", "@line"), ("E_k (eV)", "@x"), ("ordinate", "@y")]))
        fit = sorted((p["x_ev"], p["y_fit"]) for p in pts if _ok(p["y_fit"]))
        if len(fit) >= 2:
            fig.line([a for a, _ in fit], [v for _, v in fit], color=c)
    fig.legend.label_text_font_size = "10px"
    return json_item(fig)


def map_item(m: dict) -> dict:
    """An element map with every node below the LOD blank (masked), a colour bar in the map's unit."""
    import numpy as np
    from bokeh.embed import json_item
    from bokeh.models import ColorBar, LinearColorMapper
    from bokeh.plotting import figure

    from compquant.record.evidence import masked_below_lod

    v = masked_below_lod(np.array([[np.nan if a is None else a for a in r] for r in m["values"]], float), m["lod"])
    x, y = m["x"], m["y"]
    dx = (x[-1] - x[0]) / max(len(x) - 1, 1) if len(x) > 1 else 1.0
    dy = (y[-1] - y[0]) / max(len(y) - 1, 1) if len(y) > 1 else 1.0
    ok = v[np.isfinite(v)]
    mapper = LinearColorMapper(palette="Viridis256", low=float(ok.min()) if ok.size else 0.0,
                               high=float(ok.max()) if ok.size else 1.0, nan_color=(0, 0, 0, 0))
    lod = f"; blank nodes: below the LOD ({m['lod']:.3g} {m['unit']})" if _ok(m.get("lod")) else ""
    fig = figure(title=f"{m['name']}{lod}", height=380, width=480, tools="pan,wheel_zoom,box_zoom,reset,save",
                 x_axis_label="x", y_axis_label="y", match_aspect=True, name="map")
    fig.image(image=[np.where(np.isfinite(v), v, np.nan)], x=x[0] - dx / 2, y=y[0] - dy / 2, dw=dx * len(x),
              dh=dy * len(y), color_mapper=mapper)
    fig.add_layout(ColorBar(color_mapper=mapper, title=m["unit"]), "right")
    return json_item(fig)


__all__ = ["available", "bokehjs_file", "boltzmann_item", "chart_item", "curve_item", "lines_item", "map_item",
           "spectrum_item", "spectrum_labels"]
