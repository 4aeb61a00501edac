"""``auditor report``: the dashboard's exports for scripted use (HTML, XLSX, CSV)."""
from __future__ import annotations

from pathlib import Path

import click

from auditor.commands.context import Context, pass_ctx
from auditor.commands.options import meter_option, tariff_option


@click.command("report")
@meter_option()
@tariff_option(required=False, help="Tariff TOML file or a shipped example's name "
                                    "(default with --scenario: the scenario's own).")
@click.option("--scenario", metavar="NAME", help="Add the saved correction scenario NAME (auditor size --save NAME).")
@click.option("--out", "out", required=True, type=click.Path(dir_okay=False, path_type=Path),
              help="Output file; the suffix chooses the format: .html (self-contained report), .xlsx, .csv.")
@pass_ctx
def report_cmd(ctx: Context, meter: str, tariff: str | None, scenario: str | None, out: Path):
    """Write an audit report of a meter (with a saved scenario: the correction case)."""
    from auditor.services.correction import get_scenario
    from auditor.services.report import FORMATS, write_report

    if tariff is None:
        if not scenario:
            raise click.UsageError("give --tariff FILE (or --scenario NAME to use the scenario's tariff)")
        tariff = get_scenario(ctx.store, scenario)["request"].get("tariff")
    if out.suffix.lower().lstrip(".") not in (*FORMATS, "htm"):
        raise click.BadParameter(f"{out.name}: the file name must end in .html, .csv or .xlsx", param_hint="--out")
    path = write_report(ctx.store, meter, tariff, out, scenario)
    ctx.say(f"wrote {path} ({path.stat().st_size:,} bytes)")
    return 0


commands = [report_cmd]
