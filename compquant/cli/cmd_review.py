"""``compquant review``: the local review page over the lab's record (see docs/review-page.md)."""

from __future__ import annotations

import socket

import click

from compquant.errors import InputError

LOOPBACK = ("127.0.0.1", "localhost", "::1")


def _app(db, host: str):
    try:
        from compquant.web.app import LOOPBACK_HOSTS, create_app
    except ImportError as exc:
        raise InputError(f"the review page needs Flask ({exc})", where="review",
                         fix="pip install 'compquant[web]'") from exc
    from compquant.record import open_record

    rec = open_record(db)
    if host in ("0.0.0.0", "::", ""):
        hosts = None  # reached by any of this computer's names
    else:
        hosts = [*LOOPBACK_HOSTS, host, f"[{host}]"]
    return rec, create_app(rec, trusted_hosts=hosts)


def _listen(host: str, port: int) -> socket.socket:
    """A listening socket (werkzeug's own bind error would exit 1 with several lines of text)."""
    family = socket.AF_INET6 if ":" in host else socket.AF_INET
    sock = socket.socket(family, socket.SOCK_STREAM)
    try:
        sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        sock.bind((host, port))
        sock.listen(128)
    except OSError as exc:
        sock.close()
        raise InputError(f"cannot listen on {host}:{port} ({exc.strerror})", where="--host/--port",
                         fix="choose another --port (0: any free port), or stop the program using it") from exc
    return sock


@click.command("review", context_settings={"help_option_names": ["-h", "--help"]})
@click.option("--db", metavar="PATH|URL",
              help="The record: SQLite file path or database URL (default: $COMPQUANT_DB, else the per-user record).")
@click.option("--host", default="127.0.0.1", show_default=True,
              help="Address to listen on. Anything but this computer's loopback lets others on the network "
                   "review and release: there is no login.")
@click.option("--port", default=8765, show_default=True, type=click.IntRange(0, 65535), help="Port (0: any free port).")
def command(db, host, port):
    """Start the local review page: runs, samples, check samples, certificates, control charts, release.

    Open the printed address in a browser on this computer.  Release, reject and amend from the
    page are the same steps as 'compquant record release|reject|amend', with the same audit
    trail.  Stop with Ctrl-C.
    """
    from werkzeug.serving import make_server

    rec, app = _app(db, host)
    if host not in LOOPBACK:
        click.echo(f"warning: serving on {host}: anyone who can reach this computer on port {port} can release "
                   "certificates (the page has no login); use the default 127.0.0.1 unless the network is trusted",
                   err=True)
    sock = _listen(host, port)
    try:
        server = make_server(host, port, app, threaded=True, fd=sock.fileno())
    finally:
        sock.close()  # the server holds its own duplicate of the socket
    shown = f"[{host}]" if ":" in host else host
    click.echo(f"review page of {rec.where} at http://{shown}:{server.port}/  (Ctrl-C stops it)")
    try:
        server.serve_forever()
    except KeyboardInterrupt:
        pass
    finally:
        server.server_close()
        rec.dispose()
