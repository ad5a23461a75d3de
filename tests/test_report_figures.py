"""Certificate figures: valid, repeatable PNGs from plain arrays."""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy import constants

from compquant.errors import InputError
from compquant.report.figures import boltzmann_png, calibration_png, spectrum_png
from compquant.report.jsonform import read_certificate_json

PNG = b"\x89PNG\r\n\x1a\n"


def _size(png: bytes) -> tuple[int, int]:
    # PNG IHDR: width and height as big-endian 32-bit integers at bytes 16-24 (PNG specification)
    return int.from_bytes(png[16:20], "big"), int.from_bytes(png[20:24], "big")


def test_spectrum_png_is_repeatable():
    wl = np.linspace(300, 400, 500)
    y = np.exp(-0.5 * ((wl - 324.754) / 0.1) ** 2)
    a = spectrum_png(wl, y, [("Cu I 324.754", 324.754)], title="t")
    b = spectrum_png(wl, y, [("Cu I 324.754", 324.754)], title="t")
    assert a.startswith(PNG) and a == b
    w, h = _size(a)
    assert w > h > 200
    with pytest.raises(ValueError):
        spectrum_png(wl, y[:-1])


def test_calibration_png():
    png = calibration_png(
        [1, 2, 3],
        [0.1, 0.2, 0.3],
        fit_x=[0, 4],
        fit_y=[0, 0.4],
        y_err=[0.01] * 3,
        labels=["S1", "S2", "S3"],
        sample_x=2.5,
        sample_y=0.25,
        sample_xerr=0.1,
    )
    assert png.startswith(PNG)
    with pytest.raises(ValueError):
        calibration_png([1, 2], [1])


def test_boltzmann_png_with_a_temperature_from_codata():
    # slope = -1 / (k_B T), k_B from CODATA via scipy.constants (eV/K)
    kB = constants.physical_constants["Boltzmann constant in eV/K"][0]
    T = 9000.0
    E = np.array([3.8, 4.5, 5.1, 6.0])
    y = -E / (kB * T) + 20
    png = boltzmann_png(E, y, ["Fe I"] * 4, fits={"Fe I": (-1 / (kB * T), 20.0)}, title="T = 9000 K")
    assert png.startswith(PNG)
    with pytest.raises(ValueError):
        boltzmann_png(E, y[:2])


def test_read_certificate_json_checks_schema(tmp_path):
    p = tmp_path / "c.json"
    p.write_text(json.dumps({"schema": "compquant-certificate", "schema_version": 99}))
    with pytest.raises(InputError, match="version 99"):
        read_certificate_json(p)
    p.write_text("{")
    with pytest.raises(InputError, match="not a JSON"):
        read_certificate_json(p)
    p.write_text(json.dumps({"schema": "other"}))
    with pytest.raises(InputError, match="not a compquant certificate"):
        read_certificate_json(p)


def test_docs_safety_page_matches_the_code():
    from pathlib import Path

    from compquant.report.safety import safety_markdown

    page = (Path(__file__).resolve().parents[1] / "docs" / "safety.md").read_text("utf-8")
    assert page.split("\n", 1)[1] == safety_markdown(1)


# ---- one figure function per figure, for the certificate and the commands alike (issue 19) ----


def _curve(basis="intensity"):
    """A duck-typed straight-line curve y = 2 x + 0.01 with four standards (invented numbers)."""
    from types import SimpleNamespace

    std = [
        {"standard_id": f"S{i}", "x": x, "u_x": ux, "y": 2 * x + 0.01, "u_y": uy, "used": used}
        for i, (x, ux, uy, used) in enumerate(
            [(0.01, 0.0002, 0.001, True), (0.02, 0.0003, 0.002, True), (0.04, 0.0004, 0.003, True),
             (0.03, 0.0003, 0.002, False)]
        )
    ]

    def band(x, level=0.95):
        x = np.asarray(x, float)
        return 2 * x + 0.01, np.full_like(x, 0.004)

    return SimpleNamespace(
        element="Pb", line_id="Pb I 405.781", internal_standard="", model="linear", basis=basis,
        standards=std, response=lambda x: 2 * np.atleast_1d(np.asarray(x, float)) + 0.01, band=band,
    )


def _bars(ax, label_start):
    """Half-lengths of the x and y error bars of the errorbar container whose label starts so."""
    cont = next(c for c in ax.containers if str(c.get_label()).startswith(label_start))
    out = {0: np.array([]), 1: np.array([])}
    for col in cont.lines[2]:  # one LineCollection per axis that has bars
        segs = col.get_segments()
        axis = 0 if segs[0][0][1] == segs[0][1][1] else 1  # horizontal bars: x error bars
        out[axis] = np.array([abs(s[1][axis] - s[0][axis]) / 2 for s in segs])
    return out[0], out[1]


@pytest.mark.parametrize(
    "options",
    [
        {"sample_x": 0.025},  # as on the certificate
        {"unknowns": [("U-1", 0.025, 0.0005, 0.06)], "band_level": 0.95, "show_excluded": True},  # as the CLI
    ],
)
def test_calibration_error_bars_are_expanded_uncertainties_with_k_2(options):
    # certificates report U = k·u with k = 2 (JCGM 100:2008, 6.2.1 and 6.3.3, from memory): the
    # curve's error bars are U, the same whichever caller draws it, and the legend says so
    from compquant.calibrate.plots import curve_figure

    c = _curve()
    ax = curve_figure(c, **options).axes[0]
    used = [s for s in c.standards if s["used"]]
    xh, yh = _bars(ax, "standards")
    assert np.allclose(xh, [2 * s["u_x"] * 100 for s in used])  # x in %, mass fraction × 100
    assert np.allclose(yh, [2 * s["u_y"] for s in used])
    assert "k = 2" in " ".join(t.get_text() for t in ax.get_legend().get_texts())


def test_certificate_and_command_draw_the_calibration_curve_with_one_function(tmp_path):
    from compquant.calibrate.plots import curve_png, plot_curve
    from compquant.report.assemble import curve_figure as certificate_curve
    from compquant.report.certificate import ResultRow

    c = _curve()
    row = ResultRow("Pb", 0.025, U=0.001)
    assert certificate_curve(c, row, None) == curve_png(c, sample_x=0.025)
    title = "Pb: R² = 0.99900, n = 3, LOD = 0.0001 g/g"
    c.r2, c.lod = 0.999, 0.0001
    p = plot_curve(c, tmp_path / "pb.png", unknowns=[("U-1", 0.025, 0.0005, 0.06)])
    assert p.read_bytes() == curve_png(
        c, unknowns=[("U-1", 0.025, 0.0005, 0.06)], band_level=0.95, show_excluded=True, title=title
    )


def test_saha_boltzmann_plot_of_a_result_states_the_temperature_of_its_slope():
    # T = -1 / (k_B · slope), k_B from CODATA via scipy.constants (eV/K); error bars are the
    # ordinates' standard uncertainties u (k = 1)
    from types import SimpleNamespace

    from compquant.cflibs.plots import saha_boltzmann_figure, saha_boltzmann_png
    from compquant.report.assemble import boltzmann_figure

    kB = constants.physical_constants["Boltzmann constant in eV/K"][0]
    T, m = 9000.0, -1 / (constants.physical_constants["Boltzmann constant in eV/K"][0] * 9000.0)
    xs = [3.8, 4.5, 5.1, 6.0]
    lines = [
        {"x_ev": x, "y": m * x + 1, "y_fit": m * x + 1, "u_ordinate": 0.1 + 0.05 * i, "species": "Fe I",
         "line_id": f"Fe I {400 + i}.123"}
        for i, x in enumerate(xs)
    ]
    res = SimpleNamespace(lines=lines, fit_mode="boltzmann", temperature_k=T, u_temperature_k=250.0,
                          electron_density_cm3=1e17, ne_method="fixed", sample_id="X-1", fit={"slope_per_ev": m})
    assert boltzmann_figure(res) == saha_boltzmann_png(res)  # the certificate draws the same figure
    ax = saha_boltzmann_figure(res, detailed=True).axes[0]
    _, yh = _bars(ax, "Fe I")
    assert np.allclose(yh, [ln["u_ordinate"] for ln in lines])
    texts = " ".join(t.get_text() for t in ax.texts)
    assert f"T = {-1 / (kB * m):.0f} K" in texts and "T = 9000 K" in texts


def test_crowded_standard_labels_do_not_overlap():
    """Standards crowded at the low end of a curve get labels that do not overlap (their drawn
    text boxes, measured by matplotlib after drawing, are disjoint); one that cannot be placed is
    left out and counted on the figure.  Common practice: a label printed over another is unreadable."""
    import numpy as np

    from compquant.plotting import calibration_figure

    x = np.array([0.0005, 0.001, 0.0015, 0.002, 0.0025, 0.025, 0.064, 0.108])
    y = 20 * x
    names = [f"HRM-CA-{100 + i}" for i in range(x.size)]
    fig = calibration_figure(x, y, fit_x=x, fit_y=y, labels=names, x_err=0 * x, y_err=0.01 * y)
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    r = canvas.get_renderer()
    ax = fig.axes[0]
    texts = [t for t in ax.texts if t.get_text() in names]
    boxes = [t.get_window_extent(r) for t in texts]
    for i in range(len(boxes)):
        for j in range(i + 1, len(boxes)):
            assert not boxes[i].overlaps(boxes[j]), (texts[i].get_text(), texts[j].get_text())
    left = [t for t in ax.texts if "left out" in t.get_text()]
    assert len(texts) + (int(left[0].get_text().split()[0]) if left else 0) == len(names)
    assert len(texts) >= 5  # the cluster is spread over rows, not dropped


def _drawn_label_boxes(fig, names):
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    r = canvas.get_renderer()
    ax = fig.axes[0]
    texts = [t for t in ax.texts if t.get_text() in names]
    return ax, texts, [t.get_window_extent(r) for t in texts], r


@pytest.mark.parametrize("case", ["demo", "cluster", "dense", "capped"])
def test_crowded_spectrum_labels_do_not_overlap(case):
    """Line labels on the certificate's spectrum: the drawn text boxes (measured by matplotlib's
    renderer after drawing) are pairwise disjoint and none reaches below the axes; labels that
    cannot be placed are left out and counted on the figure.  Common practice: a label printed over
    another is unreadable.  Wavelengths: Al I 394.401, Mn I 403.075,
    403.307 and 403.449, Pb I 405.781
    (NIST ASD lines, from memory of the NIST Atomic Spectra Database)."""
    from compquant.plotting import spectrum_figure

    wl = np.linspace(220.0, 640.0, 8000)
    y = 1000 * np.exp(-0.5 * ((wl - 324.75) / 0.05) ** 2) + 10
    lines = {
        "demo": [("Sn I 283.999", 283.999), ("Ni I 349.296", 349.296), ("Al I 394.401", 394.401),
                 ("Mn I 403.075", 403.075), ("Pb I 405.781", 405.781), ("Cu I 427.511", 427.511),
                 ("Fe I 438.354", 438.354), ("Zn I 468.014", 468.014)],
        # four labels within 3 nm: the old fixed 3-level rule put the fourth (Pb) over the first (Mn)
        "cluster": [("Al I 394.401", 394.401), ("Mn I 403.075", 403.075), ("Mn I 403.307", 403.307),
                    ("Mn I 403.449", 403.449), ("Pb I 405.781", 405.781)],
        "dense": [(f"X I {w:.3f}", w) for w in np.linspace(630.0, 632.0, 20)],  # by the note, bottom right
        "capped": [(f"X I {w:.3f}", w) for w in np.linspace(630.0, 632.0, 8)],  # max_labels = 4 below
    }[case]
    names = [n for n, _ in lines]
    fig = spectrum_figure(wl, y, lines, **({"max_labels": 4} if case == "capped" else {}))
    ax, texts, boxes, r = _drawn_label_boxes(fig, names)
    for i in range(len(boxes)):
        for j in range(i + 1, len(boxes)):
            assert not boxes[i].overlaps(boxes[j]), (texts[i].get_text(), texts[j].get_text())
    axbox = ax.get_window_extent(r)
    assert all(b.y0 >= axbox.y0 for b in boxes)
    left = [t for t in ax.texts if "left out" in t.get_text()]
    assert len(texts) + (int(left[0].get_text().split()[0]) if left else 0) == len(names)
    for t in left:  # the note is not printed over a label either
        assert not any(t.get_window_extent(r).overlaps(b) for b in boxes)
    if case in ("demo", "cluster"):
        assert len(texts) == len(names) and not left  # a few crowded lines all get a label
    else:
        assert len(texts) >= 3 and left  # twenty in 2 nm: as many rows as fit the axes, the rest counted


@pytest.mark.parametrize("figure", ["boltzmann", "calibration"])
def test_legend_covers_no_point_or_label(figure):
    """Points in every corner of the axes (where matplotlib's "best" legend place must cover
    some): the drawn legend box overlaps no point (marker of 4 pt) and no label, measured after
    drawing with the saved figure's margins.  Common practice: a legend over a point hides a value."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    from compquant.plotting import boltzmann_figure, calibration_figure, figure_png

    g = np.linspace(0.0, 1.0, 7)
    gx, gy = np.meshgrid(g, g)
    x, y = 3.0 + 6.0 * gx.ravel(), -14.0 + 6.0 * gy.ravel()
    names = [f"{v:.1f}" for v in x]
    if figure == "boltzmann":
        sp = ["Cu I", "Cu II", "Zn I", "Zn II"] * 12 + ["Cu I"]
        fig = boltzmann_figure(x, y, sp, yerr=0.1 + 0 * x, point_labels=names,
                               species_labels={s: f"{s}  T = 10000 ± 300 K" for s in sp})
    else:
        fig = calibration_figure(x, y, fit_x=x, fit_y=y, labels=names, x_err=0 * x, y_err=0.1 + 0 * x)
    figure_png(fig)  # the saved figure's margins
    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    r = canvas.get_renderer()
    ax = fig.axes[0]
    legend = ax.get_legend().get_window_extent(r)
    px = ax.transData.transform(np.column_stack([x, y]))
    rad = 2.0 * fig.dpi / 72.0
    inside = ax.get_window_extent(r)
    for (u, v) in px:
        assert inside.y0 - 1 <= v <= inside.y1 + 1  # every point still drawn inside the axes
        assert not (legend.x0 - rad < u < legend.x1 + rad and legend.y0 - rad < v < legend.y1 + rad)
    for t in ax.texts:
        if t.get_text() in names:
            assert not legend.overlaps(t.get_window_extent(r)), t.get_text()
