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
