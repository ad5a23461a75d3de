"""Command-line conventions of every command (issue 20, item 3): lazy imports, -v/-q, warnings in
the log, the short safety note, ``-`` for standard output."""

from __future__ import annotations

import io
import os
import subprocess
import sys
import warnings
from pathlib import Path

import click
import pandas as pd
import pytest
from click.testing import CliRunner

from compquant.cli import CompquantGroup, main
from compquant.cli._common import SAFETY

ROOT = Path(__file__).resolve().parents[1]
HEAVY = ("numpy", "pandas", "h5py", "scipy", "matplotlib", "sklearn", "reportlab", "dask")
COMMANDS = sorted(main.list_commands(click.Context(main)))


def _modules_after(argv: list[str]) -> list[str]:
    code = (
        "import sys\n"
        "from compquant.cli import main\n"
        "try:\n"
        f"    main({argv!r}, standalone_mode=False)\n"
        "except SystemExit:\n"
        "    pass\n"
        f"print('HEAVY:' + ' '.join(m for m in {HEAVY!r} if m in sys.modules))\n"
    )
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    p = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=120)
    assert p.returncode == 0, p.stderr
    return p.stdout.strip().splitlines()[-1].removeprefix("HEAVY:").split()


@pytest.mark.parametrize("argv", [["--help"], ["analyse", "--help"], ["lines", "--help"], ["inspect", "--help"],
                                  ["identify", "--help"], ["convert", "--help"], ["cf", "--help"]])
def test_help_imports_no_numerical_library(argv):
    # --help must start fast (issue 20: 1.5-2.4 s before, pandas and h5py imported up front); the
    # time itself is not tested here (no timed tests), what makes it slow is
    assert _modules_after(argv) == []


@pytest.mark.parametrize("name", COMMANDS)
def test_every_command_has_verbose_and_quiet_and_the_short_safety_note(name):
    cmd = main.get_command(click.Context(main), name)
    opts = {o for p in cmd.params for o in getattr(p, "opts", [])}
    assert {"-v", "--verbose", "-q", "--quiet"} <= opts
    r = CliRunner().invoke(main, [name, "--help"])
    assert r.exit_code == 0
    text = " ".join(r.output.split())
    if name != "safety":
        # the full notes filled 42 of 84 lines of analyse --help; now the note is short (checked here)
        # and the rest of the help is the command's own options
        if name in ("analyse", "calibrate", "cf", "lines", "demo"):  # the commands that drive the method
            assert "Safety:" in r.output
        if "Safety:" in r.output:
            note = r.output[r.output.index("Safety:"):]
            assert 2 <= len(note.splitlines()) <= 8, note
    if cmd.epilog and "safety" in cmd.epilog.lower():  # the short note, not the full text
        assert SAFETY in cmd.epilog and "compquant safety" in text


def test_python_warnings_become_one_log_line():
    grp = CompquantGroup(name="t")

    @grp.command("warn")
    def warn():
        warnings.warn("something odd", UserWarning, stacklevel=1)
        click.echo("done")

    r = CliRunner().invoke(grp, ["warn"])
    assert r.exit_code == 0
    assert "warning: UserWarning: something odd" in r.output
    assert "warnings.warn(" not in r.output  # no source line
    assert sum("something odd" in ln for ln in r.output.splitlines()) == 1


def test_quiet_hides_notes_and_verbose_shows_details(tmp_path):
    import logging

    grp = CompquantGroup(name="t")

    @grp.command("talk")
    def talk():
        log = logging.getLogger("compquant.test")
        log.debug("detail")
        log.info("note")
        log.warning("careful")

    out = {k: CliRunner().invoke(grp, argv).output for k, argv in
           {"default": ["talk"], "quiet": ["talk", "-q"], "verbose": ["talk", "-v"]}.items()}
    assert "note" in out["default"] and "warning: careful" in out["default"] and "detail" not in out["default"]
    assert "note" not in out["quiet"] and "careful" not in out["quiet"]  # errors only
    assert "detail" in out["verbose"]


def test_safety_command_prints_the_full_notes():
    from compquant.report.safety import SAFETY_NOTES

    r = CliRunner().invoke(main, ["safety", "--markdown"])
    assert r.exit_code == 0
    assert all(n.title in r.output for n in SAFETY_NOTES)


def test_lines_table_to_standard_output(tmp_path):
    from _lines_data import make_run

    from compquant.lines import LINE_TABLE_COLUMNS

    run = tmp_path / "r.h5"
    make_run(run, [("A", "standard", 5, {"Cu I 324.754": 400.0})])
    method = tmp_path / "m.toml"
    method.write_text('[method]\nid = "t"\nversion = "1"\ntechnique = "LIBS"\n\n[[lines]]\nid = "Cu I 324.754"\n')
    r = CliRunner().invoke(main, ["lines", str(run), "--method", str(method), "-o", "-"])
    assert r.exit_code == 0, r.output
    table = pd.read_csv(io.StringIO(r.stdout))
    assert list(table.columns) == LINE_TABLE_COLUMNS and len(table) == 1
    assert sorted(p.name for p in tmp_path.iterdir()) == ["m.toml", "r.h5"]  # nothing else written


# ---------------------------------------------------------------- '-' for standard input (issue 20, item 3)


def _calib_files(tmp_path):
    from test_calib_cli import _write

    _write(tmp_path)
    return tmp_path / "run.h5", tmp_path / "method.toml", tmp_path / "std.csv"


def test_standards_from_standard_input_are_hashed_and_used_like_the_file(tmp_path):
    run, method, std = _calib_files(tmp_path)
    data = std.read_bytes()
    base = ["calibrate", str(run), "--method", str(method), "--quiet"]
    r_file = CliRunner().invoke(main, base + ["--standards", str(std), "-o", str(tmp_path / "file.json")])
    r_in = CliRunner().invoke(main, base + ["--standards", "-", "-o", str(tmp_path / "stdin.json")], input=data)
    assert r_file.exit_code == 0 and r_in.exit_code == 0, r_in.output
    import hashlib
    import json

    cal_file = json.loads((tmp_path / "file.json").read_text())
    cal_in = json.loads((tmp_path / "stdin.json").read_text())
    # provenance: the SHA-256 of the bytes piped in (FIPS 180-4, hashlib), the file's own, named <stdin>
    assert cal_in["standards_sha256"] == hashlib.sha256(data).hexdigest() == cal_file["standards_sha256"]
    assert cal_in["standards_path"] == "<stdin>" and cal_file["standards_path"] == str(std)
    assert cal_in["curves"] == cal_file["curves"] and cal_in["standards"] == cal_file["standards"]


def test_standards_from_stdin_and_results_to_stdout_combine(tmp_path):
    run, method, std = _calib_files(tmp_path)
    cal = tmp_path / "cal.json"
    assert CliRunner().invoke(main, ["calibrate", str(run), "--method", str(method), "--standards", str(std),
                                     "-o", str(cal), "--quiet"]).exit_code == 0
    before = sorted(p.name for p in tmp_path.iterdir())
    r = CliRunner().invoke(main, ["quantify", str(run), "--calibration", str(cal), "--standards", "-", "-o", "-"],
                           input=std.read_bytes())
    assert r.exit_code == 0, r.output
    piped = pd.read_csv(io.StringIO(r.stdout))
    assert sorted(p.name for p in tmp_path.iterdir()) == before  # stdout only: no file, and no file named '-'
    r2 = CliRunner().invoke(main, ["quantify", str(run), "--calibration", str(cal), "--standards", str(std),
                                   "-o", str(tmp_path / "res.csv"), "--quiet"])
    assert r2.exit_code == 0, r2.output
    pd.testing.assert_frame_equal(piped, pd.read_csv(tmp_path / "res.csv"))
    import json

    prov = json.loads((tmp_path / "res-provenance.json").read_text())
    assert prov["standards"]["name"] == std.name and prov["standards"]["sha256"] == _sha256_hex(std.read_bytes())


def _sha256_hex(data: bytes) -> str:
    import hashlib

    return hashlib.sha256(data).hexdigest()


def test_standards_toml_from_standard_input(tmp_path):
    from compquant.calibrate import load_standards
    from compquant.fileio import InputBytes

    toml = b'# certified values (invented)\n[[standard]]\nid = "S1"\nmatrix = "Cu"\n' \
           b'elements.Zn = {value = 1.5, U = 0.04, k = 2, unit = "%"}\n'
    src = InputBytes("<stdin>", "<stdin>", toml, _sha256_hex(toml))
    df = load_standards(src)
    # GUM (JCGM 100:2008) 6.2: u = U / k; 1.5 % = 0.015 g/g
    assert df.loc[0, "mass_fraction"] == pytest.approx(0.015) and df.loc[0, "u"] == pytest.approx(0.0002)
    assert df.attrs["name"] == "<stdin>" and df.attrs["sha256"] == _sha256_hex(toml)


@pytest.mark.parametrize("data,expect", [
    (b"", "standard input is empty"),
    (b"standard_id,matrix,element,mass_fraction,expanded_uncertainty,k,unit,source\nS1,Cu,Zq,1,0.1,2,%,x\n",
     "<stdin>: line 2"),
    (b"\xff\xfe\x00s", "not UTF-8"),
])
def test_bad_standard_input_is_one_error_line(tmp_path, data, expect):
    run, method, _ = _calib_files(tmp_path)
    out = tmp_path / "o" / "cal.json"
    r = CliRunner().invoke(main, ["calibrate", str(run), "--method", str(method), "--standards", "-", "-o", str(out)],
                           input=data)
    assert r.exit_code == 2, r.output
    errors = [ln for ln in r.stderr.splitlines() if ln.startswith("error:")]
    assert len(errors) == 1 and expect in errors[0] and "Traceback" not in r.output
    assert not out.parent.exists()


def test_standard_input_that_is_a_terminal_is_refused(tmp_path):
    # a real pseudo-terminal as standard input: the command must not wait for typing
    import pty

    run, method, _ = _calib_files(tmp_path)
    master, slave = pty.openpty()
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    try:
        p = subprocess.run([sys.executable, "-m", "compquant", "calibrate", str(run), "--method", str(method),
                            "--standards", "-", "-o", str(tmp_path / "cal.json")], stdin=slave,
                           capture_output=True, text=True, env=env, timeout=120)
    finally:
        os.close(master)
        os.close(slave)
    assert p.returncode == 2
    assert p.stderr.count("error:") == 1 and "standard input is a terminal" in p.stderr
    assert not (tmp_path / "cal.json").exists()


def test_standard_input_is_bounded(monkeypatch):
    import compquant.fileio as fio
    from compquant.errors import InputError

    with pytest.raises(InputError, match="larger than"):
        fio.read_stdin("standards file", limit=1024 * 1024, stream=io.BytesIO(b"#" * (1024 * 1024 + 1)))
    got = fio.read_stdin("standards file", limit=1024 * 1024, stream=io.BytesIO(b"#" * (1024 * 1024)))
    assert len(got.data) == 1024 * 1024 and got.name == "<stdin>"


def test_only_one_option_reads_standard_input():
    from compquant.cli._stdin import table_input

    grp = CompquantGroup(name="t")

    @grp.command("two")
    @table_input("--first", what="first table", help="First.")
    @table_input("--second", what="second table", help="Second.")
    def two(first, second):
        click.echo(f"{getattr(first, 'name', first)} {getattr(second, 'name', second)}")

    r = CliRunner().invoke(grp, ["two", "--first", "-", "--second", "-"], input=b"a,b\n1,2\n")
    assert r.exit_code == 2
    errors = [ln for ln in r.stderr.splitlines() if ln.startswith("error:")]
    assert len(errors) == 1 and "only one input can be read from standard input" in errors[0]
    r = CliRunner().invoke(grp, ["two", "--first", "x.csv", "--second", "-"], input=b"a,b\n1,2\n")
    assert r.exit_code == 0 and r.stdout.strip() == "x.csv <stdin>"


def test_standards_from_standard_input_in_multi_run_mode(tmp_path):
    import json
    import shutil

    run, method, std = _calib_files(tmp_path)
    runs = tmp_path / "runs"
    runs.mkdir()
    shutil.copy(run, runs / "a.h5")
    shutil.copy(run, runs / "b.h5")
    r = CliRunner().invoke(main, ["analyse", str(runs / "a.h5"), str(runs / "b.h5"), "--method", str(method),
                                  "--standards", "-", "-o", str(tmp_path / "out"), "--no-figures", "-q",
                                  "--issued-at", "2026-12-01T12:00:00Z"], input=std.read_bytes())
    assert r.exit_code in (0, 3), r.output  # 3: the invented run states no measurement time
    for name in ("a", "b"):
        cert = json.loads(next((tmp_path / "out" / name).glob("LOT-1*.json")).read_text())
        files = {f["role"]: f for f in cert["provenance"]["files"]}
        assert files["standards"] == {"name": "<stdin>", "role": "standards", "sha256": _sha256_hex(std.read_bytes())}
