"""Steps 1-2 of :func:`compquant.analyse.analyse`: check the job's inputs, then load, screen and measure the run.

:func:`prepare` loads the method, lab profile and specification and checks every option and the
settings of the later steps before the run is read (fail fast, write nothing);
:func:`check_options` does the remaining checks once the record is open;
:func:`measure` opens the run, checks its texts and measures the method's lines
(:func:`compquant.lines.measure_run`); :func:`screen_samples` sorts the run's samples by role.
Each returns a small dataclass a notebook can inspect and hand to the next step.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from compquant.errors import CalibrationError, ConfigError, InputError
from compquant.fileio import MAX_CALIBRATION_BYTES, read_input, refuse_overwriting_inputs, require_file
from compquant.report import FileRef, assemble, load_lab_profile, load_specification, release
from compquant.report.config import LabProfile


def _now_utc() -> str:
    return _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat().replace("+00:00", "Z")


def _norm_issued_at(issued_at) -> str:
    if issued_at is None:
        return _now_utc()
    if isinstance(issued_at, _dt.datetime):
        t = issued_at if issued_at.tzinfo else issued_at.replace(tzinfo=_dt.timezone.utc)
        return t.astimezone(_dt.timezone.utc).replace(microsecond=0).isoformat().replace("+00:00", "Z")
    s = str(issued_at).strip()
    try:
        t = _dt.datetime.fromisoformat(s.replace("Z", "+00:00"))
    except ValueError as exc:
        raise ConfigError(
            f"issue time {s!r} is not ISO 8601", where="issued_at", fix="write e.g. 2026-12-01T21:00:00Z"
        ) from exc
    return _norm_issued_at(t)


def _measurement_times(run, samples, measured) -> dict[str, str]:
    """Per sample, when it was measured: from the run, else from ``measured`` (the user)."""
    out = {str(sid): assemble.measured_when(run, str(sid)) for sid in samples["sample_id"]}
    if measured is None:
        return out
    given = _norm_issued_at(measured)
    stated = [t for t in out.values() if t]
    if stated and min(stated)[:10] != given[:10]:
        raise ConfigError(
            f"the run states it was measured on {min(stated)[:10]}, not {given[:10]}",
            where="measured",
            fix="leave out --measured: the run's own time is used",
        )
    return {sid: (t or given) for sid, t in out.items()}


def _default_lab() -> LabProfile:
    return LabProfile(
        name="Laboratory not stated",
        address=["(no lab profile given: use --lab lab.toml)"],
        certificate_prefix="CQ",
        signatory_name="not stated",
        signatory_title="not stated",
        source="",
        sha256="",
    )


@dataclass
class Job:
    """What was asked: the inputs, loaded and checked, and the options of one analysis."""

    run_path: Path
    method_path: object
    method: object  # compquant.method.Method
    standards: object = None
    calibration: object = None
    cf: bool = False
    lab: object = None  # the lab profile given, as read (fileio.InputBytes; None: the default profile)
    labp: LabProfile | None = None
    spec: object = None  # the specification given, as read (fileio.InputBytes)
    specp: object = None
    outdir: Path = Path("compquant-out")
    client: str | None = None
    received: str | None = None
    issued: str = ""
    figures: bool = True
    chunk_shots: int | None = None
    memory_limit_bytes: int | None = None
    progress: object = None
    chunk_mapper: object = None
    measured: object = None
    revise: str | None = None
    lims_dialect: str = "rfc4180"
    cf_settings: object = None  # CFSettings when cf
    standards_table: object = None  # the standards as parsed (calibrate.load_standards), when standards
    calibration_config: object = None  # the method's [calibration] as parsed (CalibrationConfig), when standards
    saved_calibration: object = None  # the saved calibration as loaded (calibrate.Calibration), when calibration
    files: list = field(default_factory=list)  # FileRef of every input, in provenance order

    @property
    def basis(self) -> str:
        return "cf" if self.cf else "calibration"

    @property
    def issue_date(self) -> str:
        return self.issued[:10]

    def tick(self, stage, done, total) -> None:
        """Report progress ``(stage, done, total)`` to the caller's ``progress`` callable."""
        if self.progress is not None:
            self.progress(stage, done, total)


def prepare(run_path, method_path, *, standards=None, calibration=None, cf=False, lab=None, spec=None,
            outdir="compquant-out", issued_at=None, **options) -> Job:
    """Check that exactly one way to quantify is chosen; load the method, lab profile and specification.

    ``options`` are the other keywords of :func:`compquant.analyse.analyse` (stored on the
    :class:`Job`).  Raises :class:`~compquant.errors.ConfigError` naming the bad input.
    """
    modes = sum([standards is not None, calibration is not None, bool(cf)])
    if modes != 1:
        raise ConfigError(
            "choose exactly one way to quantify" if modes else "no way to quantify chosen",
            where="analyse",
            fix="give --standards FILE, --calibration cal.json or --cf",
        )
    from compquant.method import load_method

    issued = _norm_issued_at(issued_at)
    run_path = require_file(run_path, "run file")
    method = load_method(method_path)
    # read once ('-': standard input, or an InputBytes read already): what is parsed is what is hashed
    if lab is not None:
        lab = read_input(lab, "lab profile", error=ConfigError)
    if spec is not None:
        spec = read_input(spec, "specification", error=ConfigError)
    labp = load_lab_profile(lab) if lab is not None else _default_lab()
    specp = load_specification(spec) if spec is not None else None
    files = [FileRef("run", run_path.name, ""), FileRef("method", Path(method_path).name, method.sha256 or "")]
    return Job(run_path, method_path, method, standards, calibration, bool(cf), lab, labp, spec, specp, Path(outdir),
               issued=issued, files=files, **options)


def check_options(job: Job) -> None:
    """Check the date of receipt, the LIMS dialect, the output folder and the later steps' settings.

    Nothing is read from the run and nothing is written: a bad option fails before the work.
    """
    if job.received:
        try:
            job.received = _dt.date.fromisoformat(str(job.received)).isoformat()
        except ValueError as exc:
            raise ConfigError(f"date of receipt {job.received!r} is not YYYY-MM-DD", where="received",
                              fix="write e.g. 2026-11-27") from exc
    from compquant.report.lims import DIALECTS
    from compquant.workflow.outputs import MANIFEST

    if job.lims_dialect not in DIALECTS:
        raise ConfigError(f"LIMS CSV dialect {job.lims_dialect!r} is not known", where="lims_dialect",
                          fix=f"use one of {', '.join(DIALECTS)}")
    outdir = job.outdir
    if outdir.exists() and not outdir.is_dir():
        raise InputError("output path exists and is not a folder", where=str(outdir), fix="choose a folder")
    inputs = [p for p in (job.run_path, job.method_path, job.standards, job.calibration, job.lab, job.spec)
              if p is not None]
    refuse_overwriting_inputs(
        [outdir] + [outdir / n for n in ("lims.csv", "summary.json", "calibration.json", MANIFEST)], inputs
    )
    parse_step_settings(job)


def parse_step_settings(job: Job) -> None:
    """Parse the inputs and settings owned by later steps before the run is measured (fail fast,
    write nothing), once: the parsed objects stay on the job for :mod:`compquant.workflow.quantify`.

    ``cf``: :attr:`Job.cf_settings` from ``[cf]``.  ``standards``: the file read once (``-`` is
    standard input) and parsed into :attr:`Job.standards_table`, the method's ``[calibration]`` into
    :attr:`Job.calibration_config`.  ``calibration``: the saved calibration read once and loaded into
    :attr:`Job.saved_calibration` (the bytes checked here are those applied and hashed).
    """
    method = job.method
    if job.cf:
        from compquant.cflibs.settings import CFSettings

        job.cf_settings = CFSettings.from_section(method.sections.get("cf"), where=f"{method.where}: [cf]")
    elif job.standards is not None:
        from compquant.calibrate import load_standards, parse_calibration_section

        job.standards = read_input(job.standards, "standards file")
        job.standards_table = load_standards(job.standards)
        job.calibration_config = parse_calibration_section(method.sections.get("calibration"), source=method.where)
    else:
        from compquant.calibrate import Calibration

        job.calibration = read_input(job.calibration, "calibration file", limit=MAX_CALIBRATION_BYTES,
                                     error=CalibrationError)
        job.saved_calibration = Calibration.load(job.calibration, method_id=method.id, method_sha256=method.sha256)


@dataclass
class Measured:
    """The run as measured: the line table and what the certificates need from the run."""

    meas: object  # compquant.lines.LineMeasurement
    run_sha: str
    samples: object  # the run's sample table (DataFrame)
    instrument: dict
    acquisition: dict
    measured_at: dict  # sample id -> ISO time of measurement
    technique: str
    n_shots_by_sample: dict
    mean_spec: dict  # sample id -> preprocessed mean spectrum
    medium: str
    wavelength: np.ndarray
    intensity_basis: str | None = None  # calibration-free only (compquant.cflibs.run_intensity_basis)


def measure(job: Job) -> Measured:
    """Open the run, check its sample texts and measure the method's lines in every shot.

    Progress: stage ``"measure"`` counted in shots (times the passes the method needs).
    """
    from compquant.lines import measure_run
    from compquant.report.config import check_certificate_texts
    from compquant.run import Run

    method = job.method
    with Run.open(job.run_path, memory_limit_bytes=job.memory_limit_bytes) as run:
        run_sha = run.sha256()
        job.files[0].sha256 = run_sha
        samples = run.samples.copy()
        check_certificate_texts(samples["sample_id"], samples["description"], job.client, str(job.run_path))
        n_passes = 1 + (method.preprocess.shift != "none") + any(ln.mode == "fit" for ln in method.lines)
        total = run.n_shots * n_passes
        done = [0]

        def on_chunk(n):
            done[0] += int(n)
            job.tick("measure", min(done[0], total), total)

        job.tick("measure", 0, total)
        meas = measure_run(run, method, chunk_shots=job.chunk_shots, progress=on_chunk,
                           chunk_mapper=job.chunk_mapper)
        job.tick("measure", total, total)
        intensity_basis = None
        if job.cf:
            from compquant.cflibs import run_intensity_basis

            intensity_basis = run_intensity_basis(method, run)
        return Measured(
            meas, run_sha, samples, dict(run.instrument or {}), dict(run.acquisition or {}),
            _measurement_times(run, samples, job.measured), assemble.technique(method, run),
            dict(zip(samples["sample_id"].astype(str), samples["n_shots"].astype(int))),
            dict(getattr(meas, "mean_spectra", {}) or {}), run.medium, np.asarray(meas.wavelength, float),
            intensity_basis,
        )


@dataclass
class Screened:
    """The run's samples sorted by role, and the run-wide record of the analysis so far."""

    roles: dict
    descriptions: dict
    refs: dict  # sample id -> certified standard it is
    unknowns: list  # the samples to certify, in run order
    check_samples: dict  # check sample id -> standard_ref
    deviations: list  # release.Deviation (method steps skipped, drift not applied ...)
    parameters: dict  # the analysis parameters printed in each certificate's provenance


def screen_samples(job: Job, m: Measured) -> Screened:
    """Sort the samples by role; refuse a run without an unknown sample (nothing to certify)."""
    samples = m.samples
    ids = samples["sample_id"].astype(str)
    roles = dict(zip(ids, samples["role"].astype(str)))
    refs = dict(zip(ids, samples["standard_ref"].astype(str)))
    unknowns = [s for s in ids if roles[s] == "unknown"]
    if not unknowns:
        raise InputError("the run has no sample with role 'unknown'", where=str(job.run_path),
                         fix="mark the samples to certify with role 'unknown'")
    parameters: dict = {"basis": job.basis, "issued_at": job.issued,
                        "method_settings_sha256": job.method.settings_digest()}
    if job.chunk_shots:
        parameters["chunk_shots"] = int(job.chunk_shots)
    return Screened(
        roles, dict(zip(ids, samples["description"].astype(str))), refs, unknowns,
        {s: refs.get(s, "") for s in ids if roles[s] == "check"},
        release.skipped_steps(m.meas.provenance.get("notes", [])), parameters,
    )
