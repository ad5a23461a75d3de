"""Fuzzing run files: generated, often malformed HDF5 files never cause an unhandled exception.

Every generated file is opened, summarised and streamed; the only acceptable failure is a
:class:`compquant.errors.CompquantError` (which the CLI prints as one line with exit code 2).
The example budget is set by ``COMPQUANT_FUZZ_EXAMPLES`` (default 4,000 here; `.ci/run` keeps
the whole suite inside its time budget).
"""

from __future__ import annotations

import os

import h5py
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from compquant.errors import CompquantError
from compquant.run import Run, summarise_run

N_EXAMPLES = int(os.environ.get("COMPQUANT_FUZZ_EXAMPLES", "4000"))

_dtypes = st.sampled_from(["uint8", "uint16", "int16", "int32", "float32", "float64", "bool", "S4", "complex64"])
_text = st.text(alphabet=st.characters(blacklist_characters="\x00", blacklist_categories=("Cs",)), max_size=6)


@st.composite
def h5_runs(draw):
    """A dict describing an HDF5 file that is sometimes a valid run and usually not quite."""
    n_pix = draw(st.integers(0, 12))
    n_shots = draw(st.integers(0, 8))
    spec = {
        "format": draw(st.one_of(st.just("compquant-run"), st.just("compquant-run"), st.just("compquant-run"),
                                  _text, st.integers(-2, 3))),
        "version": draw(st.one_of(st.just(1), st.just(1), st.just(1), st.integers(-1, 3), st.just("1"), st.none())),
        "wl": draw(st.one_of(
            st.just("sorted"), st.just("sorted"), st.none(),
            st.lists(st.floats(allow_nan=True, allow_infinity=True, width=32), min_size=0, max_size=14),
            st.just("sorted"))),
        "wl_medium": draw(st.sampled_from(["air", "vacuum", "glass", None])),
        "n_pix": n_pix,
        "n_shots": n_shots,
        "spectra_dtype": draw(st.one_of(st.just("uint16"), st.just("float64"), st.none(), _dtypes)),
        "spectra_extra_dim": draw(st.booleans()),
        "spectra_pix_delta": draw(st.sampled_from([0, 0, 0, 1, -1])),
        "saturation": draw(st.one_of(st.none(), st.floats(-10, 70000))),
        "fill": draw(st.sampled_from(["rand", "nan", "zero", "neg", "inf"])),
        "n_samples": draw(st.integers(0, 4)),
        "ids": draw(st.lists(_text, min_size=0, max_size=4)),
        "roles": draw(st.lists(st.sampled_from(["standard", "blank", "check", "unknown", "setup", "x", ""]),
                               min_size=0, max_size=4)),
        "refs": draw(st.lists(_text, min_size=0, max_size=4)),
        "index": draw(st.one_of(st.none(), st.lists(st.integers(-2, 5), min_size=0, max_size=9),
                                st.lists(st.integers(0, 1), min_size=n_shots, max_size=n_shots))),
        "index_float": draw(st.booleans()),
        "dark_pix_delta": draw(st.one_of(st.none(), st.sampled_from([0, 0, 2]))),
        "response_len_delta": draw(st.one_of(st.none(), st.sampled_from([0, 0, 1]))),
        "pulse_len_delta": draw(st.one_of(st.none(), st.sampled_from([0, 0, -1]))),
        "only_x": draw(st.booleans()),
        "samples_group": draw(st.sampled_from([True, True, True, False])),
        "shots_group": draw(st.sampled_from([True, True, True, False])),
        "truncate": draw(st.one_of(st.none(), st.floats(0.05, 0.95))),
        "seed": draw(st.integers(0, 2**16)),
    }
    return spec


def _build(path, s):
    rng = np.random.default_rng(s["seed"])
    n_pix, n_shots = s["n_pix"], s["n_shots"]
    with h5py.File(path, "w") as f:
        if s["format"] is not None:
            f.attrs["format"] = s["format"]
        if s["version"] is not None:
            f.attrs["format_version"] = s["version"]
        if s["wl"] == "sorted":
            wl = np.linspace(200, 300, n_pix)
        elif s["wl"] is not None:
            wl = np.asarray(s["wl"], dtype=float)
        else:
            wl = None
        if wl is not None:
            d = f.create_dataset("wavelength", data=wl)
            if s["wl_medium"]:
                d.attrs["medium"] = s["wl_medium"]
        if s["spectra_dtype"] is not None:
            npx = max(0, n_pix + s["spectra_pix_delta"])
            shape = (n_shots, npx, 2) if s["spectra_extra_dim"] else (n_shots, npx)
            base = rng.normal(100, 30, size=shape)
            base = {"nan": np.full(shape, np.nan), "zero": np.zeros(shape), "neg": -base,
                    "inf": np.full(shape, np.inf)}.get(s["fill"], base)
            dt = np.dtype(s["spectra_dtype"])
            with np.errstate(invalid="ignore", over="ignore"):
                data = base.astype(dt) if dt.kind not in "S" else np.full(shape, b"ab", dtype=dt)
            ds = f.create_dataset("spectra", data=data)
            if s["saturation"] is not None:
                ds.attrs["saturation"] = s["saturation"]
        if s["samples_group"]:
            g = f.create_group("samples")
            st_ = h5py.string_dtype()
            g.create_dataset("sample_id", data=np.array(s["ids"][: s["n_samples"]] or [], dtype=object), dtype=st_)
            g.create_dataset("role", data=np.array(s["roles"][: s["n_samples"]] or [], dtype=object), dtype=st_)
            g.create_dataset("standard_ref", data=np.array(s["refs"][: s["n_samples"]] or [], dtype=object),
                             dtype=st_)
        if s["shots_group"]:
            g = f.create_group("shots")
            if s["index"] is not None:
                idx = np.asarray(s["index"], dtype=float if s["index_float"] else np.int32)
                g.create_dataset("sample_index", data=idx)
            if s["pulse_len_delta"] is not None:
                g.create_dataset("pulse_energy_mj", data=np.ones(max(0, n_shots + s["pulse_len_delta"])))
            if s["only_x"]:
                g.create_dataset("x_mm", data=np.zeros(n_shots))
        if s["dark_pix_delta"] is not None:
            f.create_dataset("dark", data=np.ones((2, n_pix + s["dark_pix_delta"])))
        if s["response_len_delta"] is not None:
            f.create_dataset("response", data=np.ones(n_pix + s["response_len_delta"]))
    if s["truncate"] is not None:
        data = path.read_bytes()
        path.write_bytes(data[: int(len(data) * s["truncate"])])


@pytest.mark.fuzz
@settings(max_examples=N_EXAMPLES, deadline=None, database=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(h5_runs())
def test_fuzz_run_files_no_unhandled_exception(tmp_path, spec):
    path = tmp_path / "fuzz.h5"
    _build(path, spec)
    try:
        with Run.open(path) as run:
            summarise_run(run, chunk_shots=3)
            for sid in run.samples.sample_id:
                run.sample_spectra(sid)
            run.dark()
            run.response()
    except CompquantError as exc:
        msg = exc.one_line()
        assert msg and "\n" not in msg



def test_fuzz_builder_makes_valid_runs_when_asked(tmp_path):
    """Guard on the fuzzer itself: with every field valid, the builder's files open and scan
    cleanly, so the fuzz cases exercise the reader beyond its first check."""
    import random

    rnd = random.Random(1)
    for k in range(100):
        n_shots = rnd.randint(1, 8)
        s = {"format": "compquant-run", "version": 1, "wl": "sorted", "wl_medium": "air",
             "n_pix": rnd.randint(2, 12), "n_shots": n_shots, "spectra_dtype": "uint16",
             "spectra_extra_dim": False, "spectra_pix_delta": 0, "saturation": 60000.0, "fill": "rand",
             "n_samples": 2, "ids": ["a", "b"], "roles": ["unknown", "blank"], "refs": ["", ""],
             "index": [rnd.randint(0, 1) for _ in range(n_shots)], "index_float": False,
             "dark_pix_delta": 0, "response_len_delta": 0, "pulse_len_delta": 0, "only_x": False,
             "samples_group": True, "shots_group": True, "truncate": None, "seed": k}
        path = tmp_path / f"v{k}.h5"
        _build(path, s)
        with Run.open(path) as run:
            assert summarise_run(run)["spectra"]["n_shots"] == n_shots
