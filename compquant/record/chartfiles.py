"""Control charts from the record to files: one PNG and one CSV per check material and element,
and per drift-corrected line (names are safe file names of the material, element or line)."""

from __future__ import annotations

from pathlib import Path

from compquant.errors import OutputError
from compquant.fileio import atomic_write, safe_filename
from compquant.record.db import Record
from compquant.record.queries import check_chart, drift_chart, drift_lines, latest_settings, materials


def _write(chart, out: Path, stem: str) -> dict:
    from compquant.record.charts import draw_chart

    png, csv = out / f"{stem}.png", out / f"{stem}.csv"
    draw_chart(chart, png)
    try:
        with atomic_write(csv, "w", newline="") as fh:
            chart.frame().to_csv(fh, index=False, float_format="%.10g")
    except OSError as exc:
        raise OutputError(f"cannot write ({exc.strerror})", where=str(csv), fix="choose a writable folder") from exc
    lim = chart.limits
    return {"title": chart.title, "points": len(chart.points), "png": str(png), "csv": str(csv),
            "limits": lim.basis if lim else "none (too few runs)", "broken": sum(1 for v in chart.violations if v)}


def write_charts(rec: Record, outdir, *, material=None, element=None, drift=True) -> list[dict]:
    """Draw every chart (or the chosen material / element) into ``outdir``; list what was written."""
    out = Path(outdir)
    if out.exists() and not out.is_dir():
        raise OutputError("output path exists and is not a folder", where=str(out), fix="choose a folder")
    with rec.transaction() as conn:
        settings = latest_settings(conn)
        charts = [(check_chart(conn, ref, el, settings), f"check-{safe_filename(ref)}-{safe_filename(el)}")
                  for ref, el in materials(conn)
                  if (material is None or ref == material) and (element is None or el == element)]
        if drift and material is None:
            charts += [(drift_chart(conn, line, settings), f"drift-{safe_filename(line)}")
                       for line in drift_lines(conn) if element is None or line.split()[0] == element]
    if charts:
        out.mkdir(parents=True, exist_ok=True)
    return [_write(ch, out, stem) for ch, stem in charts if ch.points]


__all__ = ["write_charts"]
