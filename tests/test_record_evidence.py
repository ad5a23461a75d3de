"""The evidence an analysis stores for the review page (compquant.record.evidence) and the
record's upgrade from revision 0001 to 0002 with its data kept.

Outside references: numpy's float32 rounding (IEEE 754 binary32) for the stored spectra, zlib and
hashlib for the stored bytes, CODATA k_B from scipy.constants for the Boltzmann plot's
temperature T = -1 / (k_B * slope) (Boltzmann plot: e.g. Tognoni et al., Spectrochim. Acta B 65
(2010) 1), numpy.polyfit for the straight lines, Alembic's own autogenerate comparison for the
schema, and the databases' own triggers.  Runs and samples are invented (tests/test_analyse.py's
simulated Cu-Zn scenario).
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import pytest
import sqlalchemy as sa
from scipy import constants

sys.path.insert(0, str(Path(__file__).resolve().parent))

from record_helpers import fake_analysis, real_analyses
from test_record import db  # noqa: F401  (the SQLite / PostgreSQL record fixture)
from test_record_views import OLD_CHECK_COLUMNS, _record_at, store_as_before_0003

from compquant.record import db as record_db
from compquant.record import open_record
from compquant.record import schema as S
from compquant.record.evidence import map_item, masked_below_lod, read_array, read_items, unpack_array
from compquant.record.store import store_analysis

K_B_EV = constants.k / constants.e  # eV/K (CODATA, scipy.constants)


OLD_TABLES = ("record_info", "audit", "runs", "samples", "results", "calibrations", "drift_factors", "checks",
              "certificates", "certificate_files")


def _dump(rec) -> dict:
    """Every row of the tables of revision 0001, with that revision's columns."""
    def columns(t):
        table = S.metadata.tables[t]
        return [table.c[c] for c in OLD_CHECK_COLUMNS] if t == "checks" else [table]

    with rec.transaction() as conn:
        return {t: [tuple(r) for r in conn.execute(sa.select(*columns(t)).order_by(
            *S.metadata.tables[t].primary_key.columns)).all()] for t in OLD_TABLES}


def test_upgrade_from_r0001_keeps_every_row_and_adds_append_only_evidence(db, tmp_path):  # noqa: F811
    from alembic.autogenerate import compare_metadata
    from alembic.migration import MigrationContext

    old = _record_at(db, "0001")
    store_as_before_0003(old, fake_analysis(tmp_path / "a", "RUN-OLD", n_samples=2))
    with old.engine.connect() as conn:
        assert MigrationContext.configure(conn).get_current_revision() == "0001"
        assert "evidence" not in sa.inspect(conn).get_table_names()
    before = _dump(old)
    old.dispose()

    rec = open_record(db)  # upgrades to the head revision
    try:
        assert record_db.schema_revision(rec) == "0003"  # the head (0003: checks' state and LOQ)
        after = _dump(rec)
        for t in OLD_TABLES:
            if t == "audit":
                assert after[t][:len(before[t])] == before[t]  # the trail kept, the upgrade appended
                last = after[t][-1]
                assert last[3] == "upgrade" and json.loads(last[6]) == {"from": "0001", "to": "0003"}
            else:
                assert after[t] == before[t], t
        with rec.engine.connect() as conn:  # the upgraded schema is the live one (Alembic's comparison)
            assert compare_metadata(MigrationContext.configure(conn), S.metadata) == []
        # an analysis with evidence goes into the upgraded record; the evidence is append-only
        kw = fake_analysis(tmp_path / "b", "RUN-NEW", n_samples=1)
        wl = np.linspace(300.0, 310.0, 50)
        meas = type("M", (), {"wavelength": wl, "mean_spectra": {kw["certificates"][0].sample.sample_id: wl * 0 + 1},
                              "table": None, "fits": {}, "shifts": None})()
        grid = map_item("Zn map", [0.0, 1.0], [0.0, 1.0, 2.0], np.full((3, 2), 0.01), 0.001, element="Zn")
        store_analysis(rec, **kw, evidence={"meas": meas, "maps": [grid]})
        for table in ("evidence", "evidence_arrays"):
            for sql in (f"UPDATE {table} SET run_id = run_id", f"DELETE FROM {table}"):
                with pytest.raises(sa.exc.DBAPIError, match="append-only"), rec.engine.begin() as c:
                    c.exec_driver_sql(sql)
        with rec.transaction() as conn:
            assert conn.execute(sa.select(sa.func.count()).select_from(S.evidence_arrays)).scalar_one() == 2
            run_id = conn.execute(sa.select(sa.func.max(S.runs.c.id))).scalar_one()
            row = conn.execute(sa.select(S.evidence_arrays.c.sample_row).where(
                S.evidence_arrays.c.name == "mean_spectrum")).scalar_one()
            assert np.array_equal(read_array(conn, run_id, None, "wavelength"), wl)  # float64 kept exactly
            assert np.array_equal(read_array(conn, run_id, row, "mean_spectrum"), np.ones(50))
            (m,) = read_items(conn, run_id, "map", None)
            assert m["lod"] == 0.001 and m["values"][2] == [0.01, 0.01]
    finally:
        rec.dispose()


@pytest.fixture(scope="module")
def analysed(tmp_path_factory):
    d = tmp_path_factory.mktemp("evidence")
    db_path = str(d / "record.sqlite")
    return real_analyses(d, db_path), db_path


def _sample_row(conn, run_id, sid) -> int:
    return conn.execute(sa.select(S.samples.c.id).where(S.samples.c.run_id == run_id,
                                                        S.samples.c.sample_id == sid)).scalar_one()


def test_analysis_stores_spectra_line_fits_curves_and_boltzmann_plots(analysed):
    from compquant.lines import measure_run
    from compquant.method import load_method
    from compquant.run import Run

    out, db_path = analysed
    d = out["dir"]
    method = load_method(d / "method.toml")
    with Run.open(d / "run1.h5") as run:
        meas = measure_run(run, method)
    with open_record(db_path) as rec, rec.transaction() as conn:
        cal_run, cf_run = conn.execute(sa.select(S.runs.c.id).order_by(S.runs.c.id)).scalars().all()
        wl = read_array(conn, cal_run, None, "wavelength")
        assert np.array_equal(wl, meas.wavelength)  # float64 kept exactly
        sid = out["cal"].certificates[0].sample_id
        row = _sample_row(conn, cal_run, sid)
        spec = read_array(conn, cal_run, row, "mean_spectrum")
        # IEEE 754 binary32 rounding of the mean spectrum (numpy's float32 cast as the reference)
        assert np.array_equal(spec, meas.mean_spectra[sid].astype(np.float32).astype(float))
        lines = {it["line_id"]: it for it in read_items(conn, cal_run, "line", row)}
        assert set(lines) == {ln.line_id for ln in method.lines}
        fit = lines["Zn I 472.215"]
        y, model, res = (np.array(fit[k], float) for k in ("y", "model", "residual"))
        assert np.allclose(model + res, y, rtol=1e-6, atol=1e-6 * np.abs(y).max())
        assert fit["rss"] == pytest.approx(float(np.sum(res ** 2)), rel=1e-4)  # the fit's own sum of squares
        win = lines["Zn I 481.053"]
        assert win["mode"] == "window" and win["window"][0] < 481.053 < win["window"][1] and win["model"] is None
        # the background through the side windows is a straight line (numpy.polyfit, degree 1, reproduces it)
        x, bg = np.array(win["x"]), np.array(win["background"])
        assert np.allclose(np.polyval(np.polyfit(x, bg, 1), x), bg, rtol=1e-5)
        (curve,) = read_items(conn, cal_run, "curve", run_wide=True)
        for s in curve["standards"]:
            if s["used"]:
                assert s["residual"] == pytest.approx(s["y"] - s["fitted"], rel=1e-6, abs=1e-9)
        gx, gy = np.array(curve["grid_x"]), np.array(curve["grid_y"])
        slope, icpt = np.polyfit(gx, gy, 1)  # the linear model's curve is a straight line
        assert np.allclose(slope * gx + icpt, gy, rtol=1e-6, atol=1e-9)
        (mark,) = read_items(conn, cal_run, "mark", row)
        assert mark["element"] == "Zn" and mark["y"] == pytest.approx(slope * mark["x"] + icpt, rel=1e-6)
        # calibration-free run: T from the slope of the fitted Boltzmann plot (CODATA k_B)
        cf_sid = out["cf"].certificates[0].sample_id
        (bz,) = read_items(conn, cf_run, "boltzmann", _sample_row(conn, cf_run, cf_sid))
        pts = [p for p in bz["points"] if p["y_fit"] is not None]
        sp = pts[0]["species"]
        xe = np.array([p["x_ev"] for p in pts if p["species"] == sp])
        yf = np.array([p["y_fit"] for p in pts if p["species"] == sp])
        assert len(xe) >= 2
        slope_b = np.polyfit(xe, yf, 1)[0]
        assert -1.0 / (K_B_EV * slope_b) == pytest.approx(bz["temperature_k"], rel=1e-4)


def test_altered_evidence_is_not_shown(analysed):
    """A stored array or item whose bytes no longer match their SHA-256 is not returned."""
    _, db_path = analysed
    with open_record(db_path) as rec, rec.transaction() as conn:
        row = dict(conn.execute(sa.select(S.evidence_arrays).limit(1)).mappings().one())
        assert unpack_array(row) is not None
        import zlib

        raw = bytearray(zlib.decompress(row["data"]))
        raw[0] ^= 1
        assert unpack_array({**row, "data": zlib.compress(bytes(raw))}) is None
        assert unpack_array({**row, "data": b"not zlib"}) is None


def test_map_nodes_below_lod_are_masked():
    # LOD = 3 s_blank / slope (IUPAC; Long and Winefordner 1983): a node below it is not a number to show
    v = np.array([[-0.001, 0.0004, 0.0012], [np.nan, 0.002, 0.0005]])
    m = masked_below_lod(v, 0.001)
    assert np.isnan(m[0, :2]).all() and m[0, 2] == 0.0012 and np.isnan(m[1, 0]) and m[1, 1] == 0.002
    assert np.isnan(m[1, 2])
    assert not np.isnan(masked_below_lod(v, None)[0, 0])  # no LOD known: nothing hidden but non-finite nodes


def test_export_carries_the_evidence_arrays_as_base64(analysed, tmp_path):
    """``compquant record export``: the binary column as base64 text (RFC 4648) that decodes to the
    stored zlib stream whose content has the recorded SHA-256."""
    import base64
    import hashlib
    import zlib

    import pandas as pd

    from compquant.record.export import export_record

    _, db_path = analysed
    with open_record(db_path) as rec:
        man = export_record(rec, tmp_path / "exp")
    assert man["tables"]["evidence_arrays"]["rows"] > 0 and man["tables"]["evidence"]["rows"] > 0
    df = pd.read_csv(tmp_path / "exp" / "evidence_arrays.csv")
    for data, sha in zip(df["data"], df["sha256"]):
        assert hashlib.sha256(zlib.decompress(base64.b64decode(data, validate=True))).hexdigest() == sha
