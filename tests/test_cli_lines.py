"""``compquant lines`` and ``compquant plot`` through click's CliRunner."""

from __future__ import annotations

import pandas as pd
import pytest
from _lines_data import make_run
from click.testing import CliRunner

from compquant.cli import main
from compquant.lines import LINE_TABLE_COLUMNS, SHOT_TABLE_COLUMNS

METHOD = """
[method]
id = "cli-test"
version = "1"
technique = "LIBS"

[preprocess.baseline]
method = "snip"
max_half_window = 25

[measure]
window_nm = 0.3
side_nm = 0.1

[[lines]]
id = "Cu I 324.754"

[[lines]]
id = "Zn I 330.259"
mode = "fit"
fwhm_nm = 0.04
"""

AREAS = {"Cu I 324.754": 400.0, "Zn I 330.259": 30.0}


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("cli")
    run = make_run(d / "run.h5", [("STD 1", "standard", 8, AREAS), ("LOT/7", "unknown", 6, AREAS)])
    meth = d / "method.toml"
    meth.write_text(METHOD, encoding="utf-8")
    return d, run, meth


def test_lines_writes_tables(files):
    d, run, meth = files
    out = d / "out" / "lines.csv"
    res = CliRunner().invoke(main, ["lines", str(run), "--method", str(meth), "-o", str(out)])
    assert res.exit_code == 0, res.output
    t = pd.read_csv(out, keep_default_na=False)
    assert list(t.columns) == LINE_TABLE_COLUMNS and len(t) == 4
    shots = pd.read_csv(d / "out" / "lines-shots.csv")
    assert list(shots.columns) == SHOT_TABLE_COLUMNS and len(shots) == 14 * 2
    qc = pd.read_csv(d / "out" / "lines-qc.csv")
    assert set(qc.sample_id) == {"STD 1", "LOT/7"}
    assert (d / "out" / "lines-provenance.json").exists()
    assert "Cu I 324.754" in res.output and "wrote" in res.output


def test_lines_bad_method_is_one_line_error(files):
    d, run, meth = files
    bad = d / "bad.toml"
    bad.write_text(METHOD.replace("[measure]", "[measure]\nwindow = 3"), encoding="utf-8")
    res = CliRunner().invoke(main, ["lines", str(run), "--method", str(bad), "-o", str(d / "x.csv")])
    assert res.exit_code == 2
    assert "window" in res.output and "Traceback" not in res.output
    assert not (d / "x.csv").exists()


def test_plot_png(files):
    d, run, meth = files
    out = d / "plot.png"
    res = CliRunner().invoke(main, ["plot", str(run), "--sample", "LOT/7", "--method", str(meth), "-o", str(out)])
    assert res.exit_code == 0, res.output
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG specification)
    res = CliRunner().invoke(main, ["plot", str(run), "--sample", "STD 1", "-o", str(d / "raw.png")])
    assert res.exit_code == 0, res.output
    res = CliRunner().invoke(
        main, ["plot", str(run), "--sample", "STD 1", "--range", "324", "331", "-o", str(d / "zoom.png")]
    )
    assert res.exit_code == 0, res.output
    res = CliRunner().invoke(main, ["plot", str(run), "--sample", "STD 1", "--range", "500", "510"])
    assert res.exit_code == 2 and "no pixels" in res.output
    res = CliRunner().invoke(main, ["plot", str(run), "--sample", "NOPE", "-o", str(d / "n.png")])
    assert res.exit_code == 2 and "NOPE" in res.output
