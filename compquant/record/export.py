"""The whole record as files, for backup and for a LIMS: one CSV (or Parquet) file per table.

All tables are read in one transaction (a consistent snapshot: SQLite's write lock, PostgreSQL's
REPEATABLE READ), written atomically, and listed last in ``manifest.json`` with their row counts
and SHA-256, the schema revision and the time of export.
"""

from __future__ import annotations

import base64
import json
from pathlib import Path

import pandas as pd
import sqlalchemy as sa

from compquant.errors import OutputError
from compquant.fileio import atomic_path, sha256_file, write_text_atomic
from compquant.record import schema as S
from compquant.record.db import Record, RecordError, now_utc


def _frame(conn, t) -> pd.DataFrame:
    """One table; binary columns (the evidence arrays) as base64 text, so CSV and Parquet carry them as text."""
    rows = conn.execute(sa.select(t).order_by(*t.primary_key.columns)).all()
    df = pd.DataFrame(rows, columns=[c.name for c in t.columns])
    for c in t.columns:
        if isinstance(c.type, sa.LargeBinary):
            df[c.name] = [base64.b64encode(bytes(v)).decode("ascii") if v is not None else None for v in df[c.name]]
    return df


def _frames(rec: Record) -> dict[str, pd.DataFrame]:
    out = {}
    if rec.dialect == "postgresql":
        with rec.engine.connect().execution_options(isolation_level="REPEATABLE READ") as conn, conn.begin():
            for t in S.TABLES:
                out[t.name] = _frame(conn, t)
        return out
    with rec.transaction() as conn:
        for t in S.TABLES:
            out[t.name] = _frame(conn, t)
    return out


def export_record(rec: Record, outdir, fmt: str = "csv") -> dict:
    """Write every table to ``outdir`` (``fmt`` csv or parquet); return the manifest."""
    from compquant.record.db import schema_revision

    if fmt not in ("csv", "parquet"):
        raise RecordError(f"export format {fmt!r} is not known", where="export", fix="use csv or parquet")
    if fmt == "parquet":
        try:
            import pyarrow  # noqa: F401
        except ImportError as exc:
            raise RecordError("Parquet export needs pyarrow", where="export",
                              fix="pip install pyarrow, or export as csv") from exc
    out = Path(outdir)
    if out.exists() and not out.is_dir():
        raise OutputError("output path exists and is not a folder", where=str(out), fix="choose a folder")
    frames = _frames(rec)
    try:
        out.mkdir(parents=True, exist_ok=True)
        files = {}
        for name, df in frames.items():
            path = out / f"{name}.{fmt}"
            with atomic_path(path) as tmp:
                if fmt == "csv":
                    df.to_csv(tmp, index=False, float_format="%.17g")
                else:
                    df.to_parquet(tmp, index=False)
            files[name] = {"file": path.name, "rows": len(df), "sha256": sha256_file(path)}
        manifest = {"record": rec.where, "schema_revision": schema_revision(rec), "exported_at": now_utc(),
                    "format": fmt, "tables": files}
        write_text_atomic(out / "manifest.json", json.dumps(manifest, indent=2, sort_keys=True) + "\n")
    except OSError as exc:
        raise OutputError(f"cannot write ({exc.strerror})", where=str(out), fix="choose a writable folder") from exc
    return manifest


__all__ = ["export_record"]
