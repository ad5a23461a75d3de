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


def _refused_with_terminal_stdin(argv: list[str], output) -> None:
    """``compquant argv`` run with a real pseudo-terminal as standard input: it must not wait for
    typing but refuse with one error line, exit 2, and leave ``output`` unwritten."""
    import pty

    master, slave = pty.openpty()
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    try:
        p = subprocess.run([sys.executable, "-m", "compquant", *argv], stdin=slave, capture_output=True, text=True,
                           env=env, timeout=120)
    finally:
        os.close(master)
        os.close(slave)
    assert p.returncode == 2
    assert p.stderr.count("error:") == 1 and "standard input is a terminal" in p.stderr
    assert not output.exists()


def test_standard_input_that_is_a_terminal_is_refused(tmp_path):
    run, method, _ = _calib_files(tmp_path)
    _refused_with_terminal_stdin(["calibrate", str(run), "--method", str(method), "--standards", "-",
                                  "-o", str(tmp_path / "cal.json")], tmp_path / "cal.json")


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


# ------------------- '-' for the lab profile, the specification, the saved calibration, convert's samples


ISSUED = "2026-12-01T12:00:00Z"


@pytest.fixture(scope="module")
def base_set(tmp_path_factory):
    """The bad-input corpus's valid base set (run, method, standards, lab profile, specification) and a
    calibration made from it."""
    from bad_inputs.base import write_base_files

    files = write_base_files(tmp_path_factory.mktemp("stdin-base"))
    files["cal"] = files["run"].parent / "cal.json"
    r = CliRunner().invoke(main, ["calibrate", str(files["run"]), "--method", str(files["method"]), "--standards",
                                  str(files["standards"]), "-o", str(files["cal"]), "--quiet"])
    assert r.exit_code == 0, r.output
    return files


def _analyse(files, out, stdin_opt=None, data=None):
    """``analyse`` with the saved calibration, lab profile and specification; ``stdin_opt`` given ``-``
    and its file piped in (or ``data``)."""
    opts = {"--calibration": files["cal"], "--lab": files["lab"], "--spec": files["spec"]}
    argv = ["analyse", str(files["run"]), "--method", str(files["method"]), "-o", str(out), "--no-figures", "-q",
            "--issued-at", ISSUED]
    for opt, path in opts.items():
        argv += [opt, "-" if opt == stdin_opt else str(path)]
    if data is None and stdin_opt:
        data = opts[stdin_opt].read_bytes()
    return CliRunner().invoke(main, argv, input=data)


def _certificate(out: Path) -> dict:
    import json

    return json.loads(next(out.glob("LOT-1*.json")).read_text(encoding="utf-8"))


@pytest.mark.parametrize("opt,role,key", [("--calibration", "calibration", "cal"), ("--lab", "lab profile", "lab"),
                                          ("--spec", "specification", "spec")])
def test_lab_spec_calibration_from_standard_input_give_the_file_results(base_set, tmp_path, opt, role, key):
    r_file = _analyse(base_set, tmp_path / "file")
    r_in = _analyse(base_set, tmp_path / "stdin", opt)
    assert r_file.exit_code in (0, 3) and r_in.exit_code in (0, 3), r_in.output  # 3: no measurement time
    assert r_in.exit_code == r_file.exit_code
    c_file, c_in = _certificate(tmp_path / "file"), _certificate(tmp_path / "stdin")
    f_file = {f["role"]: f for f in c_file["provenance"]["files"]}
    f_in = {f["role"]: f for f in c_in["provenance"]["files"]}
    # provenance: the SHA-256 (FIPS 180-4, hashlib) of the bytes piped in, named <stdin>; the file's own hash
    data = base_set[key].read_bytes()
    assert f_in[role] == {"role": role, "name": "<stdin>", "sha256": _sha256_hex(data)}
    assert f_file[role] == {"role": role, "name": base_set[key].name, "sha256": _sha256_hex(data)}
    # the same bytes give the same certificate: number, results, conformity, lab block (common practice:
    # a certificate depends on what was read, not where from)
    f_in[role] = f_file[role]
    c_in["provenance"]["files"] = [f_in[f["role"]] for f in c_in["provenance"]["files"]]
    if role == "calibration":  # the calibration block names the file applied, too
        assert c_in["calibration"]["file_name"] == "<stdin>" and c_file["calibration"]["file_name"] == "cal.json"
        assert c_in["calibration"]["file_sha256"] == c_file["calibration"]["file_sha256"] == _sha256_hex(data)
        c_in["calibration"]["file_name"] = "cal.json"
    assert c_in == c_file


def test_calibration_from_standard_input_in_quantify(base_set, tmp_path):
    import json

    run, method, cal = str(base_set["run"]), str(base_set["method"]), base_set["cal"]
    r_file = CliRunner().invoke(main, ["quantify", run, "--method", method, "--calibration", str(cal),
                                       "-o", str(tmp_path / "file.csv"), "--quiet"])
    r_in = CliRunner().invoke(main, ["quantify", run, "--method", method, "--calibration", "-",
                                     "-o", str(tmp_path / "stdin.csv"), "--quiet"], input=cal.read_bytes())
    assert r_file.exit_code == 0 and r_in.exit_code == 0, r_in.output
    pd.testing.assert_frame_equal(pd.read_csv(tmp_path / "stdin.csv"), pd.read_csv(tmp_path / "file.csv"))
    p_in = json.loads((tmp_path / "stdin-provenance.json").read_text())
    p_file = json.loads((tmp_path / "file-provenance.json").read_text())
    # SHA-256 (FIPS 180-4, hashlib) of the bytes piped in, which are the file's
    assert p_in["calibration_path"] == "<stdin>" and p_file["calibration_path"] == str(cal.resolve())
    assert p_in["calibration_file"] == {"name": "<stdin>", "sha256": _sha256_hex(cal.read_bytes())}
    assert p_file["calibration_file"] == {"name": cal.name, "sha256": _sha256_hex(cal.read_bytes())}


def test_convert_samples_from_standard_input(tmp_path):
    import numpy as np

    from compquant.run import Run

    wl = np.linspace(300, 310, 20)
    tab = tmp_path / "wide.csv"
    tab.write_text("\n".join(["wavelength,CRM-1:1,CRM-1:2,LOT-9"]
                             + [f"{w},{1 + i},{2 + i},{3 + i}" for i, w in enumerate(wl)]) + "\n")
    samples = b"sample_id,role,standard_ref,description\nCRM-1,standard,CRM-1,first standard\nLOT-9,unknown,,lot 9\n"
    smp = tmp_path / "samples.csv"
    smp.write_bytes(samples)
    r_file = CliRunner().invoke(main, ["convert", "--spectra", str(tab), "--samples", str(smp),
                                       "-o", str(tmp_path / "file.h5")])
    r_in = CliRunner().invoke(main, ["convert", "--spectra", str(tab), "--samples", "-",
                                     "-o", str(tmp_path / "stdin.h5")], input=samples)
    assert r_file.exit_code == 0 and r_in.exit_code == 0, r_in.output
    with Run.open(tmp_path / "file.h5") as a, Run.open(tmp_path / "stdin.h5") as b:
        pd.testing.assert_frame_equal(a.samples, b.samples)
        # the wide table's values, shot by shot (the input itself)
        np.testing.assert_array_equal(b.sample_spectra("LOT-9")[0], 3 + np.arange(20))
        np.testing.assert_array_equal(a.sample_spectra("CRM-1"), b.sample_spectra("CRM-1"))


def _one_error(r, *fragments):
    assert r.exit_code == 2, r.output
    errors = [ln for ln in r.stderr.splitlines() if ln.startswith("error:")]
    assert len(errors) == 1 and "Traceback" not in r.output, r.stderr
    for frag in fragments:
        assert frag in errors[0], errors[0]


@pytest.mark.parametrize("opt", ["--calibration", "--lab", "--spec"])
def test_empty_standard_input_is_refused_for_each_option(base_set, tmp_path, opt):
    r = _analyse(base_set, tmp_path / "out", opt, b"")
    _one_error(r, "standard input is empty", "<stdin>")
    assert not (tmp_path / "out").exists()


def test_oversize_standard_input_is_refused(base_set, tmp_path, monkeypatch):
    from compquant import fileio

    # the lab profile: MAX_TABLE_BYTES (16 MiB) + 1 byte, a TOML comment that never ends
    r = _analyse(base_set, tmp_path / "out", "--lab", b"#" * (fileio.MAX_TABLE_BYTES + 1))
    _one_error(r, "larger than 16 MiB", "<stdin>")
    # the calibration's own limit, looked up when the option is used (lowered here: 256 MiB is too much to pipe)
    monkeypatch.setattr(fileio, "MAX_CALIBRATION_BYTES", 1024 * 1024)
    r = CliRunner().invoke(main, ["quantify", str(base_set["run"]), "--calibration", "-", "-o",
                                  str(tmp_path / "out" / "q.csv")], input=b" " * (1024 * 1024 + 1))
    _one_error(r, "larger than 1 MiB", "<stdin>")
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("argv", [
    ["analyse", "{run}", "--method", "{method}", "--standards", "-", "--lab", "-", "-o", "{out}"],
    ["analyse", "{run}", "--method", "{method}", "--calibration", "-", "--spec", "-", "-o", "{out}"],
    ["quantify", "{run}", "--calibration", "-", "--standards", "-", "-o", "{out}/q.csv"],
])
def test_a_second_dash_is_refused(base_set, tmp_path, argv):
    argv = [a.format(run=base_set["run"], method=base_set["method"], out=tmp_path / "out") for a in argv]
    r = CliRunner().invoke(main, argv, input=base_set["standards"].read_bytes())
    _one_error(r, "only one input can be read from standard input")
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("opt", ["--lab", "--calibration"])
def test_terminal_as_standard_input_is_refused_for_lab_and_calibration(base_set, tmp_path, opt):
    argv = ["analyse", str(base_set["run"]), "--method", str(base_set["method"]), opt, "-",
            "-o", str(tmp_path / "out")]
    if opt == "--lab":
        argv += ["--calibration", str(base_set["cal"])]
    _refused_with_terminal_stdin(argv, tmp_path / "out")


def test_lab_profile_from_standard_input_in_multi_run_mode(base_set, tmp_path):
    import shutil

    runs = tmp_path / "runs"
    runs.mkdir()
    for name in ("a", "b"):
        shutil.copy(base_set["run"], runs / f"{name}.h5")
    argv = ["analyse", str(runs / "a.h5"), str(runs / "b.h5"), "--method", str(base_set["method"]),
            "--calibration", str(base_set["cal"]), "--lab", "-", "-o", str(tmp_path / "out"), "--no-figures", "-q",
            "--issued-at", ISSUED]
    r = CliRunner().invoke(main, argv, input=base_set["lab"].read_bytes())
    assert r.exit_code in (0, 3), r.output  # 3: the invented run states no measurement time
    for name in ("a", "b"):  # read once, sent to each run's task by value: every certificate names it
        files = {f["role"]: f for f in _certificate(tmp_path / "out" / name)["provenance"]["files"]}
        assert files["lab profile"] == {"role": "lab profile", "name": "<stdin>",
                                        "sha256": _sha256_hex(base_set["lab"].read_bytes())}
        assert files["calibration"]["name"] == "cal.json"
