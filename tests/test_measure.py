"""measure_run on invented runs written with write_run: accuracy, flags, QC, streaming, errors."""

from __future__ import annotations

import numpy as np
import pytest
from _lines_data import LINES, WL, make_run, method, spectrum

from compquant.errors import DataQualityError, MethodError
from compquant.lines import LINE_TABLE_COLUMNS, ChunkPlan, mean_spectrum, measure_run, process_chunk
from compquant.run import Run

AREAS = {"Cu I 324.754": 400.0, "Cu I 327.396": 250.0, "Zn I 330.259": 30.0, "Zn I 334.502": 60.0}


@pytest.fixture(scope="module")
def run_path(tmp_path_factory):
    p = tmp_path_factory.mktemp("runs") / "r.h5"
    make_run(p, [("STD", "standard", 40, AREAS), ("ONE", "unknown", 1, AREAS), ("BLK", "blank", 25, {})], misfire=[5])
    return p


def test_table_columns_and_accuracy_fit_mode(run_path):
    m = method(lines=[{"id": k, "mode": "fit", "fwhm_nm": 0.04} for k in LINES])
    with Run.open(run_path) as run:
        lm = measure_run(run, m)
    t = lm.table
    assert list(t.columns) == LINE_TABLE_COLUMNS
    std = t[t.sample_id == "STD"].set_index("line_id")
    for lid, a in AREAS.items():
        # invented run: shot-to-shot scale 3 %, Poisson-like noise; fitted areas within 2 %
        assert std.loc[lid, "intensity"] == pytest.approx(a, rel=0.02)
        assert std.loc[lid, "n_shots"] == 39  # one misfire rejected
        assert 0 < std.loc[lid, "u_intensity"] < 0.02 * a
        assert std.loc[lid, "centre_nm"] == pytest.approx(LINES[lid], abs=0.002)
        assert std.loc[lid, "flags"] == ""
    # per-shot areas average to the table value
    shots = lm.shots
    s = shots[(shots.sample_id == "STD") & shots.accepted & (shots.line_id == "Zn I 330.259")]
    assert s.intensity.mean() == pytest.approx(std.loc["Zn I 330.259", "intensity"], rel=1e-12)
    blk = t[t.sample_id == "BLK"]
    assert blk["flags"].str.contains("not_found").all()


def test_fit_groups_name_the_lines_each_fit_measured(run_path):
    # the two Cu lines share a group name (fitted together); each Zn line is fitted alone
    lines = [{"id": k, "mode": "fit", "fwhm_nm": 0.04, **({"group": "cu"} if k.startswith("Cu") else {})}
             for k in LINES]
    with Run.open(run_path) as run:
        lm = measure_run(run, method(lines=lines))
    assert lm.fit_groups == [[0, 1], [2], [3]]
    std = lm.table[lm.table.sample_id == "STD"].set_index("line_id")
    for g, members in enumerate(lm.fit_groups):
        fit = lm.fits[("STD", g)]
        assert fit.areas.size == len(members) == fit.design.shape[1] - 2  # profile columns, then background
        for i in members:
            # invented run: the fitted line of the group recovers its own area within 2 %
            assert std.loc[lm.line_ids[i], "intensity"] == pytest.approx(AREAS[lm.line_ids[i]], rel=0.02)
            assert fit.centres[members.index(i)] == pytest.approx(LINES[lm.line_ids[i]], abs=0.002)


def test_qc_report_counts_rejected_shot(run_path):
    with Run.open(run_path) as run:
        lm = measure_run(run, method())
    q = lm.qc.set_index("sample_id")
    assert q.loc["STD", "n_rejected"] == 1 and q.loc["STD", "reasons"] == "low_signal=1"
    rej = lm.rejected_shots()
    assert rej.shot.tolist() == [5] and rej.reason.tolist() == ["low_signal"]
    assert lm.provenance["run_sha256"] and lm.provenance["method_id"] == "test-method"


def test_single_shot_sample(run_path):
    with Run.open(run_path) as run:
        t = measure_run(run, method()).table
    one = t[t.sample_id == "ONE"]
    assert one["flags"].str.contains("single_shot").all()
    assert one.sd_shots.isna().all() and (one.n_shots == 1).all()
    assert (one.u_intensity > 0).all() and np.isfinite(one.u_intensity).all()


def test_streaming_chunks_give_the_same_table(run_path):
    with Run.open(run_path) as run:
        a = measure_run(run, method(), chunk_shots=7).table
        b = measure_run(run, method(), chunk_shots=4096).table
    num = ["intensity", "u_intensity", "sd_shots", "snr"]
    assert np.allclose(a[num].to_numpy(float), b[num].to_numpy(float), rtol=1e-10, equal_nan=True)
    assert (a["flags"] == b["flags"]).all()


def test_process_chunk_is_pure_and_splits(run_path):
    with Run.open(run_path) as run:
        raw = run.read_raw(0, 20)
    rng = np.random.default_rng(0)
    W = rng.normal(size=(WL.size, 3))
    plan = ChunkPlan(
        n_pixels=WL.size,
        dark=np.full(WL.size, 100.0),
        baseline="snip",
        baseline_params={"max_half_window": 10},
        W=W,
        support=W != 0,
        total_weights=np.ones(WL.size),
    )
    si = np.zeros(20, dtype=int)
    whole = process_chunk(raw, si, plan)
    parts = [process_chunk(raw[a:b], si[a:b], plan) for a, b in ((0, 9), (9, 20))]
    assert np.allclose(whole.window, np.vstack([p.window for p in parts]), rtol=1e-12)
    assert np.allclose(whole.sums[0], parts[0].sums[0] + parts[1].sums[0], rtol=1e-12)
    raw_copy = raw.copy()
    process_chunk(raw, si, plan)
    assert np.array_equal(raw, raw_copy)


def test_saturated_line_is_flagged(tmp_path):
    p = make_run(tmp_path / "sat.h5", [("S", "standard", 10, AREAS)], saturation=4000.0)
    with Run.open(p) as run:
        t = measure_run(run, method()).table.set_index("line_id")
    # the Cu I 324.754 peak (about 400 * 27 counts) exceeds 4000 counts: flagged, never silent
    assert "saturated" in t.loc["Cu I 324.754", "flags"]
    assert "saturated" not in t.loc["Zn I 330.259", "flags"]


def test_all_shots_rejected_names_the_sample(tmp_path):
    p = make_run(tmp_path / "dead.h5", [("GOOD", "standard", 5, AREAS), ("DEAD", "unknown", 5, {})])
    m = method(
        preprocess={
            "baseline": {"method": "snip", "max_half_window": 25},
            "qc": {"quantity": "Cu I 324.754", "min_signal": 100.0},
        }
    )
    with Run.open(p) as run, pytest.raises(DataQualityError) as ei:
        measure_run(run, m)
    assert "DEAD" in ei.value.one_line()


def test_line_outside_range(run_path):
    m = method(lines=[{"id": "Cu I 324.754"}, {"id": "Pb I 405.781", "wavelength_nm": 405.781}])
    with Run.open(run_path) as run, pytest.raises(MethodError) as ei:
        measure_run(run, m)
    assert "Pb I 405.781" in ei.value.one_line()


def test_shift_found_corrected_and_flagged(tmp_path):
    p = make_run(
        tmp_path / "shift.h5", [("A", "standard", 10, AREAS), ("B", "unknown", 10, AREAS)], shift_by_sample={"B": 0.025}
    )
    m = method(
        preprocess={
            "baseline": {"method": "snip", "max_half_window": 25},
            "shift": {"method": "lines", "lines": ["Cu I 324.754", "Cu I 327.396"], "flag_nm": 0.01},
        }
    )
    with Run.open(p) as run:
        lm = measure_run(run, m)
        wl, mean, info = mean_spectrum(run, m, "B")
    sh = lm.shifts.set_index("sample_id")
    assert sh.loc["B", "shift_nm"] == pytest.approx(0.025, abs=0.002)
    assert abs(sh.loc["A", "shift_nm"]) < 0.002
    t = lm.table
    # issue 16: after the correction the centres sit at table + shift, so no line is 'shifted';
    # the sample's axis offset is reported in the shifts table instead
    assert bool(sh.loc["B", "shifted"]) and not bool(sh.loc["A", "shifted"])
    assert not t["flags"].str.contains("shifted").any()
    with Run.open(p) as run:
        raw = measure_run(run, method(preprocess={"baseline": {"method": "snip", "max_half_window": 25},
                                                  "shift": {"method": "none", "flag_nm": 0.01}}))
    # without correction, lines 0.025 nm off position (> flag_nm) are flagged
    rt = raw.table
    assert rt[rt.sample_id == "B"]["flags"].str.contains("shifted").all()
    assert not rt[rt.sample_id == "A"]["flags"].str.contains("shifted").any()
    a = t[t.sample_id == "A"].intensity.to_numpy()
    b = t[t.sample_id == "B"].intensity.to_numpy()
    assert b == pytest.approx(a, rel=0.03)  # windows moved with the shift
    assert info["shift_nm"] == pytest.approx(0.025, abs=0.002)


def test_internal_standard_normalisation(run_path):
    m = method(
        preprocess={
            "baseline": {"method": "snip", "max_half_window": 25},
            "normalise": {"how": "internal_standard", "line": "Cu I 327.396"},
        }
    )
    with Run.open(run_path) as run:
        lm = measure_run(run, m)
    t = lm.table[lm.table.sample_id == "STD"].set_index("line_id")
    assert t.loc["Cu I 327.396", "intensity"] == pytest.approx(1.0, rel=1e-12)
    assert t.loc["Cu I 327.396", "flags"] == ""  # the normalising line is exact, not "not found"
    ratio = t.loc["Cu I 324.754", "intensity"]
    assert 1.2 < ratio < 2.0  # 400/250 in areas, window-limited


def test_normalised_shots_are_raw_over_the_internal_standard_exactly(run_path):
    # internal-standard normalisation (common practice): each shot's line intensity over the same
    # shot's intensity of the reference line; filled and divided in place, so bit for bit the raw
    # per-shot values (normalise none) over the reference column; window and fit lines interleaved
    lines = [{"id": k, "mode": "fit", "fwhm_nm": 0.04} if i == 1 else {"id": k} for i, k in enumerate(LINES)]
    ref = "Cu I 327.396"
    with Run.open(run_path) as run:
        raw = measure_run(run, method(lines=lines))
        norm = measure_run(run, method(lines=lines, preprocess={"normalise": {"how": "internal_standard",
                                                                              "line": ref}}))
    r = raw.shot_intensity
    f = r[:, raw.line_ids.index(ref)]
    good = np.isfinite(f) & (f > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        expected = np.where(good[:, None], r / np.where(good, f, 1.0)[:, None], np.nan)
    assert norm.shot_intensity.shape == r.shape and norm.shot_intensity.dtype == np.float64
    assert np.array_equal(norm.shot_intensity, expected, equal_nan=True)
    assert np.isfinite(expected).sum() > 0.5 * expected.size


def test_mean_spectrum_excludes_rejected_shots(run_path):
    m = method()
    with Run.open(run_path) as run:
        wl, mean, info = mean_spectrum(run, m, "STD")
    assert info == {"n_shots": 40, "n_accepted": 39, "shift_nm": 0.0}
    ref = spectrum(AREAS) - spectrum({})
    k = np.argmin(np.abs(WL - 324.754))
    assert mean[k] == pytest.approx(ref[k], rel=0.03)


def test_response_file_and_pulse_energy(tmp_path):
    p = make_run(tmp_path / "pe.h5", [("A", "standard", 12, AREAS)], pulse=True)
    resp = tmp_path / "resp.csv"
    resp.write_text("wavelength_nm,response\n300,2.0\n350,2.0\n", encoding="utf-8")
    base = method()
    halved = method(preprocess={"baseline": {"method": "snip", "max_half_window": 25}, "response": {"file": str(resp)}})
    pe = method(
        preprocess={"baseline": {"method": "snip", "max_half_window": 25}, "qc": {"pulse_energy_normalise": True}}
    )
    with Run.open(p) as run:
        a = measure_run(run, base)
        b = measure_run(run, halved)
        c = measure_run(run, pe)
        e = run.shots["pulse_energy_mj"].to_numpy()
    # a flat response of 2 halves every intensity (division by the relative response)
    assert b.table.intensity.to_numpy() == pytest.approx(a.table.intensity.to_numpy() / 2, rel=1e-12)
    # pulse-energy normalisation divides each shot by E / median(E)
    f = e / np.median(e)
    assert c.shot_intensity[:, 0] == pytest.approx(a.shot_intensity[:, 0] / f, rel=1e-12)
    assert "response" in b.provenance and b.provenance["response"] == str(resp)


def test_xcorr_shift_with_reference_file(tmp_path):
    p = make_run(tmp_path / "xc.h5", [("B", "unknown", 6, AREAS)], shift_by_sample={"B": -0.03})
    ref = tmp_path / "ref.csv"
    y = spectrum(AREAS) - spectrum({})
    ref.write_text("wavelength_nm,intensity\n" + "\n".join(f"{w:.5f},{v:.6g}" for w, v in zip(WL, y)), encoding="utf-8")
    m = method(
        preprocess={
            "baseline": {"method": "snip", "max_half_window": 25},
            "shift": {"method": "xcorr", "reference_file": str(ref)},
        }
    )
    with Run.open(p) as run:
        lm = measure_run(run, m)
    assert lm.shifts.shift_nm.iloc[0] == pytest.approx(-0.03, abs=0.002)
    assert lm.shifts.shifted.all()  # the sample's axis is off by more than one pixel
    assert not lm.table["flags"].str.contains("shifted").any()  # corrected centres agree (issue 16)


def test_pulse_energy_without_column_is_method_error(run_path):
    m = method(
        preprocess={"baseline": {"method": "snip", "max_half_window": 25}, "qc": {"pulse_energy_normalise": True}}
    )
    with Run.open(run_path) as run, pytest.raises(MethodError, match="pulse"):
        measure_run(run, m)


@pytest.mark.parametrize("baseline", [{"method": "asls", "lam": 1e5, "p": 0.01}, {"method": "arpls", "lam": 1e5}])
def test_whittaker_baselines_in_the_pipeline(run_path, baseline):
    m_snip = method()
    m_w = method(preprocess={"baseline": baseline})
    with Run.open(run_path) as run:
        a = measure_run(run, m_snip).table
        b = measure_run(run, m_w).table
    sa = a[a.sample_id == "STD"].intensity.to_numpy()
    sb = b[b.sample_id == "STD"].intensity.to_numpy()
    # the local linear background absorbs most baseline differences: within 5 %
    assert sb == pytest.approx(sa, rel=0.05)


def test_threads_give_the_same_result(run_path):
    m = method(lines=[{"id": "Cu I 324.754"}, {"id": "Zn I 330.259", "mode": "fit", "fwhm_nm": 0.04}])
    with Run.open(run_path) as run:
        a = measure_run(run, m, chunk_shots=16)
        b = measure_run(run, m, chunk_shots=16, threads=3)
    # window lines: the same arithmetic; fitted lines: the mean spectrum is summed in another
    # order, so the nonlinear fit lands within its tolerance (1e-6 relative)
    assert np.allclose(a.shot_intensity[:, 0], b.shot_intensity[:, 0], rtol=1e-12)
    assert np.allclose(a.shot_intensity[:, 1], b.shot_intensity[:, 1], rtol=1e-6, atol=1e-9)
    assert (a.shot_accepted == b.shot_accepted).all()


def test_mean_spectrum_qc_on_a_line(run_path):
    m = method(preprocess={"baseline": {"method": "snip", "max_half_window": 25}, "qc": {"quantity": "Cu I 324.754"}})
    with Run.open(run_path) as run:
        lm = measure_run(run, m)
        _, _, info = mean_spectrum(run, m, "STD")
    q = lm.qc.set_index("sample_id")
    assert info["n_accepted"] == q.loc["STD", "n_accepted"] == 39


def test_shot_array_spill_file_is_npy_and_matches_numpy(tmp_path, monkeypatch):
    # the spill file is a NumPy .npy file (NumPy's NEP 1 format, read back by numpy's own np.load) and
    # every operation gives what the same numpy indexing gives on an in-memory array
    from compquant.lines import shotstore

    monkeypatch.setattr(shotstore, "BLOCK_BYTES", 3 * 5 * 8)  # 3 rows per block: many blocks
    rng = np.random.default_rng(3)
    ref = np.full((11, 5), np.nan)
    a = shotstore.ShotArray(11, 5, np.float64, np.nan, spill=True, spill_dir=tmp_path)
    assert a.spilled and a.block_rows == 3
    for start, stop, cols in [(0, 4, slice(0, 5)), (4, 11, [0, 2, 3]), (2, 9, slice(1, 2))]:
        v = rng.normal(size=(stop - start, ref[0, cols].size))
        nan_where = v > 1.0
        a.write(start, stop, cols, v, nan_where)
        ref[start:stop, cols] = np.where(nan_where, np.nan, v)
    assert np.array_equal(np.load(a.path), ref, equal_nan=True)
    assert np.array_equal(a.column(2), ref[:, 2], equal_nan=True)
    rows = np.array([0, 1, 5, 9, 10])
    assert np.array_equal(a.take(rows, slice(1, 4)), ref[rows][:, 1:4], equal_nan=True)
    f = rng.uniform(0.5, 2.0, 11)
    a.update_rows(lambda b, i, j: np.divide(b, f[i:j, None], out=b))
    m = a.result()
    assert not list(tmp_path.iterdir())  # unlinked at once (POSIX); the map stays readable
    assert np.array_equal(m, ref / f[:, None], equal_nan=True) and not m.flags.writeable


def test_spilled_measurement_is_identical(run_path, tmp_path, monkeypatch):
    # spilling the per-shot arrays to disk is storage only: every number, flag and per-shot value must
    # be the same as in memory, bit for bit (window and fit lines, internal standard, QC rejections)
    from compquant.lines import shotstore

    monkeypatch.setattr(shotstore, "BLOCK_BYTES", 7 * 4 * 8)  # blocks of 7 rows / few lines
    lines = [{"id": k, "mode": "fit", "fwhm_nm": 0.04} if i == 1 else {"id": k} for i, k in enumerate(LINES)]
    m = method(lines=lines, preprocess={"normalise": {"how": "internal_standard", "line": "Cu I 324.754"}})
    with Run.open(run_path) as run:
        mem = measure_run(run, m, spill=False, chunk_shots=16)
        disk = measure_run(run, m, spill=True, spill_dir=tmp_path, chunk_shots=16)
    assert not list(tmp_path.iterdir())
    assert isinstance(disk.shot_intensity, np.memmap) and not isinstance(mem.shot_intensity, np.memmap)
    assert np.array_equal(mem.shot_intensity, disk.shot_intensity, equal_nan=True)
    assert np.array_equal(mem.shot_saturated, disk.shot_saturated)
    assert np.array_equal(mem.shot_accepted, disk.shot_accepted) and (~mem.shot_accepted).any()
    assert mem.table.equals(disk.table) and mem.qc.equals(disk.qc) and mem.shots.equals(disk.shots)


def test_spill_into_a_missing_folder_is_a_resource_error(run_path, tmp_path):
    # a spill folder that does not exist: a CompquantError naming it, not an OSError traceback
    from compquant.errors import ResourceLimitError

    with Run.open(run_path) as run, pytest.raises(ResourceLimitError, match="spill file"):
        measure_run(run, method(), spill=True, spill_dir=tmp_path / "missing")
