"""Safe outputs (issue 9): hostile sample ids cannot escape the output folder or change the
certificate's structure, and the package never unpickles, evaluates or shells out user input.

The run's unknowns carry ids with path separators, ``..``, control characters, a 300-character
name and reportlab/HTML markup. After ``compquant analyse``: every file written is inside the
output folder, file names hold only safe characters, the JSON certificate and the LIMS CSV keep
the id exactly, and the PDF's extracted text shows the id literally (markup not interpreted,
control characters shown as ``\\xNN`` escapes by :func:`compquant.report.pdf.visible_text`).
"""

from __future__ import annotations

import ast
import csv
import hashlib
import io
import json
import re
from pathlib import Path

import numpy as np
import pytest
from bad_inputs.base import LAB_TOML, METHOD_TOML, SPEC_TOML, STANDARDS_CSV, base_arrays
from click.testing import CliRunner
from pypdf import PdfReader

from compquant.cli import main
from compquant.report.pdf import visible_text
from compquant.run import write_run

HOSTILE = [
    "../../escaped/LOT-1",
    "..",
    "a/b\\c:d",
    "LOT\x07\x1b[31m red\ttab",
    "L" * 300,
    "<b>bold</b> &amp; <para>x</para> <font size=40>big</font>",
    "/etc/passwd",
]


def _build(tmp: Path) -> dict:
    wl, spectra, samples, idx, dark = base_arrays()
    # the two unknowns of the base run get hostile ids; more unknowns reuse their spectra
    lot_rows = [i for i, s in enumerate(samples) if s["role"] == "unknown"]
    extra_spectra, extra_idx = [], []
    new_samples = [s for s in samples if s["role"] != "unknown"]
    keep = [i for i, s in enumerate(samples) if s["role"] != "unknown"]
    remap = {old: new for new, old in enumerate(keep)}
    rows = [r for r in range(len(idx)) if idx[r] in remap]
    spectra_out = [spectra[rows]]
    idx_out = [np.array([remap[idx[r]] for r in rows])]
    for k, sid in enumerate(HOSTILE):
        src = lot_rows[k % len(lot_rows)]
        new_samples.append({"sample_id": sid, "role": "unknown", "standard_ref": "", "description": f"hostile {k}"})
        sel = np.flatnonzero(idx == src)
        extra_spectra.append(spectra[sel])
        extra_idx.append(np.full(sel.size, len(new_samples) - 1))
    spectra_all = np.vstack(spectra_out + extra_spectra)
    idx_all = np.concatenate(idx_out + extra_idx)
    box = tmp / "box"
    box.mkdir()
    run = write_run(
        box / "run.h5",
        wl,
        spectra_all,
        new_samples,
        idx_all,
        dark=dark,
        saturation=65535,
        created="2026-12-01T00:00:00Z",
        # when it was measured and the response curve the method asks for: the certificates can be
        # valid for release (compquant.report.release, rules dates and method-step-skipped)
        acquisition={"start_time": "2026-11-30T09:00:00Z"},
        response=np.ones(wl.size),
    )
    files = {"run": run}
    for name, text in (
        ("method.toml", METHOD_TOML),
        ("standards.csv", STANDARDS_CSV),
        ("lab.toml", LAB_TOML),
        ("spec.toml", SPEC_TOML),
    ):
        (box / name).write_text(text, encoding="utf-8")
        files[name.split(".")[0]] = box / name
    return files


@pytest.fixture(scope="module")
def hostile(tmp_path_factory):
    tmp_path = tmp_path_factory.mktemp("hostile")
    files = _build(tmp_path)
    before = {p for p in tmp_path.rglob("*")}
    out = tmp_path / "box" / "out"
    r = CliRunner().invoke(
        main,
        [
            "analyse",
            str(files["run"]),
            "--method",
            str(files["method"]),
            "--standards",
            str(files["standards"]),
            "--lab",
            str(files["lab"]),
            "--spec",
            str(files["spec"]),
            "-o",
            str(out),
            "--quiet",
            "--issued-at",
            "2026-12-01T21:00:00Z",
        ],
    )
    assert r.exit_code == 0, r.output
    return tmp_path, files, out, before


def test_hostile_sample_ids_stay_inside_and_literal(hostile):
    tmp_path, files, out, before = hostile
    new = {p for p in tmp_path.rglob("*")} - before
    for p in new:
        assert p.resolve().is_relative_to(out.resolve()), f"written outside the output folder: {p}"
        assert re.fullmatch(r"[A-Za-z0-9._+-]+", p.name), p.name
        assert len(p.name) <= 120 and not p.name.startswith(".")
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    certs = {c["sample_id"]: c for c in summary["certificates"]}
    assert set(certs) == set(HOSTILE)
    assert len({c["pdf"] for c in certs.values()}) == len(HOSTILE)  # distinct files, none overwritten
    lims = list(csv.DictReader(io.StringIO((out / "lims.csv").read_text(encoding="utf-8"))))
    lims_ids = {row[next(k for k in row if "sample" in k.lower())] for row in lims}
    for sid, c in certs.items():
        doc = json.loads((out / c["json"]).read_text(encoding="utf-8"))
        assert doc["sample"]["sample_id"] == sid  # JSON keeps the id exactly
        assert sid in lims_ids or visible_text(sid) in lims_ids
        reader = PdfReader(str(out / c["pdf"]))
        text = "".join(page.extract_text() for page in reader.pages)
        squeeze = re.sub(r"\s+", "", text)
        assert re.sub(r"\s+", "", visible_text(sid)) in squeeze, sid  # literal, markup not interpreted
        assert len(reader.pages) == c["pages"]
    # the markup id did not change the structure: same page count as a plain id's certificate
    pages = {certs[s]["pages"] for s in ("..", HOSTILE[5])}
    assert len(pages) == 1


def test_provenance_hashes_are_those_of_the_files(hostile):
    """Every certificate names each input and the calibration it wrote with the file's SHA-256
    (hashlib, FIPS 180-4), so a certificate can be traced to the exact bytes it came from."""
    _, files, out, _ = hostile
    by_name = {p.name: p for p in files.values()} | {"calibration.json": out / "calibration.json"}
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    for c in summary["certificates"]:
        doc = json.loads((out / c["json"]).read_text(encoding="utf-8"))
        prov = doc["provenance"]
        roles = {f["role"] for f in prov["files"]}
        assert {"run", "method", "standards", "lab profile", "specification"} <= roles
        for f in prov["files"]:
            assert f["sha256"] == hashlib.sha256(by_name[f["name"]].read_bytes()).hexdigest(), f
        assert prov["run_sha256"] == hashlib.sha256(files["run"].read_bytes()).hexdigest()


# ------------------------------------------------------------------ no code execution from inputs

PACKAGE = Path(__file__).resolve().parents[1] / "compquant"
FORBIDDEN_MODULES = {"pickle", "cPickle", "dill", "marshal", "shelve", "cloudpickle", "yaml"}
FORBIDDEN_CALLS = {"eval", "exec", "compile", "__import__", "input"}
FORBIDDEN_ATTRS = {
    ("yaml", "load"),
    ("os", "system"),
    ("os", "popen"),
    ("pd", "read_pickle"),
    ("pandas", "read_pickle"),
    ("np", "load"),
    ("numpy", "load"),
    ("pickle", "loads"),
}


def _violations(path: Path, root: Path = PACKAGE.parent) -> list[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    bad = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            bad += [f"import {a.name}" for a in node.names if a.name.split(".")[0] in FORBIDDEN_MODULES]
        elif isinstance(node, ast.ImportFrom) and node.module and node.module.split(".")[0] in FORBIDDEN_MODULES:
            bad.append(f"from {node.module} import")
        elif isinstance(node, ast.Call):
            f = node.func
            if isinstance(f, ast.Name) and f.id in FORBIDDEN_CALLS:
                bad.append(f"{f.id}()")
            if (
                isinstance(f, ast.Attribute)
                and isinstance(f.value, ast.Name)
                and (f.value.id, f.attr) in FORBIDDEN_ATTRS
            ):
                bad.append(f"{f.value.id}.{f.attr}()")
            for kw in node.keywords:
                if kw.arg in ("shell", "allow_pickle") and not (
                    isinstance(kw.value, ast.Constant) and kw.value.value is False
                ):
                    bad.append(f"{kw.arg}=...")
    return [f"{path.relative_to(root)}:{b}" for b in bad]


def test_scanner_finds_what_it_looks_for(tmp_path):
    """Guard on the scanner: each forbidden construct in a probe file is reported."""
    q = tmp_path / "probe.py"
    q.write_text(
        "import pickle\nfrom yaml import load\nimport subprocess\nimport os\nimport numpy as np\n"
        "eval('1')\nexec('x=1')\nsubprocess.run('ls', shell=True)\nos.system('ls')\n"
        "np.load('a.npy', allow_pickle=True)\n"
    )
    found = {v.split(":", 1)[1] for v in _violations(q, tmp_path)}
    assert {
        "import pickle",
        "from yaml import",
        "eval()",
        "exec()",
        "shell=...",
        "os.system()",
        "np.load()",
        "allow_pickle=...",
    } <= found


def test_package_has_no_pickle_eval_exec_or_shell():
    files = sorted(PACKAGE.rglob("*.py"))
    assert len(files) > 50
    bad = [v for f in files for v in _violations(f)]
    assert bad == [], bad
