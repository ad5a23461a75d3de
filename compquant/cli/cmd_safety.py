"""``compquant safety``: the full safety notes of laser and spark work (the same text as on every
certificate of analysis and in the README), shown in short under every command's help."""

from __future__ import annotations

import click


@click.command("safety")
@click.option("--markdown", is_flag=True, help="Markdown list (as in the README) instead of plain text.")
@click.option("--width", type=click.IntRange(40, 200), default=78, show_default=True, help="Line width of plain text.")
def command(markdown, width):
    """Print the full safety notes: Class 4 laser radiation, ablation fumes, high voltage, UV and
    ozone, purge gas. They summarise the usual cautions of the trade; local regulations and the
    laboratory's licensed safety officer take precedence."""
    from compquant.report.safety import safety_markdown, safety_plain

    click.echo("SAFETY NOTES (LIBS and spark OES can hurt people)\n")
    click.echo(safety_markdown() if markdown else safety_plain(width=width))
