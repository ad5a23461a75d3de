"""One exception family for every user-facing problem.

Every error raised because of the user's input (a file, a setting, the data
itself) is a :class:`CompquantError`.  It carries three parts so that the CLI
can print one line that says *what* is wrong, *where*, and *how to fix it*::

    error: run.h5: dataset 'wavelength' is not strictly increasing (pixel 812); re-export the run ...

Anything else that escapes (a plain ``ValueError``, ``KeyError`` ...) is a bug
in compquant and is shown with its traceback.
"""

from __future__ import annotations


def _one_line(text: object) -> str:
    """Collapse whitespace and control characters so a message is one line."""
    s = str(text)
    out = []
    for ch in s:
        if ch in "\r\n\t\v\f":
            out.append(" ")
        elif ord(ch) < 32 or ord(ch) == 127:
            out.append(f"\\x{ord(ch):02x}")
        else:
            out.append(ch)
    return " ".join("".join(out).split())


class CompquantError(Exception):
    """Base of all user-facing errors.

    Every error raised because of the user's input (a file, a setting, the data itself) is a
    ``CompquantError`` (or one of its subclasses: ``InputError``, ``RunFormatError``,
    ``MethodError``, ...); the command line prints it as one line ``error: <where>: <what>; <fix>``
    and exits with status 2.  Anything else that escapes is a bug and keeps its traceback.
    Whitespace and control characters in the three parts are collapsed so the message is one line.

    Parameters
    ----------
    what : str
        What is wrong, in the user's terms.
    where : str, optional
        The file, dataset, sample, line or setting concerned.
    fix : str, optional
        How to fix it.

    Attributes
    ----------
    what, where, fix : str or None
        The three parts, each on one line (``kind``, below, names the kind of problem: ``"error"``
        here, each subclass has its own).

    See Also
    --------
    CompquantError.one_line : the message as printed.

    References
    ----------
    .. [1] compquant documentation: docs/reliability.md (bad input: one ``error:`` line, exit
       code 2, nothing written) and docs/cli.md.

    Examples
    --------
    >>> from compquant import CompquantError
    >>> err = CompquantError("dataset 'wavelength' is not strictly increasing (pixel 812)",
    ...                      where="run.h5", fix="re-export the run")
    >>> print(err)
    run.h5: dataset 'wavelength' is not strictly increasing (pixel 812); re-export the run
    >>> err.kind
    'error'
    """

    #: short name of the kind of problem, used in JSON error reports
    kind = "error"

    def __init__(self, what: str, *, where: str | None = None, fix: str | None = None):
        self.what = _one_line(what)
        self.where = _one_line(where) if where else None
        self.fix = _one_line(fix) if fix else None
        super().__init__(self.one_line())

    def one_line(self) -> str:
        """``<where>: <what>; <fix>`` on a single line."""
        msg = self.what
        if self.where:
            msg = f"{self.where}: {msg}"
        if self.fix:
            msg = f"{msg}; {self.fix}"
        return msg


class InputError(CompquantError):
    """A file cannot be found, read or parsed."""

    kind = "input"


class RunFormatError(CompquantError):
    """A run file does not follow the compquant run format."""

    kind = "run-format"


class ResourceLimitError(CompquantError):
    """A declared size is above the configured memory or size limit."""

    kind = "resource-limit"


class MethodError(CompquantError):
    """A method file is invalid or does not fit the run."""

    kind = "method"


class StandardsError(CompquantError):
    """A certified-standards file is invalid."""

    kind = "standards"


class CalibrationError(CompquantError):
    """A calibration cannot be built, loaded or applied."""

    kind = "calibration"


class DataQualityError(CompquantError):
    """The data cannot support the requested result (all shots rejected, ...)."""

    kind = "data-quality"


class AtomicDataError(CompquantError):
    """Atomic reference data is missing or invalid."""

    kind = "atomic-data"


class PhysicsError(CompquantError):
    """A plasma-physics computation has no valid solution for the inputs."""

    kind = "physics"


class ConfigError(CompquantError):
    """A settings file (lab profile, specification, scenario ...) is invalid."""

    kind = "config"


class OutputError(CompquantError):
    """An output cannot be written where asked."""

    kind = "output"


__all__ = [
    "CompquantError",
    "InputError",
    "RunFormatError",
    "ResourceLimitError",
    "MethodError",
    "StandardsError",
    "CalibrationError",
    "DataQualityError",
    "AtomicDataError",
    "PhysicsError",
    "ConfigError",
    "OutputError",
]
