"""Interference map on a deliberate overlap, and the compquant identify command end to end."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from conftest import file_hash
from identify_helpers import axis, observe, pf_with_bare_ions, radiance

from compquant.atomic import find_line, load_line_list
from compquant.cli import main
from compquant.identify import IdentifySettings, identify_spectrum, relative_line_strength
from compquant.identify.interference import interference_map, overlapped_lines
from compquant.identify.sample import elements_not_quantified
from compquant.plasma.forward import synthesize
from compquant.run import write_run
from compquant.simulate.detector import Detector

T, NE = 10000.0, 1e16


R_MAX = 15000.0  # the highest resolving power of LIBS / spark-OES spectrometers (echelle; common practice)


def _closest_strong_pair():
    """The closest pair of lines of two different elements in the line list, each at least 20 % of
    its species' strongest line at T (LTE estimate), that a spectrometer of resolving power up to
    R_MAX can place 0.6 FWHM apart: a real coincidence of the database.  (The published database
    holds pairs closer than 0.001 nm, which would need R in the millions.)"""
    ll = load_line_list()
    ll = ll.assign(s=relative_line_strength(ll, T))
    ll = ll[ll["s"] >= 0.2 * ll.groupby("species")["s"].transform("max")].sort_values("wavelength_nm")
    best = None
    rows = ll.to_dict("records")
    for i in range(len(rows)):
        for j in range(i + 1, min(i + 8, len(rows))):
            a, b = rows[i], rows[j]
            d = b["wavelength_nm"] - a["wavelength_nm"]
            if d < 0.6 * a["wavelength_nm"] / R_MAX:
                continue
            if a["element"] != b["element"] and (best is None or d < best[2]):
                best = (a, b, d)
    return best


@pytest.fixture(scope="module")
def overlap_case():
    a, b, d = _closest_strong_pair()
    # resolving power that puts the two lines 0.6 instrument FWHM apart: not resolved
    lam = 0.5 * (a["wavelength_nm"] + b["wavelength_nm"])
    R = 0.6 * lam / d
    # the analyte is the minor element; the interferer is the matrix element
    analyte, interferer = b, a
    wl = axis(max(200.0, lam - 60.0), lam + 200.0, lam / R / 5.0)
    # choose the analyte's level so that its line is at most half the interferer's at that position
    # (emission of a minor element is proportional to its number fraction in an optically thin plasma)
    ll = load_line_list()
    f0 = 0.03
    comp0 = {interferer["element"]: 1.0 - f0, analyte["element"]: f0}
    near = np.abs(wl - analyte["wavelength_nm"]) <= 0.5 * lam / R
    h_a = radiance(wl, comp0, T, NE, R_=R, lines_frame=ll[ll["line_id"] == analyte["line_id"]])[near].max()
    h_i = radiance(wl, comp0, T, NE, R_=R, lines_frame=ll[ll["line_id"] == interferer["line_id"]])[near].max()
    f = f0 * min(1.0, 0.5 * h_i / h_a)
    comp_with = {interferer["element"]: 1.0 - f, analyte["element"]: f}
    comp_without = {analyte["element"]: 1.0}
    rad_with = radiance(wl, comp_with, T, NE, R_=R)
    rad_without = radiance(wl, comp_without, T, NE, R_=R)
    return wl, R, analyte, interferer, rad_with, rad_without


def test_deliberate_overlap_is_flagged(overlap_case):
    wl, R, analyte, interferer, rad_with, rad_without = overlap_case
    lines = pd.DataFrame([{k: analyte[k] for k in ("line_id", "element", "ion", "wavelength_nm")}])
    st = IdentifySettings()
    y = observe(rad_with, seed=1)
    ident = identify_spectrum(wl, y, settings=st, resolving_power=R)
    assert interferer["element"] in set(ident.elements().query("status == 'detected'")["element"])
    imap = interference_map(ident, lines)
    # truth: the scene was built with the interferer's line 0.6 FWHM from the analyte line
    row = imap[imap["interferer_line_id"] == interferer["line_id"]]
    assert len(row) == 1 and bool(row["overlapped"].iloc[0])
    assert abs(row["separation_nm"].iloc[0] - (interferer["wavelength_nm"] - analyte["wavelength_nm"])) < 0.01
    alt = row["alternatives"].iloc[0].split("; ") if row["alternatives"].iloc[0] else []
    assert analyte["line_id"] not in alt
    assert all(x.startswith(analyte["element"] + " ") for x in alt)
    # window integration: a vanishing window sees the height ratio of the two Gaussian profiles;
    # a wider window takes in more of the neighbour (normal distribution function, mathematics)
    fw = analyte["wavelength_nm"] / R
    win = [interference_map(ident, lines.assign(window_nm=W)).query("interferer_line_id != ''")
           ["window_contribution"].iloc[0] for W in (1e-4, fw, 3 * fw)]
    assert win[0] == pytest.approx(row["relative_contribution"].iloc[0], rel=0.1)
    assert win[0] < win[1] < win[2]
    ov = overlapped_lines(imap)
    assert list(ov["line_id"]) == [analyte["line_id"]]
    # the same analyte line without the interfering element: no overlap
    ident0 = identify_spectrum(wl, observe(rad_without, seed=1), settings=st, resolving_power=R)
    imap0 = interference_map(ident0, lines)
    assert not imap0["overlapped"].any()


def _write_test_run(path, wl, comps, R, seed=0, n_shots=8):
    """A run of invented samples from the forward model + detector model, with continuum and bias."""
    rng = np.random.default_rng(seed)
    shots, idx = [], []
    det = None
    for k, comp in enumerate(comps):
        rad = synthesize(wl, comp, T, NE, resolving_power=R, continuum=True, partition_function=pf_with_bare_ions)
        det = Detector(photoelectrons_per_radiance=4e4 / float(rad.max()), read_noise_counts=4.0, bias_counts=500.0)
        shots.append(det.digitise(det.mean_photoelectrons(np.broadcast_to(rad, (n_shots, rad.size)), 1.0), 0.0, rng))
        idx += [k] * n_shots
    samples = [{"sample_id": f"LOT {k + 1}", "role": "unknown", "standard_ref": "", "description": "test"}
               for k in range(len(comps))]
    write_run(path, wl, np.concatenate(shots), samples, np.array(idx), dark=det.dark_frames(4, wl.size, 0.0, rng),
              saturation=65535, instrument={"resolving_power": R}, acquisition={"technique": "LIBS"})


def test_identify_command_end_to_end(tmp_path):
    wl = axis(280.0, 500.0, 0.03)
    run = tmp_path / "run.h5"
    _write_test_run(run, wl, [{"Cu": 0.85, "Zn": 0.15}, {"Cu": 1.0}], R=4000.0)
    method = tmp_path / "method.toml"
    method.write_text('[method]\nid = "t"\n[[lines]]\nid = "Cu I 324.754"\n[[lines]]\nid = "Zn I 334.502"\n'
                      '[identify]\nk_sigma = 5\nwavelength_uncertainty_nm = 0.005\n')
    h0 = file_hash(run)
    out = tmp_path / "id.csv"
    png = tmp_path / "id.png"
    res = CliRunner().invoke(main, ["identify", str(run), "--method", str(method), "-o", str(out),
                                    "--plot", str(png), "--sample", "LOT 1"])
    assert res.exit_code == 0, res.output
    assert file_hash(run) == h0
    tab = pd.read_csv(out)
    el = tab.groupby("element")["status"].agg(lambda s: sorted(s)[0])
    assert el["Cu"] == "detected" and el["Zn"] == "detected"
    # the database's id of the line (ALL v3: 334.5015 nm, written "Zn I 334.501"; ids resolve within
    # compquant.atomic.LINE_ID_TOLERANCE_NM)
    zn_id = find_line("Zn I", 334.502)["line_id"]
    assert "detected" in res.output and zn_id in res.output
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG specification, ISO/IEC 15948)
    imap = pd.read_csv(tmp_path / "id-interference.csv")
    assert set(imap["line_id"]) == {"Cu I 324.754", "Zn I 334.502"}
    # both samples: Zn absent from LOT 2 and not detected there
    out2 = tmp_path / "all.csv"
    res = CliRunner().invoke(main, ["identify", str(run), "-o", str(out2), "--quiet"])
    assert res.exit_code == 0, res.output
    t2 = pd.read_csv(out2)
    zn2 = t2[(t2["sample_id"] == "LOT 2") & (t2["element"] == "Zn")]["status"]
    assert (zn2 != "detected").all()
    # a line database without zinc: the zinc peaks are listed as unexplained, zinc is not reported
    no_zn = tmp_path / "no-zn.csv"
    ll = load_line_list()
    ll[ll["element"] != "Zn"].drop(columns=["species", "line_id"]).to_csv(no_zn, index=False)
    res = CliRunner().invoke(main, ["identify", str(run), "--sample", "LOT 1", "--lines", str(no_zn),
                                    "-o", str(tmp_path / "nozn.csv")])
    assert res.exit_code == 0, res.output
    assert "unexplained peaks in LOT 1" in res.output and "334.5" in res.output  # Zn I 334.502 nm
    assert "Zn" not in set(pd.read_csv(tmp_path / "nozn.csv")["element"])
    # the certificate helper: elements detected but not quantified
    from compquant.identify.sample import detected_elements
    from compquant.run import Run

    with Run.open(run) as r:
        found = detected_elements(r, "LOT 1")
    assert list(elements_not_quantified(found, ["Cu"])["element"]) == ["Zn"]


def test_identify_command_user_errors(tmp_path):
    wl = axis(300.0, 340.0, 0.03)
    run = tmp_path / "run.h5"
    _write_test_run(run, wl, [{"Cu": 1.0}], R=4000.0, n_shots=2)
    bad_method = tmp_path / "bad.toml"
    bad_method.write_text('[method]\nid = "t"\n[[lines]]\nid = "Cu I 324.754"\n[identify]\nk_sigma = -2\n')
    out = tmp_path / "o.csv"
    for args in (["identify", str(run), "--method", str(bad_method), "-o", str(out)],
                 ["identify", str(run), "--sample", "NOPE", "-o", str(out)],
                 ["identify", str(tmp_path / "missing.h5"), "-o", str(out)],
                 ["identify", str(run), "--temperature", "-5", "-o", str(out)]):
        res = CliRunner().invoke(main, args)
        assert res.exit_code == 2, res.output
        assert res.output.strip().splitlines()[-1].startswith("error:")
        assert "Traceback" not in res.output
        assert not out.exists()
