"""Interactive control charts for the review page (Bokeh; its JavaScript ships inside the Python
package, so the page works offline).

The chart is the one :func:`compquant.record.charts.draw_chart` draws as PNG (same points, centre
line, warning and action limits, broken tests circled), with zoom, pan and a tooltip naming each
point's run file, time and broken tests.  Optional: without Bokeh the page shows the PNG only.
"""

from __future__ import annotations

from pathlib import Path


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


__all__ = ["available", "bokehjs_file", "chart_item"]
