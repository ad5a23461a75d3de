"""``-`` for standard input on the options that read one table (issue 20, item 3).

:func:`table_input` is a ``click.Path`` option type whose value ``-`` means: read this table from
standard input. The option's callback reads it at once, through
:func:`compquant.fileio.read_stdin` (refused with one ``error:`` line when standard input is a
terminal or empty, bounded by :data:`compquant.fileio.MAX_TABLE_BYTES`), and hands the command an
:class:`compquant.fileio.InputBytes`: its bytes, their SHA-256 and the name ``<stdin>`` that
provenance records. A file path is passed on unchanged (the loader reads and hashes it).

Standard input can be read once: a second option given ``-`` in the same command is refused
(``error:`` line, exit 2) before anything is read for it.

Not a command module (no ``cmd_`` prefix), so the lazy command discovery skips it.
"""

from __future__ import annotations

import click

from compquant.errors import InputError

#: ``ctx.meta`` key holding the option that read standard input
_CLAIM = "compquant.stdin_option"

#: the words under an option that accepts ``-``
STDIN_HELP = "'-' reads it from standard input."


def _read_stdin_once(what: str, limit: int | str):
    def callback(ctx: click.Context, param: click.Parameter, value):
        if value is None or str(value) != "-":
            return value
        name = param.opts[0] if param.opts else param.name
        root = ctx.find_root()
        first = root.meta.get(_CLAIM)
        if first is not None and first != name:
            raise InputError(f"only one input can be read from standard input, and {first} already is",
                             where=f"{name} -", fix=f"give {name} a file path")
        root.meta[_CLAIM] = name
        from compquant import fileio

        return fileio.read_stdin(what, limit=getattr(fileio, limit) if isinstance(limit, str) else limit)

    return callback


def table_input(*param_decls: str, what: str, help: str, limit: int | str = "MAX_TABLE_BYTES", **kwargs):
    """A ``click.option`` for one input table, a file path or ``-`` for standard input.

    ``what`` names the table in messages ("standards file"); ``help`` is the option's help, to
    which :data:`STDIN_HELP` is added; ``limit``: the most bytes read from standard input, a
    number or the name of a :mod:`compquant.fileio` limit, looked up when the option is used
    (default :data:`compquant.fileio.MAX_TABLE_BYTES`; the loader applies the same to a file).
    """
    return click.option(*param_decls, type=click.Path(dir_okay=False, allow_dash=True),
                        callback=_read_stdin_once(what, limit), help=f"{help} {STDIN_HELP}", **kwargs)


__all__ = ["STDIN_HELP", "table_input"]
