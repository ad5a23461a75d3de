"""One in-process memo for the shipped atomic tables, keyed by the SHA-256 of the files they come from.

Building the frames from the compressed CSVs takes about 0.1 s (the line list) and is done once
per process.  There is deliberately no disk cache: a serialised object cache would have to be a
pickle (which the package never loads: it can run code, and it breaks across pandas versions),
and the load is already within the 0.3 s the tool allows itself.
"""

from __future__ import annotations

import hashlib
from collections.abc import Callable
from pathlib import Path

_MEMO: dict[str, object] = {}


def cached(name: str, files: list[Path], build: Callable[[], object]) -> object:
    """``build()``'s result, built once per process for the same contents of the source ``files``."""
    h = hashlib.sha256(name.encode())
    for f in files:
        h.update(Path(f).read_bytes())
    key = h.hexdigest()
    if key not in _MEMO:
        _MEMO[key] = build()
    return _MEMO[key]
