"""Crash safety (issue 9): ``compquant analyse`` killed with SIGKILL while it writes leaves no
partial certificate, JSON, CSV or figure under a final name, and a rerun completes; two analyses
writing into one folder at the same time do not corrupt each other's files.

Real kills of a real process: the output folder is polled and the process is killed as soon as
it holds k files, for several k, and at a few fixed delays. Afterwards every file with a final
name (not a hidden ``.<name>.*.part`` temporary, which a kill may leave behind) must parse
completely: JSON loads, the PDF opens in pypdf with all its pages' text, the CSV parses with the
expected header, a PNG ends with its IEND chunk (PNG specification, ISO/IEC 15948, 11.2.5).
"""

from __future__ import annotations

import csv
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from bad_inputs.base import write_base_files
from pypdf import PdfReader

ROOT = Path(__file__).resolve().parents[1]
ISSUED = "2026-12-01T21:00:00Z"
COMPLETED = 3  # exit code of a completed analysis whose certificates are not valid for release


def _env():
    return dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""), MPLBACKEND="Agg")


def _argv(files, outdir, issued=ISSUED):
    return [
        sys.executable,
        "-m",
        "compquant",
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
        str(outdir),
        "--quiet",
        "--issued-at",
        issued,
    ]


def final_files(folder: Path) -> list[Path]:
    """Files under their final names (temporaries are hidden ``.<name>.<random>.part`` files, the
    staging folder ``.staging-*`` of a killed analysis is hidden too)."""
    if not folder.exists():
        return []
    return sorted(
        p
        for p in folder.rglob("*")
        if p.is_file()
        and not any(part.startswith(".") for part in p.relative_to(folder).parts)
        and not p.name.endswith(".part")
    )


def check_complete(p: Path) -> None:
    """Raise if ``p`` is not a complete file of its kind."""
    data = p.read_bytes()
    if p.suffix == ".json":
        doc = json.loads(data.decode("utf-8"))
        assert isinstance(doc, dict) and doc
    elif p.suffix == ".pdf":
        assert data.startswith(b"%PDF-") and b"%%EOF" in data[-64:]
        reader = PdfReader(str(p))
        assert len(reader.pages) >= 1
        text = "".join(page.extract_text() for page in reader.pages)
        assert "Certificate" in text or "CERTIFICATE" in text
    elif p.suffix == ".csv":
        rows = list(csv.reader(data.decode("utf-8").splitlines()))
        assert len(rows) >= 2 and all(len(r) == len(rows[0]) for r in rows)
    elif p.suffix == ".png":
        assert data.startswith(b"\x89PNG\r\n\x1a\n") and data.endswith(b"IEND\xaeB`\x82")
    else:
        raise AssertionError(f"unexpected output {p}")


@pytest.fixture(scope="module")
def setup(tmp_path_factory):
    d = tmp_path_factory.mktemp("crash")
    files = write_base_files(d / "in")
    clean = d / "clean"
    r = subprocess.run(_argv(files, clean), capture_output=True, text=True, env=_env(), timeout=600)
    # the base run states no start time and no response curve, so its certificates are not valid
    # for release (exit code 3, compquant.report.release); the analysis completes all the same
    assert r.returncode == COMPLETED, r.stderr
    ref = {p.relative_to(clean): p.read_bytes() for p in final_files(clean)}
    assert len(ref) >= 6 and any(k.suffix == ".pdf" for k in ref)
    return d, files, ref


def _kill_when(files, outdir: Path, n_files: int | None = None, delay_s: float | None = None) -> int:
    """Start analyse; SIGKILL it once ``outdir`` holds ``n_files`` files (any name) or after ``delay_s``.
    Returns how many files had a final name at the kill."""
    proc = subprocess.Popen(_argv(files, outdir), stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=_env())
    t0 = time.monotonic()
    try:
        while proc.poll() is None and time.monotonic() - t0 < 600:
            if delay_s is not None and time.monotonic() - t0 >= delay_s:
                break
            if n_files is not None and outdir.exists():
                if sum(1 for p in outdir.rglob("*") if p.is_file()) >= n_files:
                    break
            time.sleep(0.002)
    finally:
        if proc.poll() is None:
            proc.send_signal(signal.SIGKILL)
        proc.wait()
    return len(final_files(outdir))


# kill points: as soon as the k-th file (temporary or final) appears, and at fixed delays
KILLS = [("files", k) for k in (1, 3, 6, 10)] + [("delay", t) for t in (1.5,)]


@pytest.mark.parametrize("how,when", KILLS, ids=[f"{h}-{w}" for h, w in KILLS])
def test_sigkill_leaves_no_partial_file_and_rerun_completes(setup, how, when):
    d, files, ref = setup
    out = d / f"killed-{how}-{when}"
    _kill_when(files, out, n_files=when if how == "files" else None, delay_s=when if how == "delay" else None)
    for p in final_files(out):
        check_complete(p)  # a file under a final name is whole
        # and it is the file a clean run writes (fixed issue time: byte-identical outputs)
        assert p.read_bytes() == ref[p.relative_to(out)], p
    # the inputs are untouched and a rerun into the same folder completes
    r = subprocess.run(_argv(files, out), capture_output=True, text=True, env=_env(), timeout=600)
    assert r.returncode == COMPLETED, r.stderr
    got = {p.relative_to(out): p.read_bytes() for p in final_files(out)}
    assert got == ref


def test_two_concurrent_analyses_into_one_folder(setup):
    """Two analyses with different issue dates write into the same folder at once. An issued
    certificate is never overwritten (issue 13): the folder lock lets one finish, the other then
    finds its certificates issued and is refused (exit 2, nothing written); every final file is
    complete and the folder holds exactly one clean run's set."""
    d, files, ref_a = setup
    other = "2026-12-02T09:30:00Z"
    clean_b = d / "clean-b"
    r = subprocess.run(_argv(files, clean_b, other), capture_output=True, text=True, env=_env(), timeout=600)
    assert r.returncode == COMPLETED, r.stderr
    ref_b = {p.relative_to(clean_b): p.read_bytes() for p in final_files(clean_b)}
    assert set(ref_b) == set(ref_a)
    out = d / "shared"
    procs = [
        subprocess.Popen(_argv(files, out, t), stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, env=_env())
        for t in (ISSUED, other)
    ]
    codes = []
    for p in procs:
        _, err = p.communicate(timeout=600)
        codes.append(p.returncode)
        assert p.returncode in (COMPLETED, 2), err
        if p.returncode == 2:
            assert b"already issued" in err, err
    assert sorted(codes) == [2, COMPLETED]
    ref = ref_a if codes[0] == COMPLETED else ref_b
    got = final_files(out)
    assert {p.relative_to(out) for p in got} == set(ref)
    for p in got:
        check_complete(p)
        assert p.read_bytes() == ref[p.relative_to(out)], p
    assert not [p for p in out.rglob("*.part")]


@pytest.mark.parametrize("left", ["json only", "json and pdf"])
def test_rerun_restores_the_files_of_a_certificate_killed_mid_move(setup, left):
    """A kill while the staged set is moved in could leave a certificate's JSON without its PDF or
    figures (the move went in name order: ``LOT-1.json`` before ``LOT-1.pdf`` and ``figures/``).
    A rerun finds that JSON, keeps the certificate as issued, and must still bring the missing
    files back: the folder ends as a clean run's set (nothing lost; common practice of atomic
    output sets). Failed on the former code, whose rerun wrote nothing for a kept certificate."""
    d, files, ref = setup
    out = d / f"half-moved-{left.replace(' ', '-')}"
    out.mkdir()
    keep = (".json",) if left == "json only" else (".json", ".pdf")
    for rel, data in ref.items():
        if len(rel.parts) == 1 and rel.suffix in keep and rel.name not in ("manifest.json",):
            (out / rel).write_bytes(data)
    r = subprocess.run(_argv(files, out), capture_output=True, text=True, env=_env(), timeout=600)
    assert r.returncode == COMPLETED, r.stderr
    got = {p.relative_to(out): p.read_bytes() for p in final_files(out)}
    assert set(got) == set(ref)
    assert got == ref
