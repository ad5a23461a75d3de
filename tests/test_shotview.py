"""The compact per-shot view (compquant.lines.shotview) against the long per-shot table it stands for.

The long table's definition (docs/architecture.md, "per-shot table"): one row per shot x line in run
order, ``sample_id, shot, line_id, intensity, accepted, saturated``. The checks build it here row by
row from the measurement's arrays (a plain double loop, independent of the vectorised code) and
require the view, the calibration made from it and the per-shot CSV to equal the long-table path
exactly (``==`` on float64, same bytes), spilled to a file or not.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from _lines_data import make_run, method
from calib_synth import config_dict, make_tables

from compquant.calibrate import calibrate, parse_calibration_section
from compquant.calibrate.apply import quantify
from compquant.calibrate.response import sample_responses
from compquant.cli._common import write_csv
from compquant.cli.cmd_lines import write_shots_csv
from compquant.lines import SHOT_TABLE_COLUMNS, measure_run, shotview
from compquant.lines.shotview import ShotView
from compquant.run import Run

AREAS = {"Cu I 324.754": 400.0, "Cu I 327.396": 250.0, "Zn I 330.259": 30.0, "Zn I 334.502": 60.0}


@pytest.fixture(scope="module")
def run_path(tmp_path_factory):
    p = tmp_path_factory.mktemp("runs") / "r.h5"
    # one misfire: a shot refused by shot QC, so "accepted" matters
    make_run(p, [("STD", "standard", 30, AREAS), ("UNK", "unknown", 17, AREAS)], misfire=[4, 35])
    return p


def _long_by_loop(lm) -> pd.DataFrame:
    rows = []
    for i in range(lm.shot_intensity.shape[0]):
        for j, lid in enumerate(lm.line_ids):
            rows.append((lm.sample_ids[lm.shot_sample[i]], lm.shot_number[i], lid, lm.shot_intensity[i, j],
                         bool(lm.shot_accepted[i]), bool(lm.shot_saturated[i, j])))
    return pd.DataFrame(rows, columns=SHOT_TABLE_COLUMNS)


@pytest.mark.parametrize("spill", [False, True])
def test_view_equals_the_long_table(run_path, tmp_path, spill):
    with Run.open(run_path) as run:
        lm = measure_run(run, method(), spill=spill, spill_dir=tmp_path)
    assert isinstance(lm.shot_intensity, np.memmap) == spill
    ref = _long_by_loop(lm)
    assert not ref.accepted.all()  # the misfires are refused
    full = lm.shots
    assert list(full.columns) == SHOT_TABLE_COLUMNS and len(lm.shot_view) == len(ref)
    for c in SHOT_TABLE_COLUMNS:
        assert full[c].tolist() == ref[c].tolist() or (c == "intensity" and np.array_equal(
            full[c].to_numpy(float), ref[c].to_numpy(float), equal_nan=True))
    # blocks of 3 shots (12 rows, the last one shorter) concatenate to the same table
    blocks = list(lm.shot_view.frames(block_cells=12))
    assert len(blocks) == -(-lm.shot_intensity.shape[0] // 3) and all(len(b) <= 12 for b in blocks)
    pd.testing.assert_frame_equal(pd.concat(blocks, ignore_index=True), full)
    # per sample and line: the accepted rows of the long table, in run order
    for lid in lm.line_ids:
        per = lm.shot_view.line_frames(lid)
        sel = ref[(ref.line_id == lid) & ref.accepted]
        assert set(per) == set(sel.sample_id)
        for sid, g in per.items():
            r = sel[sel.sample_id == sid]
            assert g["shot"].tolist() == r["shot"].tolist()
            assert np.array_equal(g["intensity"].to_numpy(), r["intensity"].to_numpy(float), equal_nan=True)
    assert lm.shot_view.line_frames("no such line") == {}


@pytest.mark.parametrize("istd", [None, "Cu I 327.396"])
def test_responses_from_view_equal_long_table(run_path, istd):
    with Run.open(run_path) as run:
        lm = measure_run(run, method())
    a = sample_responses(lm.table, "Zn I 330.259", istd, lm.shots)
    b = sample_responses(lm.table, "Zn I 330.259", istd, lm.shot_view)
    pd.testing.assert_frame_equal(a.drop(columns="shots"), b.drop(columns="shots"), check_exact=True)
    assert all(np.array_equal(x, y) for x, y in zip(a["shots"], b["shots"], strict=True))
    assert b["shots"].map(len).tolist() == [29, 16]  # one shot refused per sample


def test_shots_csv_written_in_blocks_has_the_same_bytes(run_path, tmp_path, monkeypatch):
    with Run.open(run_path) as run:
        lm = measure_run(run, method())
    write_csv(lm.shots, tmp_path / "whole.csv")
    monkeypatch.setattr(shotview, "BLOCK_CELLS", 20)  # 5 shots x 4 lines per block: 10 blocks
    write_shots_csv(lm, tmp_path / "blocks.csv")
    whole = (tmp_path / "whole.csv").read_bytes()
    assert whole.count(b"\n") == 1 + 47 * 4
    assert (tmp_path / "blocks.csv").read_bytes() == whole


def _view_of(st: pd.DataFrame) -> ShotView:
    """The compact arrays of a rectangular long table (every sample x line x shot)."""
    wide = st.pivot_table(index=["sample_id", "shot"], columns="line_id", values="intensity", sort=False)
    sids = list(dict.fromkeys(st.sample_id))
    idx = np.array([sids.index(s) for s in wide.index.get_level_values(0)])
    inten = wide.to_numpy(float)
    return ShotView(sids, list(wide.columns), idx, wide.index.get_level_values(1).to_numpy(), inten,
                    np.ones(len(wide), bool), np.zeros(inten.shape, bool))


def test_calibration_and_results_from_view_equal_long_table():
    # calib_synth: invented standards with a shot-to-shot factor shared by the lines, so the
    # per-shot covariance of the internal-standard ratio changes u(y) (GUM 5.1.2)
    lt, st, sm, std, _ = make_tables(3)
    cfg = parse_calibration_section(config_dict())
    view = _view_of(st)
    assert len(view) == len(st)
    a = calibrate(lt, std, cfg, shot_table=st, samples=sm, run_sha256="r")
    b = calibrate(lt, std, cfg, shot_table=view, samples=sm, run_sha256="r")
    b.created_utc = a.created_utc
    assert a.to_json() == b.to_json()
    qa = quantify((lt, st, sm), a, run_sha256="r").results
    qb = quantify((lt, view, sm), a, run_sha256="r").results
    pd.testing.assert_frame_equal(qa, qb, check_exact=True)


@pytest.mark.parametrize("shot_numbers", [[3, 1, 2, 0, 5, 4], [0, 1, 1, 2, 3, 3]])
def test_responses_with_unsorted_or_repeated_shot_numbers(shot_numbers):
    # shot numbers out of order, or repeated within a sample (a run file may hold either): the view
    # must give what the long table gives (sorted by shot; repeated shots merged pairwise by pandas)
    rng = np.random.default_rng(7)
    inten = rng.uniform(50, 150, (12, 2))
    sidx = np.repeat([0, 1], 6)
    view = ShotView(["A", "B"], ["L1", "L2"], sidx, np.array(shot_numbers * 2), inten,
                    np.array([True] * 5 + [False] + [True] * 6), np.zeros((12, 2), bool))
    lt = pd.DataFrame([{"sample_id": s, "line_id": lid, "intensity": 100.0, "u_intensity": 1.0, "n_shots": 6,
                        "flags": ""} for s in "AB" for lid in ("L1", "L2")])
    for istd in (None, "L2"):
        a = sample_responses(lt, "L1", istd, view.to_frame())
        b = sample_responses(lt, "L1", istd, view)
        pd.testing.assert_frame_equal(a.drop(columns="shots"), b.drop(columns="shots"), check_exact=True)
        assert all(np.array_equal(x, y) for x, y in zip(a["shots"], b["shots"], strict=True))
