"""Raster grid, streaming accumulator, map files and the rastered-sample geometry."""

from __future__ import annotations

import h5py
import numpy as np
import pandas as pd
import pytest

from compquant.errors import DataQualityError, ResourceLimitError
from compquant.maps.grid import GridAccumulator, RasterGrid
from compquant.maps.output import ElementMap, SampleMaps, read_maps_h5, write_map_png, write_maps_h5
from compquant.simulate.raster import DiffusionProfile, Inclusion, RasterSample


def _serpentine(nx, ny, step, jitter, rng):
    j, i = np.divmod(np.arange(nx * ny), nx)
    i = np.where(j % 2 == 1, nx - 1 - i, i)
    x = 2.0 + step * i + rng.uniform(-jitter, jitter, i.size)
    y = -1.0 + step * j + rng.uniform(-jitter, jitter, j.size)
    return x, y, i, j


def test_grid_inferred_from_jittered_serpentine_scan():
    rng = np.random.default_rng(3)
    x, y, i, j = _serpentine(13, 7, 0.05, 0.01, rng)
    g = RasterGrid.from_positions(x, y)
    # the jitter is 0.01 mm; distinct coordinates differ by ~0.05 mm or by < 0.02 mm
    assert (g.nx, g.ny) == (13, 7)
    nodes = g.node_index(x, y)
    assert np.array_equal(nodes, j * 13 + i)


def test_grid_given_step_and_limits():
    x = np.array([0.0, 0.1, 0.2, np.nan])
    y = np.array([0.0, 0.0, 0.1, np.nan])
    g = RasterGrid.from_positions(x, y, step_mm=0.1)
    assert (g.nx, g.ny) == (3, 2)
    assert g.node_index(x, y)[-1] == -1
    with pytest.raises(DataQualityError):
        RasterGrid.from_positions([1.0, 1.0], [2.0, 2.0])
    with pytest.raises(ResourceLimitError):
        RasterGrid.from_positions([0.0, 100.0], [0.0, 100.0], step_mm=0.001)


def test_accumulator_equals_pandas_groupby_mean():
    rng = np.random.default_rng(5)
    x, y, i, j = _serpentine(6, 4, 0.1, 0.0, rng)
    x, y = np.repeat(x, 3), np.repeat(y, 3)  # three shots per spot
    vals = rng.normal(10, 2, size=(x.size, 2))
    vals[rng.random(x.size) < 0.2, 1] = np.nan  # rejected shots
    g = RasterGrid.from_positions(x, y)
    acc = GridAccumulator(g, 2)
    nodes = g.node_index(x, y)
    for a in range(0, x.size, 7):  # streamed in chunks of 7 shots
        acc.add(nodes[a : a + 7], vals[a : a + 7])
    m = acc.mean()
    # reference: pandas groupby mean (skips NaN), an outside implementation
    ref = pd.DataFrame({"n": nodes, "a": vals[:, 0], "b": vals[:, 1]}).groupby("n").mean()
    for q, col in enumerate(["a", "b"]):
        flat = m[q].reshape(-1)
        np.testing.assert_allclose(flat[ref.index.to_numpy()], ref[col].to_numpy(), rtol=1e-12)
    assert acc.count_map().sum() == x.size


def test_diffusion_profile_against_tabulated_erfc():
    # erfc(1) = 0.1572992070 (Abramowitz & Stegun, Handbook of Mathematical Functions, Table 7.1;
    # from memory of that table)
    p = DiffusionProfile("Zn", surface_fraction=0.05, edge_mm=1.0, length_mm=0.4)
    c = p.fraction(0.30, np.array([1.0, 1.4, 9.0]), np.zeros(3))
    assert c[0] == pytest.approx(0.05)
    assert c[1] == pytest.approx(0.30 + (0.05 - 0.30) * 0.1572992070, rel=1e-9)
    assert c[2] == pytest.approx(0.30, abs=1e-12)


def test_raster_sample_composition_sums_to_one():
    s = RasterSample(
        "SCAN",
        {"Cu": 0.7, "Zn": 0.3},
        "Cu",
        nx=20,
        ny=10,
        step_mm=0.1,
        serpentine=True,
        inclusions=[Inclusion(1.0, 0.5, 0.25, {"Cu": 0.4, "Zn": 0.6})],
        profiles=[DiffusionProfile("Zn", 0.1, 0.0, 0.3)],
    )
    x, y = s.shot_positions()
    comp = s.composition_at(x, y)
    total = sum(comp.values())
    np.testing.assert_allclose(total, 1.0, atol=1e-12)
    inside = (x - 1.0) ** 2 + (y - 0.5) ** 2 <= 0.25**2
    assert np.all(comp["Zn"][inside] == 0.6)
    assert comp["Zn"][~inside].min() == pytest.approx(0.1)


def test_map_files_have_axes_units_and_images(tmp_path):
    g = RasterGrid(0.0, 0.0, 0.05, 0.05, 8, 5)
    vals = np.arange(40, dtype=float).reshape(5, 8)
    vals[0, 0] = np.nan
    sm = SampleMaps(
        "lot/../7",
        "unknown",
        g,
        np.ones((5, 8), int),
        [ElementMap("Zn", "Zn I 481.053", "mass_fraction", "g/g", vals / 100)],
    )
    path = write_maps_h5(tmp_path / "maps.h5", [sm], {"run": "r.h5"})
    with h5py.File(path, "r") as f:
        (name,) = list(f)
        assert "/" not in name and name not in (".", "..")
        d = f[name]["Zn"]
        assert d.attrs["units"] == "g/g"
        assert d.dims[1][0].attrs["units"] == "mm"
        np.testing.assert_allclose(d.dims[1][0][()], 0.05 * np.arange(8))
    back = read_maps_h5(path)
    np.testing.assert_array_equal(back["lot/../7"]["Zn"][0], vals / 100)
    png = write_map_png(tmp_path / "zn.png", sm, sm.maps[0])
    import matplotlib.image as mpimg

    img = mpimg.imread(png)
    assert img.ndim == 3 and img.shape[0] > 100
