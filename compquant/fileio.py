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
import errno
import hashlib
import os
import re
import stat
import sys
import tempfile
import unicodedata
from collections.abc import Iterator
from dataclasses import dataclass, field
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
    if target.is_dir():
        raise OutputError("output path is a folder", where=str(target), fix="give a file name inside the folder")
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{target.name[:40]}.", suffix=".part", dir=folder)
    except OSError as exc:
        raise output_error(exc, folder) from exc
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
    except BaseException as exc:
        with contextlib.suppress(OSError):
            tmp_path.unlink()
        if isinstance(exc, OSError) and not isinstance(exc, OutputError):
            raise output_error(exc, target) from exc
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


#: errno values of a full or limited disk, and what to do about them
_DISK_FIXES = {
    errno.ENOSPC: "the disk is full: free some space or choose another output folder",
    errno.EFBIG: "the file is larger than this system allows (file-size limit): raise the limit or choose "
                 "another file system",
    errno.EDQUOT: "the disk quota is used up: free some space or choose another output folder",
    errno.EROFS: "the file system is read-only: choose a writable output folder",
    errno.EACCES: "no permission to write there: choose a writable output folder",
    errno.EPERM: "no permission to write there: choose a writable output folder",
    errno.ENOTDIR: "a part of the path is a file, not a folder: choose another output path",
}


def output_error(exc: OSError, where: str | os.PathLike) -> OutputError:
    """The one-line :class:`OutputError` for an OS error met while writing ``where``."""
    why = exc.strerror or type(exc).__name__
    fix = _DISK_FIXES.get(exc.errno, "choose a writable output path")
    return OutputError(f"cannot write ({why}); nothing was written under this name", where=str(where), fix=fix)


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

    ``outputs``/``inputs``: paths (None entries are skipped; so is ``-``, standard input or
    output: no file can be overwritten there) or, for inputs, :class:`InputBytes` (the file it
    was read from is kept safe; one read from standard input is skipped).  Paths are compared after
    resolving links, and by device and inode when both exist (hard links, case-blind file
    systems).  Raises :class:`InputError` naming the output and the input; call it before
    anything is written.
    """
    def _same(a: Path, b: Path) -> bool:
        try:
            return a.exists() and b.exists() and os.path.samefile(a, b)
        except OSError:
            return False

    ins = []
    for p in inputs:
        if isinstance(p, InputBytes):
            p = p.path
        if p is not None and str(p) != STDIO:
            ins.append(Path(p))
    for o in outputs:
        if o is None or str(o) == STDIO:
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
    """Return ``path`` as a Path if it is an existing, readable regular file; else raise InputError.

    A FIFO, a socket or a device (``/dev/zero``) is refused *before* it is opened: reading one
    could block forever or never end.
    """
    p = Path(path)
    if "\x00" in str(p):
        raise InputError(f"{what} name holds a NUL character", where=repr(str(p)), fix="check the path")
    try:
        st = os.stat(p)
    except FileNotFoundError:
        if os.path.islink(p):
            raise InputError(f"{what} is a broken symbolic link", where=str(p), fix="check the path") from None
        raise InputError(f"{what} not found", where=str(p), fix="check the path and spelling") from None
    except OSError as exc:
        raise InputError(f"{what} cannot be reached ({exc.strerror})", where=str(p),
                         fix="check the path and the folder permissions") from exc
    if stat.S_ISDIR(st.st_mode):
        raise InputError(f"{what} is a folder, not a file", where=str(p),
                         fix="give the path of the file itself")
    if not stat.S_ISREG(st.st_mode):
        kind = ("a FIFO (named pipe)" if stat.S_ISFIFO(st.st_mode) else "a socket" if stat.S_ISSOCK(st.st_mode)
                else "a device" if stat.S_ISCHR(st.st_mode) or stat.S_ISBLK(st.st_mode) else "not a regular file")
        raise InputError(f"{what} is {kind}, not a regular file", where=str(p),
                         fix="give a regular file (copy the data to a file first)")
    if not os.access(p, os.R_OK):
        raise InputError(f"{what} is not readable", where=str(p), fix="check file permissions")
    return p


#: the path that names standard input (for an input) or standard output (for an output)
STDIO = "-"

#: the name provenance records (certificate, manifest, calibration) for a table read from
#: standard input, in place of a file name
STDIN_NAME = "<stdin>"

#: the largest text table (certified standards ...) read whole, from a file or from standard
#: input: far above any real one (the demo's standards file is 3 KiB), small enough to hold
MAX_TABLE_BYTES = 16 * 1024 * 1024

#: the largest calibration JSON read whole (file or standard input): a PLS model keeps its
#: loadings and rotations per element (pixels x components numbers each), so it is allowed far
#: more than a table of certified values; small enough to parse in memory
MAX_CALIBRATION_BYTES = 256 * 1024 * 1024


@dataclass(frozen=True)
class InputBytes:
    """One input read whole, from a file or from standard input, and what provenance records.

    ``name``: the file name recorded in provenance (``<stdin>`` for standard input); ``where``:
    how messages name it (the path, or ``<stdin>``); ``data``: the bytes; ``sha256``: their
    SHA-256 hex digest (FIPS 180-4), the same number :func:`sha256_file` gives for a file of
    these bytes; ``path``: the file, or None for standard input.
    """

    name: str
    where: str
    data: bytes = field(repr=False)
    sha256: str
    path: Path | None = None

    @property
    def suffix(self) -> str:
        """The file's suffix in lower case ('' for standard input)."""
        return self.path.suffix.lower() if self.path is not None else ""

    def text(self, error: type = InputError, what: str = "file") -> str:
        """The bytes as UTF-8 text (a leading byte-order mark dropped); ``error`` if they are not."""
        try:
            return self.data.decode("utf-8-sig")
        except UnicodeDecodeError as exc:
            raise error(f"{what} is not UTF-8 text (byte {exc.start})", where=self.where,
                        fix="save it as UTF-8") from exc


def _too_large(what: str, where: str, limit: int, error: type):
    return error(f"{what} is larger than {limit // (1024 * 1024)} MiB, the limit for a table read whole",
                 where=where, fix="check that this is the right file; a table of certified values is far smaller")


def read_stdin(what: str = "table", *, limit: int = MAX_TABLE_BYTES, error: type = InputError,
               stream=None) -> InputBytes:
    """Read one table whole from standard input (or ``stream``, a binary or text file object).

    Refused with a one-line ``error`` when standard input is a terminal (nothing was piped in:
    reading would wait for typing), when it is empty, and when it holds more than ``limit``
    bytes (read no further than ``limit + 1``: a never-ending pipe cannot fill the memory).
    The bytes are hashed as a file's would be; provenance names them :data:`STDIN_NAME`.
    """
    src = sys.stdin if stream is None else stream
    where = STDIN_NAME
    fix = f"pipe the {what} in ('... < file' or 'cat file | ...'), or give its path instead of '-'"
    if src is None:
        raise error("standard input is closed", where=where, fix=fix)
    try:
        tty = bool(src.isatty())
    except (AttributeError, ValueError):
        tty = False
    if tty:
        raise error(f"standard input is a terminal, not a piped {what}", where=where, fix=fix)
    raw = getattr(src, "buffer", src)
    try:
        data = raw.read(limit + 1)
    except OSError as exc:
        raise error(f"cannot read standard input ({exc.strerror or type(exc).__name__})", where=where,
                    fix=fix) from exc
    except ValueError as exc:  # a closed stream
        raise error("standard input is closed", where=where, fix=fix) from exc
    if isinstance(data, str):
        data = data.encode("utf-8")
    if not data:
        raise error(f"standard input is empty: no {what} was piped in", where=where, fix=fix)
    if len(data) > limit:
        raise _too_large(what, where, limit, error)
    return InputBytes(STDIN_NAME, where, bytes(data), hashlib.sha256(data).hexdigest(), None)


def read_input(source, what: str = "file", *, limit: int = MAX_TABLE_BYTES,
               error: type = InputError) -> InputBytes:
    """Read one table whole from a file or, for ``-``, from standard input (:func:`read_stdin`).

    An :class:`InputBytes` is returned as it is (already read). A file is checked by
    :func:`require_file` and refused above ``limit`` bytes before it is read; its bytes are read
    once, so what is parsed is exactly what is hashed.
    """
    if isinstance(source, InputBytes):
        return source
    if str(source) == STDIO:
        return read_stdin(what, limit=limit, error=error)
    p = require_file(source, what)
    if p.stat().st_size > limit:
        raise _too_large(what, str(p), limit, error)
    try:
        with open(p, "rb") as fh:
            data = fh.read(limit + 1)
    except OSError as exc:
        raise error(f"{what} cannot be read ({exc.strerror})", where=str(p), fix="check the file") from exc
    if len(data) > limit:  # grew while being read
        raise _too_large(what, str(p), limit, error)
    return InputBytes(p.name, str(p), data, hashlib.sha256(data).hexdigest(), p)


def parse_toml(text: str, where: str, error: type = ConfigError) -> dict:
    """Parse TOML text into a dict, turning a syntax error into a one-line ``error``."""
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise error(f"not valid TOML ({exc})", where=where, fix="fix the syntax at the position given") from exc


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


# ------------------------------------------------------------------ one escaping policy for text
# Every CSV cell (csv_cell) and every line shown on a terminal (terminal_text) goes through the
# same rule: control characters (C0, DEL, C1), Unicode format characters (bidirectional
# overrides and isolates, zero-width joiners ...), line and paragraph separators, surrogates,
# private-use and unassigned code points are shown as visible escapes \xNN / \uNNNN, so text
# from a file can neither move the cursor, recolour or reorder a line, nor start a new one.
# CSV cells also lose their power as spreadsheet formulas (OWASP, "CSV Injection").

_HIDDEN_CATEGORIES = frozenset({"Cc", "Cf", "Cs", "Co", "Cn", "Zl", "Zp"})


def visible_text(s, keep: str = "") -> str:
    """``s`` with every hidden or control character (except those in ``keep``) as ``\\xNN``/``\\uNNNN``."""
    s = str(s)
    if s.isascii() and s.isprintable():
        return s
    out = []
    for ch in s:
        if ch not in keep and unicodedata.category(ch) in _HIDDEN_CATEGORIES:
            o = ord(ch)
            out.append(f"\\x{o:02x}" if o < 256 else (f"\\u{o:04x}" if o < 0x10000 else f"\\U{o:08x}"))
        else:
            out.append(ch)
    return "".join(out)


def terminal_text(s) -> str:
    """One line of text for a terminal: :func:`visible_text`, newlines included."""
    return visible_text(s)


_FORMULA_START = frozenset("=+-@")


def _looks_numeric(s: str) -> bool:
    try:
        float(s)
    except ValueError:
        return False
    return True


def csv_cell(value):
    """A CSV cell that no spreadsheet runs as a formula and no reader splits.

    Text goes through :func:`visible_text`; then, when its first character that is not a
    space, NFKC-normalised (so the full-width ``＝＋－＠`` count too), is ``= + - @``, or when it
    starts with a space or an escaped tab / carriage return, it is prefixed with an apostrophe
    (OWASP guidance on CSV injection). Numbers (and text that is a number, like ``-1.5``) are
    kept as they are.
    """
    if not isinstance(value, str):
        return value
    s = visible_text(value)
    if not s or _looks_numeric(s):
        return s
    head = s.lstrip(" \u3000")
    first = unicodedata.normalize("NFKC", head[:1]) if head else ""
    if first[:1] in _FORMULA_START or head.startswith(("\\x09", "\\x0d", "\\x0a")) or s[0].isspace():
        s = "'" + s
    return s


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
    "InputBytes",
    "MAX_CALIBRATION_BYTES",
    "MAX_TABLE_BYTES",
    "STDIN_NAME",
    "STDIO",
    "parse_toml",
    "read_input",
    "read_stdin",
    "refuse_overwriting_inputs",
    "atomic_path",
    "atomic_write",
    "check_keys",
    "csv_cell",
    "json_ready",
    "load_toml",
    "output_error",
    "require_file",
    "safe_filename",
    "sha256_file",
    "terminal_text",
    "tomllib",
    "visible_text",
    "write_bytes_atomic",
    "write_text_atomic",
]
