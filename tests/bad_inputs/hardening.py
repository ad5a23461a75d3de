"""The second bad-input corpus (issue 17): hostile run files, calibrations, options, output
places and text, each run through every command that reads the input.

:func:`build_hardening(folder, cal_json)` writes the inputs under ``folder`` and returns a list of
:class:`HCase`. A case either expects one clear ``error:`` line with exit code 2 (``expect``
holds fragments of it), or expects the command to work (``expect`` is None) and then
``check(case, result)`` looks at what it wrote: the right numbers, escaped text, no infinity,
no bare NaN. Nothing here is committed as a binary; everything is generated from
:mod:`bad_inputs.base` at test time.
"""

from __future__ import annotations

import contextlib
import fcntl
import json
import os
import shutil
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import h5py
import numpy as np

from bad_inputs.base import LAB_TOML, METHOD_TOML, SPEC_TOML, STANDARDS_CSV, write_base_run

ISSUED = "2026-12-01T21:00:00Z"
#: calibration-free settings the base run supports (it has no H-alpha and no ion lines)
CF_TABLE = '\n[cf]\nmc_draws = 5\nne_method = "fixed"\nne_fixed_cm3 = 1e17\n'

#: the commands that read a run file (issue 17: "run through every command that reads that input")
RUN_COMMANDS = ("inspect", "lines", "plot", "identify", "calibrate", "quantify", "cf", "analyse", "map", "multi")


@dataclass
class HCase:
    name: str
    argv: list[str]
    inputs: list[Path]
    outputs: list[Path]
    expect: list[str] | None  # fragments of the error line; None: the command must work
    bad: str | None = None  # text the error line must hold (the bad file or option)
    env: dict = field(default_factory=dict)
    setup: Callable | None = None  # a context manager factory (lock, failing disk ...)
    check: Callable | None = None  # check(case, result) for cases that must work
    multi: bool = False  # a multi-run call: the good run's outputs must be complete
    folder: Path = field(default=Path("."))
    stdin: bytes | None = None  # what is piped into standard input (None: nothing, an empty stdin)


# ----------------------------------------------------------------------------------- run mutations


def _copy(base: Path, dest: Path, mutate=None) -> Path:
    shutil.copy(base, dest)
    if mutate is not None:
        with h5py.File(dest, "a") as f:
            mutate(f)
    return dest


def _as_group(name):
    def fn(f):
        del f[name]
        f.create_group(name)

    return fn


def _soft(name, target):
    def fn(f):
        if name in f:
            del f[name]
        f[name] = h5py.SoftLink(target)

    return fn


def _loop(a, b):
    def fn(f):
        del f[a]
        f[a] = h5py.SoftLink("/" + b)
        f[b] = h5py.SoftLink("/" + a)

    return fn


def _external(name, other):
    def fn(f):
        if name in f:
            del f[name]
        f[name] = h5py.ExternalLink(str(other), "/data")

    return fn


def _text_column(name, values, dtype=None):
    def fn(f):
        del f[name]
        f.create_dataset(name, data=values, dtype=dtype)

    return fn


def _ids(f):
    return [s.decode() if isinstance(s, bytes) else s for s in f["samples/sample_id"][()]]


def _rename_lot1(new_id):
    def fn(f):
        ids = _ids(f)
        ids[6] = new_id
        del f["samples/sample_id"]
        if "\x00" in new_id:  # variable-length HDF5 strings cannot hold NUL; fixed-length ones can
            f["samples"].create_dataset("sample_id", data=np.array([i.encode() for i in ids]))
        else:
            f["samples"].create_dataset("sample_id", data=np.array(ids, dtype=object), dtype=h5py.string_dtype())

    return fn


def _attr(ds, key, value):
    def fn(f):
        f[ds].attrs[key] = value

    return fn


def _response(values):
    def fn(f):
        if "response" in f:
            del f["response"]
        f.create_dataset("response", data=values)

    return fn


def _scaled(factor, dark=False):
    def fn(f):
        data = np.asarray(f["spectra"][()], dtype=np.float64) * factor
        attrs = dict(f["spectra"].attrs)
        attrs.pop("saturation", None)
        del f["spectra"]
        d = f.create_dataset("spectra", data=data)
        for k, v in attrs.items():
            d.attrs[k] = v
        if dark and "dark" in f:
            dk = np.asarray(f["dark"][()], dtype=np.float64) * factor
            del f["dark"]
            f.create_dataset("dark", data=dk)

    return fn


def _declared(n_shots, spectra_chunks, index_chunks=(1 << 16,), compression=None):
    """Replace spectra and the per-shot table by declared, unwritten datasets of ``n_shots``."""

    def fn(f):
        n_pix = f["wavelength"].shape[0]
        del f["spectra"], f["shots"]
        f.create_dataset("spectra", shape=(n_shots, n_pix), dtype="uint16", chunks=spectra_chunks,
                         compression=compression)
        g = f.create_group("shots")
        g.create_dataset("sample_index", shape=(n_shots,), dtype="int32", fillvalue=0, chunks=index_chunks)

    return fn


# ----------------------------------------------------------------------------------- set-ups


@contextlib.contextmanager
def _locked(path: Path):
    """Hold the lock HDF5 takes on a file open for writing (flock, as libhdf5 does)."""
    with open(path, "rb+") as fh:
        fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        try:
            yield
        finally:
            fcntl.flock(fh.fileno(), fcntl.LOCK_UN)


@contextlib.contextmanager
def _failing_disk(err: int):
    """Every fsync of an output fails with ``err`` (ENOSPC: disk full; EFBIG: file-size limit)."""
    import compquant.fileio as fio

    real = fio.os.fsync

    def boom(fd):
        raise OSError(err, os.strerror(err))

    fio.os.fsync = boom
    try:
        yield
    finally:
        fio.os.fsync = real


@contextlib.contextmanager
def _crash_in(run_name: str):
    """A bug (not a user error) inside the measurement of one run of a multi-run call."""
    import compquant.lines as lines_pkg

    real = lines_pkg.measure_run

    def crashing(run, *a, **k):
        if Path(run.path).name == run_name:
            raise ZeroDivisionError("injected fault for the test")
        return real(run, *a, **k)

    lines_pkg.measure_run = crashing
    try:
        yield
    finally:
        lines_pkg.measure_run = real


# ----------------------------------------------------------------------------------- checks of good outputs


def _text_of(folder: Path, suffixes=(".csv", ".json")) -> dict[Path, str]:
    return {p: p.read_text(encoding="utf-8") for p in folder.rglob("*") if p.is_file() and p.suffix in suffixes}


def _refuse_constant(c):
    raise AssertionError(f"bare {c} in a JSON output")


def no_nonfinite(case, result):
    """No inf in any CSV, no bare NaN/Infinity in any JSON (issue 17, item 4)."""
    import csv

    for out in case.outputs:
        for p, text in _text_of(out if out.is_dir() else out.parent).items():
            if p.suffix == ".json":
                json.loads(text, parse_constant=_refuse_constant)
            else:
                for row in csv.reader(text.splitlines()):
                    for cell in row:
                        assert cell.strip().lower() not in ("inf", "-inf", "infinity", "-infinity", "nan"), (p, cell)


def cells_escaped(*forbidden: str):
    """Every CSV written: no cell starts (after spaces, NFKC) with a formula character, and no
    raw control or bidi character appears anywhere (OWASP, CSV injection)."""
    import csv
    import unicodedata

    def check(case, result):
        no_nonfinite(case, result)
        seen = 0
        for out in case.outputs:
            for p, text in _text_of(out if out.is_dir() else out.parent, (".csv",)).items():
                for ch in text:
                    cat = unicodedata.category(ch)
                    assert ch in "\r\n" or cat not in ("Cc", "Cf", "Zl", "Zp"), (p, hex(ord(ch)))
                for row in csv.reader(text.splitlines()):
                    for cell in row:
                        head = unicodedata.normalize("NFKC", cell.lstrip(" \u3000"))[:1]
                        try:
                            float(cell)
                        except ValueError:
                            assert head not in "=+-@" or not head, (p, cell)
                        seen += 1
        for s in forbidden:
            assert s not in result.output, s
        assert seen > 0

    return check


def terminal_clean(case, result):
    """No raw control, bidi or separator character reaches the terminal, and text from a file
    cannot start a line of its own (a forged ``error:`` line)."""
    import unicodedata

    for ch in result.output:
        assert ch in "\n\t" or unicodedata.category(ch) not in ("Cc", "Cf", "Zl", "Zp"), hex(ord(ch))
    assert not any(line.lstrip().startswith("error: forged") for line in result.output.splitlines()), result.output


# ----------------------------------------------------------------------------------- the corpus


def build_hardening(folder: Path, cal_json: Path | None) -> list[HCase]:
    folder.mkdir(parents=True, exist_ok=True)
    good = write_base_run(folder / "good.h5")
    M = folder / "method.toml"
    M.write_text(METHOD_TOML, encoding="utf-8")
    MCF = folder / "method-cf.toml"
    MCF.write_text(METHOD_TOML + CF_TABLE, encoding="utf-8")
    S = folder / "standards.csv"
    S.write_text(STANDARDS_CSV, encoding="utf-8")
    L = folder / "lab.toml"
    L.write_text(LAB_TOML, encoding="utf-8")
    SP = folder / "spec.toml"
    SP.write_text(SPEC_TOML, encoding="utf-8")
    CAL = folder / "calibration.json"
    CAL.write_text(cal_json.read_text(encoding="utf-8") if cal_json else "{}", encoding="utf-8")
    other = folder / "other.h5"
    with h5py.File(other, "w") as f:
        f["data"] = np.arange(5.0)
    shared = [M, MCF, S, L, SP, CAL, good]
    cases: list[HCase] = []

    def new_dir(name: str) -> Path:
        d = folder / name.replace("@", "__")
        d.mkdir()
        return d

    def command(cmd: str, run: Path, d: Path) -> tuple[list[str], list[Path]]:
        o = d / f"out-{cmd}"
        table = {
            "inspect": (["inspect", str(run)], []),
            "lines": (["lines", str(run), "--method", str(M), "-o", str(o / "lines.csv"), "--quiet"], [o]),
            "plot": (["plot", str(run), "--sample", "LOT-1", "--method", str(M), "-o", str(o / "p.png")], [o]),
            "identify": (["identify", str(run), "--sample", "LOT-1", "-o", str(o / "id.csv"), "--quiet"], [o]),
            "calibrate": (["calibrate", str(run), "--method", str(M), "--standards", str(S), "-o",
                           str(o / "cal.json"), "--quiet"], [o]),
            "quantify": (["quantify", str(run), "--calibration", str(CAL), "--method", str(M), "-o",
                          str(o / "results.csv"), "--quiet"], [o]),
            "cf": (["cf", str(run), "--method", str(MCF), "-o", str(o / "cf.csv"), "--quiet", "--draws", "5"], [o]),
            "analyse": (["analyse", str(run), "--method", str(M), "--standards", str(S), "--lab", str(L), "--spec",
                         str(SP), "-o", str(o), "--quiet", "--no-figures", "--issued-at", ISSUED], [o]),
            "map": (["map", str(run), "--method", str(M), "-o", str(o), "--quiet"], [o]),
            "multi": (["lines", str(good), str(run), "--method", str(M), "-o", str(o), "--quiet"], [o]),
            "upgrade": (["upgrade", str(run), "-o", str(o / "new.h5")], [o]),  # issue 20: NXdata for old runs
        }
        return table[cmd]

    def run_case(name, expect, *, build=None, mutate=None, cmds=RUN_COMMANDS, env=None, setup=None, check=None,
                 run_name="run.h5", bad=None, early=False):
        d = new_dir(name)
        run = d / run_name
        if build is not None:
            run = build(run)
        else:
            _copy(good, run, mutate)
        for cmd in cmds:
            argv, outs = command(cmd, run, d / cmd)
            inputs = ([run] if run.is_file() and not str(run).startswith("/dev") else []) + shared
            cases.append(HCase(f"{name}@{cmd}", argv, inputs, outs, expect, bad or str(run), dict(env or {}),
                               (lambda r=run: setup(r)) if setup else None, check, cmd == "multi" and not early, d))

    # ------------------------------------------------------------------ item 2: run files
    run_case("run_sample_id_is_group", ["'samples/sample_id' is a group"], mutate=_as_group("samples/sample_id"),
             cmds=RUN_COMMANDS + ("upgrade",))
    run_case("run_sample_index_is_group", ["'shots/sample_index' is a group"], mutate=_as_group("shots/sample_index"))
    run_case("run_dark_is_group", ["'dark' is a group"], mutate=_as_group("dark"))
    run_case("run_response_is_group", ["'response' is a group"], mutate=lambda f: f.create_group("response"))
    run_case("run_spectra_is_group", ["'spectra' is a group"], mutate=_as_group("spectra"),
             cmds=("inspect", "lines", "analyse", "multi", "upgrade"))
    run_case("run_soft_link_loop", ["cannot be followed"], mutate=_loop("samples/sample_id", "samples/loop"),
             cmds=RUN_COMMANDS + ("upgrade",))
    run_case("run_self_link", ["cannot be followed"], mutate=_soft("dark", "/dark"),
             cmds=("inspect", "lines", "analyse", "multi", "upgrade"))
    run_case("run_dangling_link", ["dangling"], mutate=_soft("response", "/nowhere"),
             cmds=("inspect", "lines", "cf", "multi", "upgrade"))
    run_case("run_external_link", ["link to another file"], mutate=_external("response", other),
             cmds=("inspect", "lines", "quantify", "multi", "upgrade"))
    run_case("run_ids_2d", ["shape (8, 1)"],
             mutate=_text_column("samples/sample_id", np.array([[f"S{i}".encode()] for i in range(8)])))
    run_case("run_ids_numbers", ["not text"], mutate=_text_column("samples/sample_id", np.arange(8)),
             cmds=("inspect", "lines", "plot", "analyse", "multi"))
    run_case("run_id_with_nul", ["NUL"], mutate=_rename_lot1("LOT\x001"),
             cmds=("inspect", "lines", "map", "analyse", "multi"))

    def fifo(p):
        os.mkfifo(p)
        return p

    run_case("run_is_fifo", ["FIFO", "not a regular file"], build=fifo, early=True,
             cmds=("inspect", "lines", "plot", "identify", "calibrate", "quantify", "cf", "analyse", "map", "multi",
                   "upgrade"))
    run_case("run_is_dev_zero", ["device"], build=lambda p: Path("/dev/zero"),
             cmds=("inspect", "lines", "plot", "identify", "calibrate", "quantify", "cf", "analyse", "map", "multi",
                   "upgrade"),
             bad="/dev/zero", early=True)
    run_case("run_locked_by_writer", ["locked", "open for writing"], setup=_locked,
             cmds=("inspect", "lines", "analyse", "cf", "multi", "upgrade"))
    n_pix = 500
    nan_resp = np.ones(n_pix)
    nan_resp[123] = np.nan
    run_case("run_response_nan", ["'response'", "NaN"], mutate=_response(nan_resp),
             cmds=("inspect", "lines", "quantify", "analyse", "cf", "plot", "multi"))
    tiny = np.ones(n_pix)
    tiny[200] = 1e-300
    run_case("run_response_1e-300", ["'response'", "range"], mutate=_response(tiny),
             cmds=("inspect", "lines", "quantify", "analyse", "cf", "plot", "multi"))
    zero = np.ones(n_pix)
    zero[7] = 0.0
    run_case("run_response_zero", ["'response'", "not above zero"], mutate=_response(zero),
             cmds=("inspect", "lines", "analyse"))
    run_case("run_response_1e300", ["'response'", "normalise"], mutate=_response(np.full(n_pix, 1e300)),
             cmds=("inspect", "lines", "quantify", "analyse"))
    run_case("run_response_negative", ["not above zero"], mutate=_response(-np.ones(n_pix)),
             cmds=("inspect", "lines", "identify"))
    run_case("run_saturation_zero", ["saturation", "positive"], mutate=_attr("spectra", "saturation", 0),
             cmds=("inspect", "lines", "analyse", "calibrate", "multi"))
    run_case("run_saturation_nan", ["saturation", "positive"], mutate=_attr("spectra", "saturation", np.nan),
             cmds=("inspect", "lines", "analyse", "quantify"))
    run_case("run_saturation_text", ["saturation"], mutate=_attr("spectra", "saturation", "high"),
             cmds=("inspect", "lines"))
    run_case("run_exposure_zero", ["exposure_s", "positive"], mutate=_attr("spectra", "exposure_s", 0.0),
             cmds=("inspect", "lines", "analyse", "cf", "multi"))
    run_case("run_exposure_negative", ["exposure_s", "positive"], mutate=_attr("spectra", "exposure_s", -0.05),
             cmds=("inspect", "lines", "analyse", "identify"))
    run_case("run_dark_exposure_negative", ["'dark'", "exposure_s"], mutate=_attr("dark", "exposure_s", -1.0),
             cmds=("inspect", "lines", "analyse"))

    # ------------------------------------------------------------------ item 3: memory limit
    run_case("run_one_huge_chunk", ["one HDF5 chunk of 'spectra'", "memory limit of 64 MiB"],
             mutate=_declared(1 << 20, (1 << 20, 500), compression="gzip"), env={"COMPQUANT_MEMORY_LIMIT": "64M"},
             cmds=("inspect", "lines", "analyse", "map", "multi"))
    run_case("run_20M_shots_declared", ["per-shot table", "memory limit of 1 GiB"],
             mutate=_declared(20_000_000, (1024, 500)), env={"COMPQUANT_MEMORY_LIMIT": "1G"},
             cmds=("inspect", "lines", "analyse", "cf", "multi"))
    for label, value in (("negative", "-5M"), ("zero", "0"), ("text", "lots"), ("nan", "nan")):
        run_case(f"env_memory_limit_{label}", ["COMPQUANT_MEMORY_LIMIT"], env={"COMPQUANT_MEMORY_LIMIT": value},
                 cmds=("inspect", "lines", "analyse"), bad="COMPQUANT_MEMORY_LIMIT")

    # ------------------------------------------------------------------ item 4: numbers
    run_case("run_spectra_times_1e196", ["masked pixels"], mutate=_scaled(1e196),
             cmds=("lines", "plot", "identify", "calibrate", "quantify", "cf", "analyse", "multi"))
    run_case("run_spectra_times_1e300", ["out of range"], mutate=_scaled(1e300, dark=True),
             cmds=("lines", "quantify", "analyse"))
    build_more(cases, folder, new_dir, command, run_case, good, M, MCF, S, L, SP, CAL, shared)
    return cases


def hardening_names() -> list[str]:
    import tempfile

    with tempfile.TemporaryDirectory(prefix="cq-hard-") as d:
        return [c.name for c in build_hardening(Path(d) / "c", None)]


from bad_inputs.hardening_more import build_more  # noqa: E402

__all__ = ["HCase", "build_hardening", "hardening_names"]
