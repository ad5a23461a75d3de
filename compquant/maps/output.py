"""Writing element maps: one HDF5 file with axes and units, and a PNG per map.

HDF5 layout (``maps.h5``), format ``compquant-maps`` version 1::

    /                      attrs: format, format_version, created, writer, run, run_sha256,
                                  method_id, quantity, calibration (when used)
    /<sample>/             attrs: sample_id (the original id), role, dx_mm, dy_mm
    /<sample>/x_mm         (nx,) float64, units "mm"  -- node x positions (dimension scale)
    /<sample>/y_mm         (ny,) float64, units "mm"  -- node y positions (dimension scale)
    /<sample>/shots        (ny, nx) int64   -- shots recorded on each node
    /<sample>/<element>    (ny, nx) float64 -- attrs: line_id, quantity, units;
                                               row j is y_mm[j], column i is x_mm[i];
                                               NaN where a node has no accepted shot

Group and file names come from sample ids and element symbols only through
:func:`compquant.fileio.safe_filename`.
"""

from __future__ import annotations

import datetime as _dt
import os
from dataclasses import dataclass, field
from pathlib import Path

import h5py
import numpy as np

from compquant import __version__
from compquant.fileio import atomic_path, safe_filename
from compquant.interchange import add_nxdata
from compquant.maps.grid import RasterGrid

MAPS_FORMAT = "compquant-maps"
MAPS_FORMAT_VERSION = 1


@dataclass
class ElementMap:
    """One map: ``values`` (ny, nx) of ``quantity`` in ``units`` from line ``line_id``."""

    element: str
    line_id: str
    quantity: str  # "intensity" or "mass_fraction"
    units: str
    values: np.ndarray


@dataclass
class SampleMaps:
    """All maps of one rastered sample on its grid."""

    sample_id: str
    role: str
    grid: RasterGrid
    shots: np.ndarray  # (ny, nx) shots per node
    maps: list[ElementMap] = field(default_factory=list)


def _nice_length(span_mm: float) -> float:
    """A round scale-bar length (1, 2 or 5 x 10^k mm) near a fifth of ``span_mm``."""
    target = max(span_mm / 5.0, 1e-6)
    k = np.floor(np.log10(target))
    for m in (5.0, 2.0, 1.0):
        if m * 10**k <= target:
            return float(m * 10**k)
    return float(10**k)


def _fmt_mm(length: float) -> str:
    return f"{length * 1000:g} µm" if length < 1 else f"{length:g} mm"


def write_maps_h5(path: str | os.PathLike, samples: list[SampleMaps], attrs: dict) -> Path:
    """Write every sample's maps into one HDF5 file atomically; return its path."""
    path = Path(path)
    with atomic_path(path) as tmp, h5py.File(tmp, "w") as f:
        f.attrs["format"] = MAPS_FORMAT
        f.attrs["format_version"] = MAPS_FORMAT_VERSION
        f.attrs["created"] = _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()
        f.attrs["writer"] = f"compquant {__version__}"
        for k, v in attrs.items():
            f.attrs[k] = "" if v is None else v
        used = set()
        for sm in samples:
            name = safe_filename(sm.sample_id)
            base, n = name, 1
            while name in used:
                n += 1
                name = f"{base}-{n}"
            used.add(name)
            g = f.create_group(name)
            g.attrs["sample_id"] = sm.sample_id
            g.attrs["role"] = sm.role
            g.attrs["dx_mm"] = sm.grid.dx_mm
            g.attrs["dy_mm"] = sm.grid.dy_mm
            xs = g.create_dataset("x_mm", data=sm.grid.x_mm)
            ys = g.create_dataset("y_mm", data=sm.grid.y_mm)
            for ds in (xs, ys):
                ds.attrs["units"] = "mm"
                ds.make_scale(ds.name.rsplit("/", 1)[-1])
            sh = g.create_dataset("shots", data=sm.shots.astype(np.int64))
            datasets = [sh]
            for em in sm.maps:
                d = g.create_dataset(safe_filename(em.element), data=em.values.astype(np.float64))
                d.attrs["element"] = em.element
                d.attrs["line_id"] = em.line_id
                d.attrs["quantity"] = em.quantity
                d.attrs["units"] = em.units
                datasets.append(d)
            for d in datasets:
                d.dims[0].attach_scale(ys)
                d.dims[1].attach_scale(xs)
                d.dims[0].label = "y"
                d.dims[1].label = "x"
            # NeXus: each sample group an NXentry whose NXdata shows the first map on its mm axes
            g.attrs["NX_class"] = "NXentry"
            names = [d.name.rsplit("/", 1)[-1] for d in datasets]  # shots first, then the maps
            signal = names[1] if len(names) > 1 else names[0]
            add_nxdata(g, signal, ["y_mm", "x_mm"], auxiliary=[n for n in names if n != signal])
            if "default" not in f.attrs:
                f.attrs["default"] = name
    return path


def write_map_png(path: str | os.PathLike, sm: SampleMaps, em: ElementMap, *, dpi: int = 120) -> Path:
    """PNG of one map: node values with a colour bar (quantity and units) and a scale bar in mm."""
    from mpl_toolkits.axes_grid1.anchored_artists import AnchoredSizeBar

    from compquant.plotting import pyplot

    plt = pyplot()
    g = sm.grid
    values = em.values
    label = em.units
    if em.quantity == "mass_fraction":
        values = values * 100.0
        label = "%"
    extent = (
        g.x0_mm - g.dx_mm / 2,
        g.x0_mm + g.dx_mm * (g.nx - 0.5),
        g.y0_mm - g.dy_mm / 2,
        g.y0_mm + g.dy_mm * (g.ny - 0.5),
    )
    width = extent[1] - extent[0]
    height = extent[3] - extent[2]
    aspect = height / width if width > 0 else 1.0
    fig, ax = plt.subplots(figsize=(6.0, max(2.5, min(8.0, 5.0 * aspect + 1.0))))
    try:
        masked = np.ma.masked_invalid(values)
        im = ax.imshow(masked, origin="lower", extent=extent, interpolation="nearest", cmap="viridis", aspect="equal")
        what = "mass fraction" if em.quantity == "mass_fraction" else "line intensity"
        cb = fig.colorbar(im, ax=ax, shrink=0.85)
        cb.set_label(f"{em.element} {what} ({label})", fontsize=9)
        ax.set_xlabel("x (mm)")
        ax.set_ylabel("y (mm)")
        ax.set_title(f"{sm.sample_id}: {em.element} ({em.line_id})", fontsize=10)
        bar = _nice_length(width)
        ax.add_artist(
            AnchoredSizeBar(
                ax.transData,
                bar,
                _fmt_mm(bar),
                "lower right",
                pad=0.4,
                color="white",
                frameon=True,
                size_vertical=height / 60.0,
                fontproperties={"size": 8},
            )
        )
        for artist in ax.artists:
            patch = getattr(artist, "patch", None)
            if patch is not None:
                patch.set_facecolor("black")
                patch.set_alpha(0.5)
        fig.tight_layout()
        path = Path(path)
        with atomic_path(path) as tmp:
            fig.savefig(tmp, format="png", dpi=dpi)
    finally:
        plt.close(fig)
    return path


def read_maps_h5(path: str | os.PathLike) -> dict:
    """Read a maps file back: ``{sample_id: {"x_mm", "y_mm", "shots", element: (values, attrs)}}``."""
    out: dict = {}
    with h5py.File(path, "r") as f:
        for name, g in f.items():
            d = {"x_mm": g["x_mm"][()], "y_mm": g["y_mm"][()], "shots": g["shots"][()]}
            for key, ds in g.items():
                if key in ("x_mm", "y_mm", "shots") or not isinstance(ds, h5py.Dataset):
                    continue  # the axes, and the NXdata group of links (interchange.add_nxdata)
                d[str(ds.attrs["element"])] = (
                    ds[()],
                    {
                        k: (v.decode() if isinstance(v, bytes) else v)
                        for k, v in ds.attrs.items()
                        if k not in ("DIMENSION_LIST",)
                    },
                )
            sid = g.attrs.get("sample_id", name)
            out[sid.decode() if isinstance(sid, bytes) else str(sid)] = d
    return out


__all__ = [
    "MAPS_FORMAT",
    "MAPS_FORMAT_VERSION",
    "ElementMap",
    "SampleMaps",
    "read_maps_h5",
    "write_map_png",
    "write_maps_h5",
]
