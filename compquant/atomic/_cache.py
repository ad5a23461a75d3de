"""A disk cache for the shipped atomic tables, keyed by the SHA-256 of the files they come from.

Reading the compressed CSVs and building the frames takes a few hundred milliseconds; the
built objects are pickled to ``$COMPQUANT_CACHE_DIR`` (default ``$XDG_CACHE_HOME/compquant`` or
``~/.cache/compquant``) and read back in a few tens of milliseconds.  A cache entry is used only
when its key (the hash of every source file and this module's format number) matches, so an
updated database is never shadowed by an old cache.  Set ``COMPQUANT_CACHE_DIR=off`` to disable
it.  The cache is written atomically; any problem with it (read-only home, a damaged file) falls
back to building from the CSVs.
"""

from __future__ import annotations

import hashlib
import os
import pickle
from collections.abc import Callable
from pathlib import Path

from compquant.fileio import atomic_write

_FORMAT = 1


def cache_dir() -> Path | None:
    env = os.environ.get("COMPQUANT_CACHE_DIR", "").strip()
    if env.lower() == "off":
        return None
    if env:
        return Path(env)
    base = os.environ.get("XDG_CACHE_HOME", "").strip() or str(Path.home() / ".cache")
    return Path(base) / "compquant"


def cached(name: str, files: list[Path], build: Callable[[], object]) -> object:
    """``build()``'s result, from the disk cache when the source ``files`` are unchanged."""
    d = cache_dir()
    if d is None:
        return build()
    h = hashlib.sha256(f"{name}:{_FORMAT}".encode())
    for f in files:
        h.update(Path(f).read_bytes())
    path = d / f"atomic-{name}-{h.hexdigest()[:24]}.pkl"
    try:
        with open(path, "rb") as fh:
            return pickle.load(fh)
    except (OSError, pickle.UnpicklingError, EOFError, AttributeError, ImportError, ValueError):
        pass
    obj = build()
    try:
        d.mkdir(parents=True, exist_ok=True)
        with atomic_write(path, "wb") as fh:
            pickle.dump(obj, fh, protocol=pickle.HIGHEST_PROTOCOL)
    except OSError:
        pass
    return obj
