"""``auditor serve``: the dashboard on waitress, loopback unless a token guards it."""
from __future__ import annotations

import ipaddress
import socket

import click

from auditor.commands.context import Context, pass_ctx
from auditor.errors import UsageError

TOKEN_ENV = "AUDITOR_TOKEN"


def is_loopback(host: str) -> bool:
    """True for 127.0.0.0/8, ::1 and ``localhost``; any other name or address is beyond."""
    if host.strip().lower() in ("localhost", "localhost."):
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False


def check_binding(host: str, token: str | None) -> None:
    if not is_loopback(host) and not token:
        raise UsageError(f"--host {host} is beyond this computer: give --token TOKEN (or set {TOKEN_ENV}) "
                         "so that every request must carry it")
    if token is not None and len(token) < 12:
        raise UsageError("the access token must be at least 12 characters")


def make_server(store, host: str = "127.0.0.1", port: int = 8050, token: str | None = None,
                config: dict | None = None, threads: int = 4):
    """A waitress server for the dashboard (not started); ``server.run()`` serves."""
    from waitress import create_server

    from auditor.web import create_app

    check_binding(host, token)
    cfg = {"AUTH_TOKEN": token, "WARM_CACHE": True, "SERVED_BEYOND_LOOPBACK": not is_loopback(host),
           **(config or {})}
    app = create_app(cfg, store=store)
    try:
        return create_server(app, host=host, port=port, threads=threads, ident="pf-auditor",
                             clear_untrusted_proxy_headers=True)
    except OSError as exc:
        raise UsageError(f"cannot listen on {host}:{port}: {exc.strerror or exc}") from None


def dashboard_url(host: str, port: int) -> str:
    shown = host
    if ":" in host and not host.startswith("["):
        shown = f"[{host}]"
    if host in ("0.0.0.0", "::"):
        shown = socket.gethostname()
    return f"http://{shown}:{port}/"


def serve_dashboard(store, host: str = "127.0.0.1", port: int = 8050, token: str | None = None,
                    config: dict | None = None) -> None:
    """Serve the dashboard on ``store`` until interrupted, printing its address first."""
    server = make_server(store, host, port, token, config)
    url = dashboard_url(host, server.effective_port)
    click.echo(f"Dashboard: {url}" + ("  (needs the access token: open it with ?token=...)" if token else ""))
    click.echo("Press Ctrl+C to stop.")
    try:
        server.run()
    except KeyboardInterrupt:
        click.echo("stopped")
    finally:
        server.close()


@click.command("serve")
@click.option("--host", default="127.0.0.1", show_default=True,
              help="Address to listen on; beyond loopback an access token is required.")
@click.option("--port", default=8050, show_default=True, type=click.IntRange(0, 65535),
              help="TCP port to listen on (0: any free port).")
@click.option("--token", metavar="TOKEN", envvar=TOKEN_ENV, show_envvar=True,
              help="Access token every request must carry (cookie after a first ?token=TOKEN or the login page).")
@click.option("--tariff", "default_tariff", metavar="NAME",
              help="Tariff the pages open with (a shipped example's name or one in the instance folder).")
@pass_ctx
def serve_cmd(ctx: Context, host: str, port: int, token: str | None, default_tariff: str | None):
    """Serve the dashboard (waitress)."""
    check_binding(host, token)
    config = {"DEFAULT_TARIFF": default_tariff} if default_tariff else {}
    serve_dashboard(ctx.store, host=host, port=port, token=token or None, config=config)
    return 0


commands = [serve_cmd]

