"""The compquant run file: writer, lazy reader and validator (docs/run-format.md)."""

from compquant.run.format import DEFAULT_CHUNK_SHOTS, DEFAULT_MEMORY_LIMIT, FORMAT_NAME, FORMAT_VERSION, ROLES
from compquant.run.reader import Run, memory_limit_from_env
from compquant.run.validate import Finding, scan_spectra, summarise_run, validate_open_run, validate_run
from compquant.run.writer import RunWriter, write_run

__all__ = [
    "DEFAULT_CHUNK_SHOTS",
    "DEFAULT_MEMORY_LIMIT",
    "FORMAT_NAME",
    "FORMAT_VERSION",
    "ROLES",
    "Finding",
    "Run",
    "RunWriter",
    "memory_limit_from_env",
    "scan_spectra",
    "summarise_run",
    "validate_open_run",
    "validate_run",
    "write_run",
]
