"""``auditor report``: the case document of a saved scenario, or the audit report of a meter, as
HTML (offline), PDF, XLSX or CSV."""
from __future__ import annotations

from pathlib import Path

import click

from auditor.commands.case import cover_of, cover_options
from auditor.commands.context import Context, pass_ctx
from auditor.commands.options import meter_option, tariff_option

SUFFIXES = (".html", ".htm", ".pdf", ".xlsx", ".csv")


@click.command("report")
@meter_option(required=False, help="Meter id as imported (not needed with --scenario).")
@click.option("--site", metavar="NAME",
              help="Write the site's portfolio instead: every meter of site NAME audited, one row per meter "
                   "(.html or .csv).")
@tariff_option(required=False, help="Tariff TOML file or a shipped example's name "
                                    "(default with --scenario: the tariff stored with the scenario).")
@click.option("--scenario", metavar="NAME", help="The saved scenario NAME (auditor size --save NAME): the case document.")
@click.option("--out", "out", required=True, type=click.Path(dir_okay=False, path_type=Path),
              help="Output file; the suffix chooses the format: .html (offline document), .pdf (printed by "
                   "Chromium), .xlsx, .csv.")
@click.option("--paper", type=click.Choice(["a4", "letter"]), default="a4", show_default=True,
              help="Paper size of the printed document (.html print stylesheet and .pdf).")
@click.option("--table", "csv_table", type=click.Choice(["periods", "summary", "specification"]), default="periods",
              show_default=True,
              help="With a .csv file: which table it holds (a CSV is one table) — the audit by period "
                   "(before/after for a scenario), the summary, or the specification.")
@cover_options
@pass_ctx
def report_cmd(ctx: Context, meter: str | None, site: str | None, tariff: str | None, scenario: str | None,
               out: Path, paper: str, csv_table: str, **kwargs):
    """Write the case document of a saved scenario, the audit report of a meter, or with --site
    the portfolio of a site's meters."""
    from dataclasses import replace

    from auditor.services import report as rp

    if meter and site:
        raise click.UsageError("give either --meter M or --site NAME")
    cover = cover_of(kwargs)
    if site is not None:
        if csv_table != "periods":
            raise click.UsageError("--table belongs to a case document or a meter's report, not a site's portfolio")
        return _site_report(ctx, site, tariff, scenario, out, cover)
    if out.suffix.lower() not in SUFFIXES:
        raise click.BadParameter(f"{out.name}: the file name must end in .html, .pdf, .xlsx or .csv",
                                 param_hint="--out")
    fmt = rp.format_of(out)
    if csv_table != "periods" and fmt != "csv":
        raise click.BadParameter(f"{csv_table}: a table is chosen for a .csv file only (the other formats hold "
                                 "every table)", param_hint="--table")
    if scenario:
        if cover:
            rp.set_scenario_cover(ctx.store, scenario, **cover)
        if meter:
            report = rp.build_report(ctx.store, meter, tariff or _scenario_tariff(ctx, scenario), scenario,
                                     with_profile=fmt in ("html", "pdf"))
        else:
            report = rp.build_case(ctx.store, scenario, tariff, with_profile=fmt in ("html", "pdf"))
    else:
        if not meter:
            raise click.UsageError("give --scenario NAME (a saved case), --meter M or --site NAME")
        if not tariff:  # the meter's own tariff (auditor meters set-tariff), or a usage error saying so
            from auditor.services.meter_tariff import tariff_for_meter

            tariff = tariff_for_meter(ctx.store, meter, None)
        report = rp.build_report(ctx.store, meter, tariff, with_profile=fmt in ("html", "pdf"))
        if cover:
            report = replace(report, cover=cover)
    path = rp.write_document(report, out, paper=paper, table=csv_table)
    ctx.say(f"wrote {path} ({path.stat().st_size:,} bytes)")
    return 0


def _scenario_tariff(ctx: Context, scenario: str) -> str:
    from auditor.services.correction import get_scenario

    return get_scenario(ctx.store, scenario)["request"].get("tariff")


def _site_report(ctx: Context, site: str, tariff: str | None, scenario: str | None, out: Path, cover: dict) -> int:
    from auditor.services.site_report import SITE_FORMATS, write_site_report

    if scenario or cover:
        raise click.UsageError("--scenario and the cover options belong to a case document, not a site's portfolio")
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
