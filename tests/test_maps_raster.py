"""A simulated raster scan with a known Zn-rich inclusion, mapped by ``compquant map``."""

from __future__ import annotations

import numpy as np
import pytest
from click.testing import CliRunner

from compquant.cli import main
from compquant.maps.output import read_maps_h5

SCENARIO = """
[scenario]
id = "raster-test"
seed = 3
matrix = "Cu"
[plasma]
temperature_k = 9500.0
temperature_rsd = 0.01
ne_cm3 = 8.0e16
ne_rsd = 0.02
length_mm = 0.5
self_absorption = false
continuum = true
[laser]
wavelength_nm = 1064.0
pulse_energy_mj = 50.0
pulse_energy_rsd = 0.02
signal_rsd = 0.03
[instrument]
wavelength_min_nm = 322.0
wavelength_max_nm = 336.0
n_pixels = 700
resolving_power = 4000.0
photoelectrons_per_radiance = 0.05
gain_counts_per_pe = 1.0
bias_counts = 500.0
read_noise_counts = 3.0
exposure_s = 0.01
[dark]
frames = 8
[lines]
elements = ["Cu", "Zn"]
[[samples]]
id = "REF"
role = "unknown"
shots = 12
composition = { Cu = 0.7, Zn = 0.3 }
"""

RASTER = """
[raster]
scenario = "scenario.toml"
sample_id = "SCAN-1"
matrix = { Cu = 0.7, Zn = 0.3 }
balance = "Cu"
nx = 30
ny = 20
step_mm = 0.05
serpentine = true
[[raster.inclusions]]
x_mm = 0.90
y_mm = 0.55
radius_mm = 0.16
composition = { Cu = 0.4, Zn = 0.6 }
"""

METHOD = """
[method]
id = "raster-map"
version = "1"
[preprocess.baseline]
method = "snip"
max_half_window = 15
[preprocess.normalise]
how = "internal_standard"
line = "Cu I 327.396"
[preprocess.qc]
k = 8.0
[[lines]]
id = "Zn I 330.259"
window_nm = 0.3
[[lines]]
id = "Cu I 327.396"
window_nm = 0.3
[map]
lines = ["Zn I 330.259"]
"""


@pytest.fixture(scope="module")
def raster_run(tmp_path_factory):
    d = tmp_path_factory.mktemp("raster")
    (d / "scenario.toml").write_text(SCENARIO)
    (d / "raster.toml").write_text(RASTER)
    (d / "method.toml").write_text(METHOD)
    res = CliRunner().invoke(main, ["simulate-raster", str(d / "raster.toml"), "-o", str(d / "scan.h5")])
    assert res.exit_code == 0, res.output
    return d


def test_map_recovers_inclusion_position_and_contrast(raster_run):
    d = raster_run
    out = d / "maps"
    res = CliRunner().invoke(main, ["map", str(d / "scan.h5"), "--method", str(d / "method.toml"), "-o", str(out)])
    assert res.exit_code == 0, res.output
    maps = read_maps_h5(out / "maps.h5")
    assert list(maps) == ["SCAN-1"]  # the spot-measured REF sample has no positions
    m = maps["SCAN-1"]
    zn, attrs = m["Zn"]
    assert attrs["units"] == "relative to Cu I 327.396" and attrs["line_id"] == "Zn I 330.259"
    assert zn.shape == (20, 30) and np.isfinite(zn).all()
    X, Y = np.meshgrid(m["x_mm"], m["y_mm"])
    inside = (X - 0.90) ** 2 + (Y - 0.55) ** 2 <= 0.16**2
    # position: centroid of the nodes above the midpoint between the two levels, within one step
    lo, hi = zn[~inside].mean(), zn[inside].mean()
    sel = zn > 0.5 * (lo + hi)
    assert abs(X[sel].mean() - 0.90) <= 0.05 and abs(Y[sel].mean() - 0.55) <= 0.05
    # the segmented area matches the disc (nodes inside the true circle), one boundary ring of error
    assert abs(int(sel.sum()) - int(inside.sum())) <= 2 * np.pi * 0.16 / 0.05
    # contrast against plasma physics: with the Cu internal standard the Zn/Cu intensity ratio
    # scales as n(Zn I)/n(Cu I) from the LTE (Saha-Boltzmann) solution at the nominal T and n_e
    from compquant.atomic import element
    from compquant.plasma.lte import mass_to_number_fractions, solve_lte

    def ratio(comp):
        nf = mass_to_number_fractions(comp, {e: element(e).mass_u for e in comp})
        st = solve_lte(9500.0, 8.0e16, nf)
        return float(np.ravel(st.densities["Zn I"])[0] / np.ravel(st.densities["Cu I"])[0])

    expected = ratio({"Cu": 0.4, "Zn": 0.6}) / ratio({"Cu": 0.7, "Zn": 0.3})
    # tolerance 5 %: the ratio scatters ~6 % per shot (T fluctuation of 1 % with the 4 eV difference of
    # upper levels, shot noise), so the mean over the 37 inclusion nodes is good to ~1 % (1 sigma)
    assert hi / lo == pytest.approx(expected, rel=0.05)
    png = out / "SCAN-1_Zn.png"
    assert png.exists() and png.stat().st_size > 5000


def test_map_refuses_run_without_positions(raster_run, small_run, tmp_path):
    d = raster_run
    res = CliRunner().invoke(
        main, ["map", str(small_run), "--method", str(d / "method.toml"), "-o", str(tmp_path / "m")]
    )
    assert res.exit_code == 2
    assert "no shot positions" in res.output


# invented binary Cu-Zn standards for this test only (fictional ids and values)
ZN_STANDARDS = {"TZ-05": 5.0, "TZ-10": 10.0, "TZ-20": 20.0, "TZ-30": 30.0, "TZ-40": 40.0, "TZ-45": 45.0}
CAL_SCENARIO_SAMPLES = "\n".join(
    f'[[samples]]\nid = "{s}"\nrole = "standard"\nstandard = "{s}"\nshots = 20\n' for s in ZN_STANDARDS
)


def _standards_csv(path):
    rows = ["standard_id,matrix,element,mass_fraction,expanded_uncertainty,k,unit,source"]
    for sid, zn in ZN_STANDARDS.items():
        rows.append(f"{sid},brass,Zn,{zn:.2f},0.10,2,%,invented for a compquant test")
        rows.append(f"{sid},brass,Cu,{100 - zn:.2f},0.10,2,%,invented for a compquant test")
    path.write_text("\n".join(rows) + "\n")
    return path


CAL_METHOD_EXTRA = """
[calibration]
basis = "ratio"
matrix_element = "Cu"
internal_standard = "Cu I 327.396"
model = "linear"
drift = "off"
[[calibration.analytes]]
element = "Zn"
line = "Zn I 330.259"
"""


@pytest.fixture(scope="module")
def cal_setup(tmp_path_factory):
    """A simulated run: six binary Cu-Zn standards (spots) and a rastered brass with a Zn-rich disc."""
    tmp_path = tmp_path_factory.mktemp("calmap")
    std = _standards_csv(tmp_path / "standards.csv")
    scen = SCENARIO.split("[[samples]]")[0].replace(
        "[plasma]", '[standards]\nfile = "standards.csv"\ntruth_seed = 5\n[plasma]'
    )
    (tmp_path / "scenario.toml").write_text(scen + CAL_SCENARIO_SAMPLES)
    raster = (
        RASTER.replace("Cu = 0.7, Zn = 0.3", "Cu = 0.85, Zn = 0.15")
        .replace("Cu = 0.4, Zn = 0.6", "Cu = 0.65, Zn = 0.35")
        .replace("nx = 30", "nx = 24")
        .replace("ny = 20", "ny = 16")
        .replace("x_mm = 0.90", "x_mm = 0.60")
        .replace("y_mm = 0.55", "y_mm = 0.40")
    )
    (tmp_path / "raster.toml").write_text(raster)
    method = METHOD.replace('[preprocess.normalise]\nhow = "internal_standard"\nline = "Cu I 327.396"\n', "")
    (tmp_path / "method.toml").write_text(method + CAL_METHOD_EXTRA)
    run, cal = tmp_path / "scan.h5", tmp_path / "cal.json"
    r = CliRunner()
    res = r.invoke(main, ["simulate-raster", str(tmp_path / "raster.toml"), "-o", str(run)])
    assert res.exit_code == 0, res.output
    res = r.invoke(
        main,
        [
            "calibrate",
            str(run),
            "--method",
            str(tmp_path / "method.toml"),
            "--standards",
            str(std),
            "-o",
            str(cal),
            "--quiet",
        ],
    )
    assert res.exit_code == 0, res.output
    return tmp_path


def test_concentration_map_recovers_composition_contrast(cal_setup):
    d = cal_setup
    out = d / "maps"
    res = CliRunner().invoke(
        main,
        [
            "map",
            str(d / "scan.h5"),
            "--method",
            str(d / "method.toml"),
            "--calibration",
            str(d / "cal.json"),
            "-o",
            str(out),
            "--quiet",
        ],
    )
    assert res.exit_code == 0, res.output
    m = read_maps_h5(out / "maps.h5")["SCAN-1"]
    zn, attrs = m["Zn"]
    assert attrs["quantity"] == "mass_fraction" and attrs["units"] == "g/g"
    X, Y = np.meshgrid(m["x_mm"], m["y_mm"])
    inside = (X - 0.60) ** 2 + (Y - 0.40) ** 2 <= 0.16**2
    # truth: 0.35 g/g in the disc, 0.15 g/g around it (the simulated composition); tolerance 8 %
    # relative: calibration from 6 simulated standards of 20 shots and ~6 % shot scatter per node
    assert np.nanmean(zn[inside]) == pytest.approx(0.35, rel=0.08)
    assert np.nanmean(zn[~inside]) == pytest.approx(0.15, rel=0.08)
    assert (out / "maps-node-results.csv").exists() and (out / "SCAN-1_Zn.png").exists()


def test_analyse_many_runs_combined_csv_and_failing_run(cal_setup, tmp_path):
    import shutil

    import pandas as pd

    d = cal_setup
    folder = tmp_path / "runs"
    folder.mkdir()
    shutil.copy(d / "scan.h5", folder / "day-a.h5")
    shutil.copy(d / "scan.h5", folder / "day-b.h5")
    bad = tmp_path / "broken.h5"
    bad.write_bytes((d / "scan.h5").read_bytes()[:5000])  # truncated copy
    out = tmp_path / "out"
    res = CliRunner().invoke(
        main,
        [
            "analyse",
            str(folder),
            str(bad),
            "--method",
            str(d / "method.toml"),
            "--calibration",
            str(d / "cal.json"),
            "-o",
            str(out),
            "--quiet",
            "--issued-at",
            "2026-12-01T12:00:00Z",
            "--no-figures",
        ],
    )
    assert res.exit_code == 2, res.output
    assert "broken.h5" in res.output
    status = pd.read_csv(out / "runs.csv")
    assert list(status["status"]) == ["ok", "ok", "failed"]
    lims = pd.read_csv(out / "lims-all.csv", dtype=str, keep_default_na=False)
    assert set(lims["run"]) == {str(folder / "day-a.h5"), str(folder / "day-b.h5")}
    for name in ("day-a", "day-b"):
        own = pd.read_csv(next((out / name).glob("*.csv")), dtype=str, keep_default_na=False)
        sub = lims[lims["run"] == str(folder / f"{name}.h5")].drop(columns="run").reset_index(drop=True)
        pd.testing.assert_frame_equal(sub, own)


def _decoded_image(item, shape):
    """The image array of a Bokeh JSON item (``bokeh.embed.json_item``: serialised ndarray = base64
    bytes with dtype and shape, the buffer possibly gzip-compressed, RFC 1952), decoded with numpy."""
    import base64
    import gzip

    def walk(o):
        yield o
        for v in o.values() if isinstance(o, dict) else o if isinstance(o, list) else ():
            yield from walk(v)

    nd = next(v for v in walk(item) if isinstance(v, dict) and v.get("type") == "ndarray" and v.get("shape") == shape)
    raw = base64.b64decode(nd["array"]["data"])
    raw = gzip.decompress(raw) if raw[:2] == b"\x1f\x8b" else raw
    return np.frombuffer(raw, dtype=nd["dtype"]).reshape(shape)


def test_map_with_db_is_stored_for_the_recorded_run_and_shown_on_the_review_page(cal_setup, tmp_path):
    """``map --db`` of a run analysed into the record: the mass-fraction map is stored as evidence
    of that run's sample and the review page draws it (Flask test client, Bokeh JSON item) with the
    same node values as maps.h5; a run the record does not hold is refused (one error line, exit 2,
    nothing written)."""
    pytest.importorskip("flask")
    pytest.importorskip("bokeh")
    import json

    import sqlalchemy as sa

    from compquant.record import open_record
    from compquant.record import schema as S
    from compquant.web.app import create_app

    d = cal_setup
    db = tmp_path / "record.sqlite"
    r = CliRunner()
    common = ["--method", str(d / "method.toml"), "--calibration", str(d / "cal.json"), "--quiet"]
    # no record at that path: refused, and no empty record is created there
    res = r.invoke(main, ["map", str(d / "scan.h5"), *common, "-o", str(tmp_path / "m0"), "--db", str(db)])
    assert res.exit_code == 2 and not db.exists() and not (tmp_path / "m0").exists(), res.output
    assert res.output.startswith("error:") and "no record here" in res.output
    # a run not in the (empty) record: refused before any work, no output folder
    open_record(str(db)).dispose()
    res = r.invoke(main, ["map", str(d / "scan.h5"), *common, "-o", str(tmp_path / "m0"), "--db", str(db)])
    assert res.exit_code == 2 and not (tmp_path / "m0").exists(), res.output
    err = [ln for ln in res.output.splitlines() if ln.strip()]
    assert len(err) == 1 and err[0].startswith("error:") and "not in the record" in err[0], res.output
    # the record only configured (COMPQUANT_DB), not asked for: the run is mapped, nothing stored
    res = r.invoke(main, ["map", str(d / "scan.h5"), *common, "-o", str(tmp_path / "m-env")],
                   env={"COMPQUANT_DB": str(db)})
    assert res.exit_code == 0 and (tmp_path / "m-env" / "maps.h5").exists(), res.output
    res = r.invoke(main, ["analyse", str(d / "scan.h5"), *common, "-o", str(tmp_path / "a"), "--no-figures",
                          "--issued-at", "2026-12-01T12:00:00Z", "--measured", "2026-11-30T09:00:00Z", "--db", str(db)])
    assert res.exit_code == 0, res.output
    out = tmp_path / "m1"
    res = r.invoke(main, ["map", str(d / "scan.h5"), *common[:-1], "-o", str(out), "--db", str(db)])
    assert res.exit_code == 0, res.output
    assert "record: 1 map(s) stored" in res.output
    # the same map again: not stored twice (the evidence tables are append-only)
    res = r.invoke(main, ["map", str(d / "scan.h5"), *common[:-1], "-o", str(tmp_path / "m2"), "--db", str(db)])
    assert res.exit_code == 0 and "record: 0 map(s) stored" in res.output, res.output
    zn = read_maps_h5(out / "maps.h5")["SCAN-1"]["Zn"][0]
    rec = open_record(str(db))
    try:
        with rec.transaction() as conn:
            row = conn.execute(sa.select(S.samples.c.id).where(S.samples.c.sample_id == "SCAN-1")).scalar_one()
            n_audit = conn.execute(sa.select(sa.func.count()).select_from(S.audit)
                                   .where(S.audit.c.action == "store maps")).scalar_one()
        assert n_audit == 2
        app = create_app(rec)
        app.testing = True
        c = app.test_client()
        page = c.get(f"/analysis/{row}").get_data(as_text=True)
        assert 'id="maps"' in page
        name = "Zn mass fraction (Zn I 330.259)"
        assert 'name=Zn+mass+fraction' in page or "name=Zn%20mass%20fraction" in page
        resp = c.get(f"/analysis/{row}/map.json", query_string={"name": name})
        assert resp.status_code == 200 and resp.mimetype == "application/json"
        item = json.loads(resp.get_data(as_text=True))
        assert "blank nodes: below the LOD" in json.dumps(item)
        img = _decoded_image(item, list(zn.shape))
        # every node of this map lies far above the LOD (0.15-0.35 g/g): the page shows them all, as
        # maps.h5 holds them (7 significant digits kept by the record)
        ok = np.isfinite(zn)
        assert np.array_equal(np.isfinite(img), ok)
        assert np.allclose(img[ok], zn[ok], rtol=1e-6)
    finally:
        rec.dispose()


def test_stored_map_blanks_each_node_below_its_own_lod():
    """Nodes with different LODs (ratio basis): each node is compared with its own LOD (LOD =
    3 s_blank / slope, IUPAC; Long and Winefordner, Anal. Chem. 55 (1983) 712A) and left blank
    below it; the map's LOD is the smallest, so the page's own masking removes nothing more."""
    from types import SimpleNamespace

    import pandas as pd

    from compquant.maps.grid import RasterGrid
    from compquant.maps.output import ElementMap
    from compquant.record.evidence import maps_evidence, masked_below_lod

    grid = RasterGrid(0.0, 0.0, 0.5, 0.5, 3, 2)
    values = np.array([[0.0004, 0.0030, 0.0011], [0.0020, 0.0009, np.nan]])
    lods = np.array([[0.001, 0.001, 0.0012], [0.001, 0.0008, 0.001]])
    ids = [f"S@{i},{j}" for j in range(2) for i in range(3)]
    results = pd.DataFrame({"sample_id": ids, "element": "Pb", "lod": lods.ravel(),
                            "below_lod": (values < lods).ravel()})
    sm = SimpleNamespace(sample_id="S", grid=grid, maps=[ElementMap("Pb", "Pb I 405.781", "mass_fraction", "g/g",
                                                                   values)])
    (m,) = maps_evidence(SimpleNamespace(samples=[sm], results=results))
    assert m["lod"] == 0.0008 and m["sample_id"] == "S" and m["x"] == [0.0, 0.5, 1.0] and m["y"] == [0.0, 0.5]
    shown = masked_below_lod(np.array([[np.nan if v is None else v for v in r] for r in m["values"]]), m["lod"])
    expect = np.where(values >= lods, values, np.nan)  # by hand: 0.0030 >= 0.001, 0.0020 >= 0.001, 0.0009 >= 0.0008
    assert np.array_equal(np.isfinite(shown), np.isfinite(expect))
    assert np.allclose(shown[np.isfinite(shown)], [0.0030, 0.0020, 0.0009])
