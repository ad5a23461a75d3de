"""Issue 9: every malformed input of the corpus (tests/bad_inputs) fails cleanly through the CLI.

For each case: exit code 2, exactly one line on stderr starting ``error:`` that names the bad
file and the problem, no traceback, nothing written (output folder absent or empty, no temporary
``.part`` files) and every input file unchanged (SHA-256 before and after). The rule is the
contract of docs/architecture.md (errors) and DEVELOPERS.md (bad inputs are tested through the CLI).
"""

from __future__ import annotations

import hashlib
import os
import subprocess
import sys
from pathlib import Path

import pytest
from bad_inputs.base import write_base_files
from bad_inputs.corpus import build_corpus, case_names
from click.testing import CliRunner

from compquant.cli import main

NAMES = case_names()
ROOT = Path(__file__).resolve().parents[1]


def _sha(p: Path) -> str:
    return hashlib.sha256(p.read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def corpus(tmp_path_factory):
    base = write_base_files(tmp_path_factory.mktemp("base"))
    cal = base["run"].parent / "calibration.json"
    r = CliRunner().invoke(
        main,
        [
            "calibrate",
            str(base["run"]),
            "--method",
            str(base["method"]),
            "--standards",
            str(base["standards"]),
            "-o",
            str(cal),
            "--quiet",
        ],
    )
    assert r.exit_code == 0, r.output
    cases = build_corpus(tmp_path_factory.mktemp("corpus"), cal)
    return {c.name: c for c in cases}


def _files_under(p: Path) -> list[Path]:
    if not p.exists():
        return []
    if p.is_file():
        return [p]
    return [q for q in p.rglob("*") if q.is_file()]


def test_corpus_size_and_spread():
    # issue 9 asks for at least 30 malformed inputs across runs, methods, standards,
    # calibrations, lab profiles and specifications
    assert len(NAMES) >= 30 and len(set(NAMES)) == len(NAMES)
    kinds = {n.split("_")[0] for n in NAMES}
    assert {"run", "method", "standards", "calibration", "lab", "spec"} <= kinds


@pytest.mark.parametrize("name", NAMES)
def test_bad_input_gives_one_line_error(corpus, name):
    c = corpus[name]
    before = {p: _sha(p) for p in c.inputs}
    r = CliRunner().invoke(main, c.argv)
    assert r.exception is None or isinstance(r.exception, SystemExit), (
        f"unhandled {type(r.exception).__name__}: {r.exception}"
    )
    assert r.exit_code == 2, (r.exit_code, r.output)
    err = r.stderr.strip("\n").splitlines()
    assert len(err) == 1, r.stderr
    line = err[0]
    assert line.startswith("error: ")
    assert "Traceback" not in r.output
    assert str(c.bad_file) in line, f"the message does not name {c.bad_file}: {line}"
    for frag in c.expect:
        assert frag.lower() in line.lower(), f"{frag!r} not in {line!r}"
    # nothing written, no temporary leftovers, inputs untouched
    for out in c.outputs:
        assert _files_under(out) == [], f"output written: {_files_under(out)}"
    leftovers = [p for p in c.folder.rglob("*") if p.name.endswith(".part")]
    assert leftovers == []
    assert {p: _sha(p) for p in c.inputs} == before


@pytest.mark.parametrize("name", ["run_truncated_hdf5", "standards_negative_value", "calibration_newer_schema"])
def test_bad_input_through_the_real_entry_point(corpus, name):
    """The same through a real process (``python -m compquant``): stderr is one line, exit 2."""
    c = corpus[name]
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""), MPLBACKEND="Agg")
    p = subprocess.run(
        [sys.executable, "-m", "compquant", *c.argv], capture_output=True, text=True, env=env, timeout=300
    )
    assert p.returncode == 2
    lines = p.stderr.strip("\n").splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ") and str(c.bad_file) in lines[0]
    assert "Traceback" not in p.stderr + p.stdout
