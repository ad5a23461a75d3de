"""``compquant inspect RUN``: what a run holds, and what is wrong with it."""

from __future__ import annotations

import json

import click

from compquant.cli._common import format_columns, run_argument
from compquant.fileio import terminal_text


def _fmt_settings(d: dict) -> str:
    if not d:
        return "  (none stated)"
    return "\n".join(f"  {k}: {v}" for k, v in sorted(d.items()))


def render_summary(s: dict) -> str:
    """Human-readable text of :func:`compquant.run.summarise_run`'s summary."""
    wl, sp = s["wavelength"], s["spectra"]
    sat = "not stated" if sp["saturation"] is None else f"{sp['saturation']:g} counts"
    lines = [
        f"run: {s['path']}",
        f"format: {s['format']} v{s['format_version']}, created {s['created']}",
        "instrument:",
        _fmt_settings(s["instrument"]),
        "acquisition:",
        _fmt_settings(s["acquisition"]),
        f"wavelength: {wl['min_nm']:.3f} – {wl['max_nm']:.3f} nm ({wl['medium']}), {wl['n_pixels']} pixels, "
        f"mean step {wl['mean_step_nm']:.4f} nm",
        f"spectra: {sp['n_shots']} shots, {sp['dtype']}, saturation {sat}",
        "dark frames: " + ("none" if s["dark"] is None else f"{s['dark']['n_frames']}"),
        "relative response: " + ("yes" if s["response"] else "no"),
        "rastered (x, y per shot): " + ("yes" if s["rastered"] else "no"),
        "",
        "samples:",
    ]
    rows = [("sample", "role", "standard", "shots", "saturated px")]
    for smp in s["samples"]:
        rows.append((terminal_text(smp["sample_id"]), terminal_text(smp["role"]),
                     terminal_text(smp["standard_ref"] or "-"), str(smp["n_shots"]),
                     str(smp["saturated_pixels"])))
    lines.append(format_columns(rows, right={3, 4}, indent="  "))
    lines += _masked_lines(s)
    lines.append("")
    if s["findings"]:
        lines.append("findings:")
        for f in s["findings"]:
            lines.append(f"  {f['level']}: {f['where']}: {f['message']}")
    else:
        lines.append("findings: none")
    return "\n".join(lines)


def _masked_lines(s: dict, limit: int = 20) -> list[str]:
    """Masked pixels by sample and pixel range (compquant.run.mask)."""
    from compquant.run.mask import describe_shots

    out = []
    for smp in s["samples"]:
        for m in smp.get("masked", [])[:limit]:
            px = (f"pixel {m['first_pixel']}" if m["first_pixel"] == m["last_pixel"]
                  else f"pixels {m['first_pixel']}-{m['last_pixel']}")
            out.append(f"  {smp['sample_id']}: {px} ({m['first_nm']:.3f}-{m['last_nm']:.3f} nm), {m['reason']}, "
                       f"{describe_shots(m['shots'])}")
        extra = len(smp.get("masked", [])) - limit
        if extra > 0:
            out.append(f"  {smp['sample_id']}: ... and {extra} more masked range(s) (--json lists all)")
    if not out:
        return ["masked pixels: none"]
    return [f"masked pixels ({s['spectra'].get('masked_if', 'non-finite or implausible values')}, "
            "or masked in the file):"] + out


@click.command("inspect")
@run_argument
@click.option("--json", "as_json", is_flag=True, help="Print the summary as JSON.")
@click.option("--chunk-shots", default=4096, show_default=True, help="Shots read per chunk while scanning.")
def command(run_path, as_json, chunk_shots):
    """Show a run's instrument and acquisition settings, wavelength axis, samples
    (role, certified-standard reference, shots, saturated pixels), masked pixels by range, and validation
    findings. The file is opened read-only."""
    from compquant.run import Run, summarise_run

    with Run.open(run_path) as run:
        summary = summarise_run(run, chunk_shots=chunk_shots)
    if as_json:
        from compquant.fileio import json_ready

        click.echo(json.dumps(json_ready(summary, str), indent=2, sort_keys=True, default=str, allow_nan=False))
    else:
        click.echo(render_summary(summary))
