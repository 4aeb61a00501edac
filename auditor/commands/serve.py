"""``auditor serve``: the dashboard on waitress, loopback unless a token guards it."""
from __future__ import annotations

import ipaddress
import socket
from pathlib import Path

import click

from auditor.commands.context import Context, pass_ctx
from auditor.commands.options import tariff_option
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


def looks_like_path(value: str) -> bool:
    """A tariff given as a file (a path, or a name ending .toml) rather than by name."""
    return value.lower().endswith(".toml") or "/" in value or "\\" in value or Path(value).is_file()


def tariff_config(tariff: str, instance: Path) -> dict:
    """The dashboard settings for ``serve --tariff``: a file is checked and offered by its stem
    (it wins over a tariff of the same name); a name must be a shipped example or one of the
    dashboard's own tariffs. Anything else is a usage error (exit 2), never ignored."""
    from auditor.errors import TariffError
    from auditor.services.portfolio import tariff_choices

    if looks_like_path(tariff):
        path = Path(tariff).expanduser()
        if not path.is_file():
            raise UsageError(f"--tariff {tariff}: no such tariff file")
        from auditor.tariffs import load_tariff

        try:
            load_tariff(path)
        except TariffError as exc:
            raise UsageError(f"--tariff: {exc.message}") from None
        return {"TARIFF_FILES": [str(path.resolve())], "DEFAULT_TARIFF": path.stem}
    choices = {c.name: c for c in tariff_choices([instance / "tariffs"])}
    if tariff not in choices:
        raise UsageError(f"--tariff {tariff}: no tariff of that name (known: {', '.join(sorted(choices))}); "
                         "give a tariff file's path to serve your own")
    if choices[tariff].error:
        raise UsageError(f"--tariff {tariff}: {choices[tariff].error}")
    return {"DEFAULT_TARIFF": tariff}


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
@tariff_option(required=False, help="Tariff the pages open with: a TOML file (offered beside the others by its "
                                   "file name), or the name of a shipped example or of a tariff kept in the dashboard.")
@pass_ctx
def serve_cmd(ctx: Context, host: str, port: int, token: str | None, tariff: str | None):
    """Serve the dashboard (waitress)."""
    check_binding(host, token)
    config = {}
    if tariff:
        from auditor.web import instance_folder

        config = tariff_config(tariff, instance_folder())
    serve_dashboard(ctx.store, host=host, port=port, token=token or None, config=config)
    return 0


commands = [serve_cmd]

