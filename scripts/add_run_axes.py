"""Give run files written before issue 20 the NeXus NXdata group and HDF5 dimension scales, in place,
with every dataset's bytes unchanged (checked), e.g. the shipped demo runs:

    python scripts/add_run_axes.py demo_runs/demo-day1.h5 demo_runs/demo-day2.h5

Each file is copied to ``<name>.axes.part`` by :func:`compquant.run.writer.add_axes` (the copy is
made beside it and renamed when complete), the SHA-256 of the bytes of every dataset of the original
is compared with the copy's, and only then the copy replaces the original (``os.replace``, atomic).
A difference stops the script and leaves the original as it was. Running it again on an upgraded
file changes nothing. Prints, per file, the SHA-256 of the file before and after.
"""

from __future__ import annotations

import argparse
import hashlib
import os
import sys
from pathlib import Path

import h5py
import numpy as np

from compquant.fileio import sha256_file
from compquant.run.writer import add_axes

#: attributes HDF5 dimension scales add to a dataset (HDF5 Dimension Scale specification)
SCALE_ATTRS = {"DIMENSION_LIST", "REFERENCE_LIST", "CLASS", "NAME", "DIMENSION_LABELS"}


def _digest(value) -> str:
    a = np.asarray(value)
    h = hashlib.sha256(str(a.dtype).encode() + str(a.shape).encode())
    if a.dtype.kind == "O":  # variable-length strings
        for v in a.ravel():
            h.update(v if isinstance(v, bytes) else str(v).encode("utf-8"))
            h.update(b"\x00")
    else:
        h.update(np.ascontiguousarray(a).tobytes())
    return h.hexdigest()


def dataset_digests(path: Path) -> dict[str, str]:
    """SHA-256 of every dataset's values (dtype, shape, bytes) and of its own attributes, by name."""
    out: dict[str, str] = {}

    def visit(name, obj):
        if isinstance(obj, h5py.Dataset):
            out[name] = _digest(obj[()])
            attrs = {k: _digest(v) for k, v in obj.attrs.items() if k not in SCALE_ATTRS}
            out[name + "@attrs"] = hashlib.sha256(repr(sorted(attrs.items())).encode()).hexdigest()

    with h5py.File(path, "r") as f:
        f.visititems(visit)
    return out


def upgrade(path: Path) -> tuple[str, str]:
    """Upgrade one file in place; returns its SHA-256 before and after."""
    before_file = sha256_file(path)
    before = dataset_digests(path)
    tmp = path.with_name(path.name + ".axes.part")
    add_axes(path, tmp)
    try:
        after = dataset_digests(tmp)
        changed = sorted(k for k in before if after.get(k) != before[k])
        if changed:
            raise SystemExit(f"error: {path}: datasets changed by the upgrade: {', '.join(changed)}; "
                             "the original is kept")
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()
    return before_file, sha256_file(path)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("runs", nargs="+", type=Path)
    args = ap.parse_args(argv)
    for p in args.runs:
        old, new = upgrade(p)
        print(f"{p}: sha256 {old} -> {new}" + (" (already upgraded)" if old == new else ""))
    return 0


if __name__ == "__main__":
    sys.exit(main())
