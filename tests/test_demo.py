"""`compquant demo` end to end: the shipped demo files -> certificates, as on a fresh machine."""

from __future__ import annotations

import json
import os

import jsonschema
import pytest
from click.testing import CliRunner
from pypdf import PdfReader

from compquant.cli import main
from compquant.cli.cmd_demo import find_demo_files
from compquant.report.jsonform import load_schema


@pytest.mark.slow
def test_demo_end_to_end(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)  # demo files are found beside the package source tree, not in ./
    files = find_demo_files()
    assert files["method"].name == "method.toml" and files["lab"].name == "lab.toml"
    r = CliRunner().invoke(main, ["demo", "--quiet", "--issued-at", "2026-12-01T21:00:00Z"])
    assert r.exit_code == 0, r.output
    out = tmp_path / "compquant-demo"
    summary = json.loads((out / "summary.json").read_text())
    assert len(summary["certificates"]) == 5  # the five unknown lots of the demo scenario
    assert "open the certificates" in r.output and "LOT-2611-A" in r.output
    schema = load_schema()
    for c in summary["certificates"]:
        doc = json.loads((out / c["json"]).read_text())
        jsonschema.validate(doc, schema)
        assert doc["laboratory"]["name"] == "Harbourside Materials Testing Laboratory"
        assert doc["conformity"]["decision_rule"] == "guard-band"
        reader = PdfReader(str(out / c["pdf"]))
        assert len(reader.pages) == c["pages"]
        first = reader.pages[0].extract_text()
        assert c["number"] in first and f"Page 1 of {c['pages']}" in first
        assert "End of certificate" in reader.pages[-1].extract_text()
    assert (out / "lims.csv").stat().st_size > 0
    assert os.path.isfile(out / "calibration.json")


def test_demo_files_missing_is_a_clear_error(tmp_path, monkeypatch):
    import compquant.cli.cmd_demo as cmd_demo

    monkeypatch.setattr(cmd_demo, "_roots", lambda: [tmp_path])
    r = CliRunner().invoke(main, ["demo", "-o", str(tmp_path / "out")])
    assert r.exit_code == 2
    assert "error:" in r.output and "demo files not found" in r.output and "source tree" in r.output
    (tmp_path / "demo_runs").mkdir()
    r = CliRunner().invoke(main, ["demo", "-o", str(tmp_path / "out")])
    assert r.exit_code == 2 and "demo files missing" in r.output and "method" in r.output
