"""``auditor report``: the dashboard's exports for scripted use (HTML, XLSX, CSV)."""
from __future__ import annotations

from pathlib import Path

import click

from auditor.commands.context import Context, pass_ctx
from auditor.commands.options import meter_option, tariff_option


@click.command("report")
@meter_option(required=False)
@click.option("--site", metavar="NAME",
              help="Write the site's portfolio instead: every meter of site NAME audited, one row per meter (.html or .csv).")
@tariff_option(required=False, help="Tariff TOML file or a shipped example's name "
                                    "(default with --scenario: the scenario's own).")
@click.option("--scenario", metavar="NAME", help="Add the saved correction scenario NAME (auditor size --save NAME).")
@click.option("--out", "out", required=True, type=click.Path(dir_okay=False, path_type=Path),
              help="Output file; the suffix chooses the format: .html (self-contained report), .xlsx, .csv.")
@pass_ctx
def report_cmd(ctx: Context, meter: str | None, site: str | None, tariff: str | None, scenario: str | None, out: Path):
    """Write an audit report of a meter (with a saved scenario: the correction case), or with
    --site the portfolio of a site's meters."""
    from auditor.services.correction import get_scenario
    from auditor.services.report import FORMATS, write_report

    if (meter is None) == (site is None):
        raise click.UsageError("give either --meter M or --site NAME")
    if site is not None:
        return _site_report(ctx, site, tariff, scenario, out)
    if tariff is None:
        if not scenario:
            raise click.UsageError("give --tariff FILE (or --scenario NAME to use the scenario's tariff)")
        tariff = get_scenario(ctx.store, scenario)["request"].get("tariff")
    if out.suffix.lower().lstrip(".") not in (*FORMATS, "htm"):
        raise click.BadParameter(f"{out.name}: the file name must end in .html, .csv or .xlsx", param_hint="--out")
    path = write_report(ctx.store, meter, tariff, out, scenario)
    ctx.say(f"wrote {path} ({path.stat().st_size:,} bytes)")
    return 0


def _site_report(ctx: Context, site: str, tariff: str | None, scenario: str | None, out: Path) -> int:
    from auditor.services.site_report import SITE_FORMATS, write_site_report

    if scenario:
        raise click.UsageError("--scenario belongs to a meter's report (--meter M)")
    if tariff is None:
        raise click.UsageError("give --tariff FILE for the site's meters")
    if out.suffix.lower().lstrip(".") not in (*SITE_FORMATS, "htm"):
        raise click.BadParameter(f"{out.name}: a site report file name must end in .html or .csv", param_hint="--out")
    path, report = write_site_report(ctx.store, site, tariff, out)
    ctx.say(f"wrote {path} ({path.stat().st_size:,} bytes; {report.totals['audited']} of "
            f"{report.totals['meters']} meters audited)")
    for f in report.batch.failed:
        click.echo(f"error: meter {f['meter']}: {f['error']}", err=True)
    if report.batch.internal_error:
        return 3
    return 1 if report.batch.failed else 0


commands = [report_cmd]
