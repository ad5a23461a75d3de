"""Small, shared file helpers: atomic writes, hashing, safe names, TOML.

Every output of compquant goes through :func:`atomic_write` (or
:func:`atomic_path`), so a crash or a kill never leaves a half-written file
under its final name: data is written to a temporary file in the destination
folder, flushed and fsync'ed, then renamed over the target with
:func:`os.replace`, which is atomic on POSIX and Windows file systems.

Sample ids and other user-supplied strings become file names only through
:func:`safe_filename`.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import re
import sys
import tempfile
import unicodedata
from collections.abc import Iterator
from pathlib import Path
from typing import IO

from compquant.errors import ConfigError, InputError, OutputError

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10
    import tomli as tomllib


def sha256_file(path: str | os.PathLike, chunk: int = 1 << 20) -> str:
    """SHA-256 hex digest of a file, read in chunks."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        while True:
            block = fh.read(chunk)
            if not block:
                break
            h.update(block)
    return h.hexdigest()


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


@contextlib.contextmanager
def atomic_path(target: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary path beside ``target``; rename it into place on success.

    Use for writers that need a path rather than a file object (h5py,
    reportlab, matplotlib).  On any exception the temporary file is removed and
    ``target`` is untouched.
    """
    target = Path(target)
    folder = target.parent if str(target.parent) else Path(".")
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"cannot create output folder ({exc.strerror})", where=str(folder),
                          fix="choose a writable output folder") from exc
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name[:40]}.", suffix=".part", dir=folder)
    os.close(fd)
    tmp_path = Path(tmp)
    # mkstemp creates 0600; give the final file the permissions a normal open() would (0666 & ~umask)
    with contextlib.suppress(OSError):
        os.chmod(tmp_path, 0o666 & ~_umask())
    try:
        yield tmp_path
        with open(tmp_path, "rb+") as fh:
            os.fsync(fh.fileno())
        os.replace(tmp_path, target)
    except BaseException:
        with contextlib.suppress(OSError):
            tmp_path.unlink()
        raise
    with contextlib.suppress(OSError):  # make the rename durable
        dfd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(dfd)
        finally:
            os.close(dfd)


@contextlib.contextmanager
def atomic_write(target: str | os.PathLike, mode: str = "w", encoding: str | None = "utf-8",
                 newline: str | None = None) -> Iterator[IO]:
    """Open a temporary file for writing; rename it over ``target`` when the block ends.

    ``mode`` is ``"w"`` (text) or ``"wb"`` (binary).
    """
    if mode not in ("w", "wb"):
        raise ValueError("atomic_write mode must be 'w' or 'wb'")
    with atomic_path(target) as tmp:
        if mode == "wb":
            fh = open(tmp, "wb")
        else:
            fh = open(tmp, "w", encoding=encoding, newline=newline)
        with fh:
            yield fh
            fh.flush()
            os.fsync(fh.fileno())


def write_text_atomic(target: str | os.PathLike, text: str) -> None:
    """Write ``text`` (UTF-8) to ``target`` atomically."""
    with atomic_write(target, "w") as fh:
        fh.write(text)


def write_bytes_atomic(target: str | os.PathLike, data: bytes) -> None:
    """Write ``data`` to ``target`` atomically."""
    with atomic_write(target, "wb") as fh:
        fh.write(data)


_UNSAFE = re.compile(r"[^A-Za-z0-9._+-]+")


def safe_filename(name: str, max_len: int = 80) -> str:
    """Turn any user-supplied string (a sample id, ...) into a safe file-name stem.

    The result holds only ``[A-Za-z0-9._+-]``, never starts with a dot, never
    is ``.`` or ``..``, and is at most ``max_len`` characters.  Distinct inputs
    that map to the same stem are kept apart by a short hash suffix whenever the
    name had to be changed, so two different sample ids never share a file.
    """
    raw = str(name)
    norm = unicodedata.normalize("NFKD", raw).encode("ascii", "ignore").decode("ascii")
    stem = _UNSAFE.sub("_", norm).strip("._-")
    changed = stem != raw
    if not stem:
        stem = "sample"
        changed = True
    if len(stem) > max_len - 9:
        stem = stem[: max_len - 9]
        changed = True
    if changed:
        digest = hashlib.sha256(raw.encode("utf-8", "surrogatepass")).hexdigest()[:8]
        stem = f"{stem}-{digest}"
    return stem


def refuse_overwriting_inputs(outputs, inputs) -> None:
    """Refuse an output path that is one of the inputs or lies inside one (inputs are sacred).

    ``outputs``/``inputs``: paths (None entries are skipped).  Paths are compared after
    resolving links, and by device and inode when both exist (hard links, case-blind file
    systems).  Raises :class:`InputError` naming the output and the input; call it before
    anything is written.
    """
    def _same(a: Path, b: Path) -> bool:
        try:
            return a.exists() and b.exists() and os.path.samefile(a, b)
        except OSError:
            return False

    ins = [Path(p) for p in inputs if p is not None]
    for o in outputs:
        if o is None:
            continue
        o = Path(o)
        ro = o.resolve()
        for i in ins:
            ri = i.resolve()
            if ro == ri or _same(o, i) or ri in ro.parents:
                raise InputError(
                    f"the output would {'replace' if ro == ri or _same(o, i) else 'be written inside'} "
                    f"the input {str(i)!r}",
                    where=str(o),
                    fix="choose an output path that is not one of the command's inputs",
                )


def require_file(path: str | os.PathLike, what: str = "file") -> Path:
    """Return ``path`` as a Path if it is an existing, readable file; else raise InputError."""
    p = Path(path)
    if not p.exists():
        raise InputError(f"{what} not found", where=str(p), fix="check the path and spelling")
    if p.is_dir():
        raise InputError(f"{what} is a folder, not a file", where=str(p),
                         fix="give the path of the file itself")
    if not os.access(p, os.R_OK):
        raise InputError(f"{what} is not readable", where=str(p), fix="check file permissions")
    return p


def load_toml(path: str | os.PathLike, what: str = "TOML file",
              error: type = ConfigError) -> dict:
    """Read a TOML file into a dict, turning every problem into a one-line ``error``."""
    p = require_file(path, what)
    try:
        with open(p, "rb") as fh:
            return tomllib.load(fh)
    except tomllib.TOMLDecodeError as exc:
        raise error(f"not valid TOML ({exc})", where=str(p),
                    fix="fix the syntax at the position given") from exc
    except UnicodeDecodeError as exc:
        raise error("not UTF-8 text", where=str(p), fix="save the file as UTF-8") from exc


def check_keys(table: dict, allowed: set[str] | frozenset[str], where: str,
               error: type = ConfigError, required: set[str] | frozenset[str] = frozenset()) -> None:
    """Refuse unknown keys (typos) and missing required keys in a settings table."""
    if not isinstance(table, dict):
        raise error("expected a table of settings", where=where, fix="see the file's documentation")
    unknown = sorted(set(table) - set(allowed))
    if unknown:
        raise error(f"unknown key(s) {', '.join(map(repr, unknown))}", where=where,
                    fix=f"allowed keys are {', '.join(sorted(allowed))}")
    missing = sorted(set(required) - set(table))
    if missing:
        raise error(f"missing required key(s) {', '.join(map(repr, missing))}", where=where,
                    fix="add them; see the file's documentation")


def json_ready(obj, nonfinite=None):
    """A copy of ``obj`` that :func:`json.dump` writes as strict JSON: dict keys become text,
    tuples and numpy arrays lists, numpy scalars Python numbers; a NaN or infinite float ``f``
    becomes ``nonfinite(f)`` (default ``None``, i.e. JSON null; JSON has no NaN/inf)."""
    import math

    import numpy as np

    if isinstance(obj, dict):
        return {str(k): json_ready(v, nonfinite) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [json_ready(v, nonfinite) for v in obj]
    if isinstance(obj, np.ndarray):
        return [json_ready(v, nonfinite) for v in obj.tolist()]
    if isinstance(obj, np.bool_):
        return bool(obj)
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        f = float(obj)
        if math.isfinite(f):
            return f
        return None if nonfinite is None else nonfinite(f)
    return obj


__all__ = [
    "refuse_overwriting_inputs",
    "atomic_path",
    "atomic_write",
    "check_keys",
    "json_ready",
    "load_toml",
    "require_file",
    "safe_filename",
    "sha256_file",
    "tomllib",
    "write_bytes_atomic",
    "write_text_atomic",
]
