"""``compquant demo``: the main job on the shipped demo run, certificates into ./compquant-demo/."""

from __future__ import annotations

from pathlib import Path

import click

from compquant.cli.cmd_analyse import _EPILOG
from compquant.errors import InputError


def _roots() -> list[Path]:
    """Folders that may hold ``demo_runs/`` and ``standards/``: the current folder, the source
    tree holding ``compquant/``, and the package's own copy (``compquant/demo``, in the wheel)."""
    here = Path(__file__).resolve()
    roots = [Path.cwd(), here.parents[2], here.parents[1] / "demo"]
    out = []
    for r in roots:
        if r not in out:
            out.append(r)
    return out


DEMO_SCENARIO = "scenario-day1.toml"  # calibration day: standards, blank, setup, check, unknowns
DEMO_RUN = "demo-day1.h5"
DEMO_SEED = 1  # as in demo_runs/regenerate.sh
DEMO_METHOD = "method.toml"
DEMO_STANDARDS = "demo-copper-alloys.csv"


def find_demo_files() -> dict[str, Path | None]:
    """Locate the demo run (or its scenario), method, standards, lab profile and specification.

    Looks in ``./demo_runs``, in ``demo_runs`` beside the package source tree and in the
    installed package's copy (``compquant/demo/demo_runs``); standards in ``standards/``
    beside it.  ``run`` is None when only the scenario is shipped (then
    ``compquant demo`` simulates the run first).
    """
    tried = []
    for root in _roots():
        d = root / "demo_runs"
        tried.append(str(d))
        if not d.is_dir():
            continue
        found = {
            "run": d / DEMO_RUN if (d / DEMO_RUN).is_file() else None,
            "scenario": d / DEMO_SCENARIO if (d / DEMO_SCENARIO).is_file() else None,
            "method": d / DEMO_METHOD if (d / DEMO_METHOD).is_file() else None,
            "standards": root / "standards" / DEMO_STANDARDS
            if (root / "standards" / DEMO_STANDARDS).is_file()
            else None,
            "lab": d / "lab.toml" if (d / "lab.toml").is_file() else None,
            "spec": (sorted(d.glob("spec-*.toml")) or [None])[0],
        }
        missing = [k for k, v in found.items() if v is None and k not in ("run", "scenario")]
        if found["run"] is None and found["scenario"] is None:
            missing.insert(0, f"run ({DEMO_RUN} or {DEMO_SCENARIO})")
        if missing:
            raise InputError(
                f"demo files missing: {', '.join(missing)}",
                where=str(d),
                fix="reinstall compquant (the wheel ships demo_runs/ and standards/), or run from its source tree",
            )
        return found
    raise InputError(
        "demo files not found",
        where=" or ".join(tried),
        fix="reinstall compquant (the wheel ships the demo files in compquant/demo/) or run from its source tree",
    )


@click.command("demo", epilog=_EPILOG)
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
@click.pass_context
def command(ctx, outdir, issued_at, quiet):
    """Run 'analyse' on the shipped demo run (fictional lab, standards and samples).

    Uses the shipped method, certified standards, lab profile and
    specification, writes the certificates into OUTDIR and prints where they are.
    """
    from compquant.analyse import analyse
    from compquant.cli.cmd_analyse import StageProgress, report_outputs

    f = find_demo_files()
    if f["run"] is None:
        from compquant.simulate import simulate_run

        run = Path(outdir) / DEMO_RUN
        click.echo(f"simulating the demo run from {f['scenario']} (seed {DEMO_SEED}) ...")
        simulate_run(f["scenario"], run, seed=DEMO_SEED)
        f["run"] = run
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
    if out.exit_code:
        ctx.exit(out.exit_code)
