"""The sample's analysis page of the review app (spectrum, line fits, curves, Boltzmann plot) through
Flask's test client, and the label de-overlap rule.

Outside references: for the labels, the theorem that greedy colouring of intervals taken by left
end uses exactly as many rows as the largest number of labels over one point (interval graphs are
perfect; Golumbic, Algorithmic Graph Theory and Perfect Graphs, 2nd ed. 2004, ch. 8), counted here
by a plain sweep; for the pages, Jinja2's autoescaping and Bokeh's own JSON item format
(``bokeh.embed.json_item``: ``target_id``, ``root_id``, ``doc``).  Runs and samples are invented.
"""

from __future__ import annotations

import base64
import gzip
import json
import random
import re
import sys
from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("flask")
pytest.importorskip("bokeh")

import sqlalchemy as sa

sys.path.insert(0, str(Path(__file__).resolve().parent))

from record_helpers import fake_analysis, real_analyses

from compquant.record import open_record
from compquant.record import schema as S
from compquant.record.store import store_analysis
from compquant.web.app import create_app
from compquant.web.interactive import spectrum_labels
from compquant.web.labels import label_width_px, stagger


def _max_overlap(xs, ws, gap) -> int:
    """Largest number of labels (with their gap) covering one point: a sweep over the edges."""
    ev = sorted([(x, 1) for x in xs] + [(x + w + gap, -1) for x, w in zip(xs, ws)], key=lambda t: (t[0], t[1]))
    best = cur = 0
    for _, d in ev:
        cur += d
        best = max(best, cur)
    return best


def test_stagger_never_overlaps_and_uses_the_fewest_rows():
    assert stagger([0, 50, 100], [40, 40, 40]) == [0, 0, 0]  # far apart: one row
    assert stagger([0, 10, 20], [40, 40, 40]) == [0, 1, 2]  # all over one point: three rows
    assert stagger([0, 10, 45], [40, 40, 40]) == [0, 1, 0]  # the third fits after the first
    rng = random.Random(4)
    for _ in range(200):
        n = rng.randint(1, 30)
        xs = [rng.uniform(0, 1000) for _ in range(n)]
        ws = [rng.uniform(20, 120) for _ in range(n)]
        rows = stagger(xs, ws, gap_px=4)
        for i in range(n):
            for j in range(n):
                if i != j and rows[i] == rows[j] and xs[i] <= xs[j]:
                    assert xs[i] + ws[i] + 4 <= xs[j] + 1e-9  # same row: the first ends before the next starts
        assert max(rows) + 1 == _max_overlap(xs, ws, 4)  # interval graphs: greedy is optimal (Golumbic)


def test_spectrum_labels_of_close_lines_take_separate_rows():
    lines = [("Mn I 403.075", 403.075), ("Pb I 405.781", 405.781), ("Cu I 427.511", 427.511), ("Sn I 283.999", 283.999)]
    lab = spectrum_labels(lines, 220.0, 640.0, 1000.0, top=100.0)
    rows = dict(zip(lab["text"], lab["row"]))
    # 2.7 nm apart on a 420 nm axis at 1000 px is ~6 px, far less than a label's width
    assert label_width_px("Mn I 403.075") > 6.5 and rows["Mn I 403.075"] != rows["Pb I 405.781"]
    assert rows["Sn I 283.999"] == 0
    assert all(y > 100.0 for y in lab["y"])  # above the spectrum's top


@pytest.fixture(scope="module")
def real(tmp_path_factory):
    d = tmp_path_factory.mktemp("webev")
    db = str(d / "record.sqlite")
    out = real_analyses(d, db)
    rec = open_record(db)
    app = create_app(rec)
    app.testing = True
    with rec.transaction() as conn:
        rows = {(r.run_id, r.sample_id): r.id for r in conn.execute(sa.select(S.samples)).all()}
    yield app.test_client(), rec, out, rows
    rec.dispose()


def _item_ok(resp) -> dict:
    assert resp.status_code == 200 and resp.mimetype == "application/json"
    item = json.loads(resp.get_data(as_text=True))
    assert {"target_id", "root_id", "doc"} <= set(item)  # bokeh.embed.json_item's format
    return item


def test_sample_analysis_page_and_its_plots(real):
    client, rec, out, rows = real
    row = rows[(1, "LOT-1")]
    page = client.get(f"/analysis/{row}").get_data(as_text=True)
    for anchor in ('id="spectrum"', 'id="lines"', 'id="curves"', 'id="log-toggle"', "evidence.js",
                   "The certificate as it will print"):
        assert anchor in page, anchor
    assert "script-src 'self'" in client.get(f"/analysis/{row}").headers["Content-Security-Policy"]
    _item_ok(client.get(f"/analysis/{row}/spectrum.json"))
    lines = json.dumps(_item_ok(client.get(f"/analysis/{row}/lines.json")))
    assert "Zn I 472.215 (fit)" in lines and '"residual"' in lines
    for scale in ("linear", "log"):
        item = json.dumps(_item_ok(client.get(f"/analysis/{row}/curve.json?element=Zn&scale={scale}")))
        assert f"curve-{scale}" in item and "residual (response)" in item
    assert client.get(f"/analysis/{row}/curve.json?element=Xx").status_code == 404
    assert client.get(f"/analysis/{row}/boltzmann.json").status_code == 404  # calibrated run: none
    cf_row = rows[(2, "LOT-1")]
    assert 'id="boltzmann"' in client.get(f"/analysis/{cf_row}").get_data(as_text=True)
    assert "Boltzmann plot, T = " in json.dumps(_item_ok(client.get(f"/analysis/{cf_row}/boltzmann.json")))
    # the run and certificate pages link to it
    assert f'href="/analysis/{row}"' in client.get("/run/1").get_data(as_text=True)
    number = out["cal"].certificates[0].number
    assert f'href="/analysis/{row}"' in client.get(f"/certificate/{number}").get_data(as_text=True)


def test_hostile_sample_id_is_escaped_and_unknown_rows_are_404(real):
    client, _, _, rows = real
    row = rows[(1, '<b>LOT-2</b> & "x"')]
    page = client.get(f"/analysis/{row}").get_data(as_text=True)
    assert "<b>LOT-2</b>" not in page and "&lt;b&gt;LOT-2&lt;/b&gt;" in page  # Jinja2 autoescaping
    for url in ("/analysis/99999", "/analysis/99999/spectrum.json", "/analysis/99999/lines.json",
                "/analysis/..%2F..%2Fapp.py", f"/analysis/{row}/..%2F..%2Fdata.py", "/analysis/1/map.json?name=x"):
        assert client.get(url).status_code == 404, url


def test_record_without_evidence_says_so(tmp_path):
    db = str(tmp_path / "r.sqlite")
    with open_record(db) as rec:
        store_analysis(rec, **fake_analysis(tmp_path / "a", "RUN-A"))
    rec = open_record(db)
    try:
        app = create_app(rec)
        app.testing = True
        c = app.test_client()
        page = c.get("/analysis/3").get_data(as_text=True)
        assert re.search(r"holds no spectra or fits for this sample", page)
        assert c.get("/analysis/3/spectrum.json").status_code == 404
    finally:
        rec.dispose()


def test_map_shows_nodes_below_lod_blank(tmp_path):
    """A stored map is drawn with every node below its LOD as NaN (Bokeh draws NaN in nan_color:
    transparent), never as a number of noise (LOD = 3 s_blank / slope, IUPAC)."""
    from compquant.record.evidence import map_item

    db = str(tmp_path / "m.sqlite")
    kw = fake_analysis(tmp_path / "a", "RUN-M", n_samples=1)
    sid = kw["certificates"][0].sample.sample_id
    grid = map_item("Pb map", [0.0, 0.5, 1.0], [0.0, 0.5], [[-0.001, 0.0004, 0.003], [0.002, 0.0009, 0.004]],
                    0.001, element="Pb")
    with open_record(db) as rec:
        store_analysis(rec, **kw, evidence={"maps": [{**grid, "sample_id": sid}]})
    rec = open_record(db)
    try:
        app = create_app(rec)
        app.testing = True
        c = app.test_client()
        with rec.transaction() as conn:
            row = conn.execute(sa.select(S.samples.c.id).where(S.samples.c.sample_id == sid)).scalar_one()
        assert 'id="maps"' in c.get(f"/analysis/{row}").get_data(as_text=True)
        item = _item_ok(c.get(f"/analysis/{row}/map.json?name=Pb%20map"))
        text = json.dumps(item)
        assert "blank nodes: below the LOD (0.001 g/g)" in text
        # the image: Bokeh's serialised ndarray (base64 bytes, dtype, shape), decoded with numpy
        nd = next(v for v in _walk(item) if isinstance(v, dict) and v.get("type") == "ndarray"
                  and v.get("shape") == [2, 3])
        raw = base64.b64decode(nd["array"]["data"])
        raw = gzip.decompress(raw) if raw[:2] == b"\x1f\x8b" else raw  # Bokeh may gzip the buffer (RFC 1952)
        img = np.frombuffer(raw, dtype=nd["dtype"]).reshape(2, 3)
        assert sorted(img[np.isfinite(img)].tolist()) == [0.002, 0.003, 0.004]
    finally:
        rec.dispose()


def _walk(obj):
    yield obj
    if isinstance(obj, dict):
        for v in obj.values():
            yield from _walk(v)
    elif isinstance(obj, list):
        for v in obj:
            yield from _walk(v)
