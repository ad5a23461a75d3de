"""``compquant demo``: the main job on the shipped demo run, certificates into ./compquant-demo/."""

from __future__ import annotations

from pathlib import Path

import click

from compquant.errors import InputError


def _roots() -> list[Path]:
    here = Path(__file__).resolve()
    roots = [Path.cwd(), here.parents[2]]  # ./ and the source tree holding compquant/
    out = []
    for r in roots:
        if r not in out:
            out.append(r)
    return out


def find_demo_files() -> dict[str, Path]:
    """Locate the demo run, method, standards, lab profile and specification.

    Looks in ``./demo_runs`` and in ``demo_runs`` beside the package source tree.
    """
    tried = []
    for root in _roots():
        d = root / "demo_runs"
        tried.append(str(d))
        if not d.is_dir():
            continue
        runs = sorted(d.glob("*.h5"))
        methods = sorted(p for p in d.glob("*.toml") if "method" in p.name)
        specs = sorted(d.glob("spec-*.toml"))
        lab = d / "lab.toml"
        stds = sorted((root / "standards").glob("demo-*.csv")) + sorted(d.glob("*standards*.csv"))
        preferred = [p for p in runs if "day1" in p.name]  # the calibration-day run holds the standards
        found = {
            "run": (preferred or runs or [None])[0],
            "method": (methods or [None])[0],
            "standards": (stds or [None])[0],
            "lab": lab if lab.is_file() else None,
            "spec": (specs or [None])[0],
        }
        missing = [k for k, v in found.items() if v is None]
        if missing:
            raise InputError(
                f"demo files missing: {', '.join(missing)}",
                where=str(d),
                fix="run from the compquant source tree, which ships demo_runs/ and standards/",
            )
        return found
    raise InputError(
        "demo files not found",
        where=" or ".join(tried),
        fix="run 'compquant demo' from the root of the compquant source tree",
    )


@click.command("demo")
@click.option(
    "-o",
    "--outdir",
    default="compquant-demo",
    show_default=True,
    type=click.Path(file_okay=False),
    help="Output folder.",
)
@click.option("--issued-at", metavar="ISO-8601", help="Issue time in UTC (default: now).")
@click.option("--quiet", is_flag=True, help="No progress bars.")
def command(outdir, issued_at, quiet):
    """Run 'analyse' on the shipped demo run (fictional lab, standards and samples).

    Uses the shipped method, certified standards, lab profile and
    specification, writes the certificates into OUTDIR and prints where they are.
    """
    from compquant.analyse import analyse
    from compquant.cli.cmd_analyse import StageProgress, report_outputs

    f = find_demo_files()
    click.echo("demo (all data, lab, standards and samples are fictional):")
    for k in ("run", "method", "standards", "lab", "spec"):
        click.echo(f"  {k:9s} {f[k]}")
    prog = StageProgress(enabled=not quiet)
    try:
        out = analyse(
            f["run"],
            f["method"],
            standards=f["standards"],
            lab=f["lab"],
            spec=f["spec"],
            outdir=outdir,
            issued_at=issued_at,
            progress=prog,
        )
    finally:
        prog.close()
    report_outputs(out)
    pdfs = [c.pdf for c in out.certificates]
    click.echo("open the certificates: " + (pdfs[0] if len(pdfs) == 1 else f"{Path(out.outdir)}/*.pdf"))
