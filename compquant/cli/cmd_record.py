"""``compquant record ...``: the lab's record: review and release, history, control charts, export.

Sub-commands: ``pending`` (drafts awaiting review), ``release``, ``reject``, ``amend``,
``verify`` (is this file the released version?), ``history`` (a sample across runs), ``chart``
(Shewhart control charts, PNG + CSV), ``audit`` (the audit trail), ``export`` (every table as
CSV or Parquet) and ``info``.  Every sub-command takes ``--db PATH|URL`` (default
``$COMPQUANT_DB``, else the per-user record, see ``docs/record.md``).
"""

from __future__ import annotations

import sys

import click

from compquant.cli._common import file_option, folder_option, format_columns, write_csv

_DB_HELP = "The record: SQLite file path or database URL (default: $COMPQUANT_DB, else the per-user record)."


def _db_option(f):
    return click.option("--db", metavar="PATH|URL", help=_DB_HELP)(f)


def _open(db):
    from compquant.record import open_record

    return open_record(db)


@click.group("record", context_settings={"help_option_names": ["-h", "--help"]})
def command():
    """The lab's record: review and release certificates, history, control charts, export.

    'analyse --db' (or $COMPQUANT_DB) stores every analysis; certificates start as DRAFT and
    leave the lab only after 'record release'.  Nothing in the record is edited or deleted:
    rejections, amendments and releases are added, each with who, when and why.
    """


@command.command("pending")
@_db_option
def pending(db):
    """List the certificates awaiting review, with their flags and failed rules."""
    from compquant.record.review import awaiting_review

    with _open(db) as rec:
        items = awaiting_review(rec)
    if not items:
        click.echo("nothing awaits review")
        return
    rows = [["certificate", "sample", "run", "analysed", "release", "flags"]]
    for it in items:
        ok = "ok" if it["valid_for_release"] and not it["chart_blocks"] else "BLOCKED"
        flags = " ".join(it["flags"]) or "-"
        rows.append([it["number"], it["sample_id"][:30], it["run"], it["analysed_at"], ok, flags])
    click.echo(format_columns(rows))
    for it in items:
        for why in it["reasons"]:
            click.echo(f"  {it['number']}: not valid for release: {why}")
        for msg in it["chart"]:
            click.echo(f"  {it['number']}: {msg}" + (" (blocks release)" if it["chart_blocks"] else ""))


@command.command("release")
@click.argument("number")
@click.option("--reviewer", required=True, help="Name of the person who reviewed and releases the certificate.")
@click.option("--role", default="", help="The reviewer's role (e.g. head of laboratory).")
@click.option("--statement", default="", help="Review statement printed with the authorisation.")
@folder_option(
    "-o", "--outdir",
    help="Write the released files here "
    "(default: the draft's folder, replacing the draft files).",
)
@_db_option
def release_cmd(number, reviewer, role, statement, outdir, db):
    """Release a draft: the final PDF and JSON carry the reviewer's authorisation."""
    from compquant.record.review import release

    with _open(db) as rec:
        out = release(rec, number, reviewer=reviewer, role=role, statement=statement, outdir=outdir)
    click.echo(f"released {number} by {out['review']['reviewer']} at {out['review']['at']}")
    click.echo(f"  PDF:  {out['pdf']}\n  JSON: {out['json']}")


@command.command("reject")
@click.argument("number")
@click.option("--reviewer", required=True, help="Name of the reviewer.")
@click.option("--reason", required=True, help="Why the draft is rejected.")
@_db_option
def reject_cmd(number, reviewer, reason, db):
    """Reject a draft with a reason (it stays in the record as rejected)."""
    from compquant.record.review import reject

    with _open(db) as rec:
        reject(rec, number, reviewer=reviewer, reason=reason)
    click.echo(f"rejected {number}")


@command.command("amend")
@click.argument("number")
@click.option("--reason", required=True, help="What is changed and why (printed on the new revision).")
@file_option(
    "--from", "from_json",
    help="Certificate JSON with the corrected content (default: the released content).",
)
@folder_option("-o", "--outdir", help="Folder of the new revision's draft.")
@_db_option
def amend_cmd(number, reason, from_json, outdir, db):
    """Issue a new revision of a released certificate, as a draft awaiting review."""
    from compquant.record.review import amend

    with _open(db) as rec:
        out = amend(rec, number, reason=reason, from_json=from_json, outdir=outdir)
    click.echo(f"draft {out['number']} (revision {out['revision']}) replaces {number} once released")
    click.echo(f"  PDF:  {out['pdf']}\n  JSON: {out['json']}")


@command.command("verify")
@click.argument("files", nargs=-1, required=True, type=click.Path(dir_okay=False))
@_db_option
def verify_cmd(files, db):
    """Check certificate files (PDF or JSON) against the record by SHA-256.

    Exit status 0 when every file is the released version of a certificate in force, 1 otherwise.
    """
    from compquant.record.review import verify_file

    all_ok = True
    with _open(db) as rec:
        for f in files:
            v = verify_file(rec, f)
            if v["status"] == "released":
                click.echo(f"{f}: the released version of {v['number']} (revision {v['revision']}), released by "
                           f"{v['reviewer']}" + (f", {v['role']}" if v["role"] else "")
                           + f" at {v['released_at']}, from run {v['run']} (SHA-256 {v['run_sha256'][:16]}...)")
                continue
            all_ok = False
            if v["status"] == "unknown":
                extra = f"; it names {v['number']}" if v.get("number") else ""
                click.echo(f"{f}: NOT the released version: no file with this SHA-256 is in the record "
                           f"(altered, or from elsewhere){extra}")
            elif v["status"] == "superseded":
                click.echo(f"{f}: NOT in force: {v['number']} was released but is superseded by a later revision")
            else:
                click.echo(f"{f}: NOT the released version: it is the {v['status']} of {v['number']}")
    sys.exit(0 if all_ok else 1)


@command.command("history")
@click.argument("sample_id")
@file_option("--csv", "csv_path", help="Also write the history as CSV.")
@_db_option
def history_cmd(sample_id, csv_path, db):
    """A sample's results across runs, with its certificates and their states.

    Value and U as on the certificate (U to two significant digits, the value to the same decimal
    place), in g/g; "< LOD" for a result below the LOD, "not determined" for one without a value.
    """
    from compquant.record.display import result_text
    from compquant.record.queries import sample_history

    with _open(db) as rec:
        df = sample_history(rec, sample_id)
    if df.empty:
        click.echo(f"no results of sample {sample_id!r} in the record")
        return
    rows = [["measured", "run", "element", "value (g/g)", "U (g/g)", "flags", "certificate", "state"]]
    for r in df.itertuples(index=False):
        value, U = result_text(r.value, r.U, r.below_lod)
        rows.append([r.measured_at, r.run, r.element, value, U, r.flags or "-", getattr(r, "certificate", ""),
                     getattr(r, "state", "")])
    click.echo(format_columns(rows, right=(3, 4)))
    if csv_path:
        write_csv(df, csv_path)


@command.command("chart")
@folder_option("-o", "--outdir", help="Folder for PNG and CSV.", required=True)
@click.option("--material", help="Only this check material (standard reference).")
@click.option("--element", help="Only this element.")
@click.option("--drift/--no-drift", default=True, help="Also chart the drift-correction factors (default: yes).")
@_db_option
def chart_cmd(outdir, material, element, drift, db):
    """Shewhart control charts (ISO 7870-2) of check samples and drift factors: PNG + CSV each."""
    from compquant.record.chartfiles import write_charts

    with _open(db) as rec:
        written = write_charts(rec, outdir, material=material, element=element, drift=drift)
    if not written:
        click.echo("no check-sample or drift data in the record" + (" for that choice" if material or element else ""))
        return
    for w in written:
        broken = f"; tests broken at {w['broken']} run(s)" if w["broken"] else ""
        click.echo(f"{w['title']}: {w['points']} runs, limits {w['limits']}{broken} -> {w['png']}")


@command.command("audit")
@click.argument("subject", required=False)
@file_option("--csv", "csv_path", help="Also write the trail as CSV.")
@_db_option
def audit_cmd(subject, csv_path, db):
    """The audit trail (who, when, what, why), optionally for one certificate and its revisions."""
    from compquant.record.queries import audit_trail

    with _open(db) as rec:
        df = audit_trail(rec, subject)
    rows = [["when (UTC)", "who", "what", "subject", "why"]]
    rows += [[r.at, r.who, r.action, r.subject[:40], r.why] for r in df.itertuples(index=False)]
    click.echo(format_columns(rows))
    if csv_path:
        write_csv(df, csv_path)


@command.command("export")
@click.argument("outdir", type=click.Path(file_okay=False))
@click.option("--format", "fmt", type=click.Choice(["csv", "parquet"]), default="csv", show_default=True)
@_db_option
def export_cmd(outdir, fmt, db):
    """Export the whole record, one file per table plus manifest.json (backup, LIMS)."""
    from compquant.record.export import export_record

    with _open(db) as rec:
        man = export_record(rec, outdir, fmt)
    n = sum(t["rows"] for t in man["tables"].values())
    click.echo(f"exported {len(man['tables'])} tables ({n} rows) to {outdir}")


@command.command("info")
@_db_option
def info_cmd(db):
    """Where the record is, its schema revision and what it holds."""
    import sqlalchemy as sa

    from compquant.record import schema as S
    from compquant.record.db import schema_revision

    with _open(db) as rec:
        with rec.transaction() as conn:
            counts = {t.name: conn.execute(sa.select(sa.func.count()).select_from(t)).scalar_one() for t in S.TABLES}
        click.echo(f"record: {rec.where} ({rec.dialect}), schema revision {schema_revision(rec)}")
    click.echo(format_columns([[k, str(v)] for k, v in counts.items()], right=(1,), indent="  "))
