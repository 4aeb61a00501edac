"""``auditor demo``: the whole job on invented data, end to end."""
from __future__ import annotations

import click

from auditor.commands.context import Context, pass_ctx
from auditor.commands.meters import meters_table
from auditor.commands.options import json_option
from auditor.render import echo_json, table


@click.command("demo")
@click.option("--no-serve", is_flag=True, help="Do not start the dashboard at the end.")
@click.option("--port", default=8050, show_default=True, type=click.IntRange(0, 65535),
              help="Dashboard port (loopback).")
@json_option
@pass_ctx
def demo_cmd(ctx: Context, no_serve: bool, port: int, json_out: bool):
    """Build the demo database (if absent), import the demo data and print the case.

    With --json, only the summary is printed (the dashboard is not started)."""
    from auditor.services import demo
    from auditor.services.audit import audit_meter
    from auditor.services.database import database_label

    store = demo.open_demo_database(ctx.db_url)
    ctx.use_store(store)
    summary = demo.load_demo(store)
    audits = {m["meter"]: audit_meter(store, m["meter"], demo.DEMO_TARIFF).to_dict() for m in summary["meters"]}
    summary["audits"] = audits
    extra = demo_extensions(store)
    sections = extra.pop("_render")
    summary.update(extra)
    summary["database"] = database_label(store)
    if json_out:
        echo_json(summary)
        return 0
    click.echo(f"Demo database: {summary['database']}")
    for f in summary["files"]:
        click.echo(f"  {f['status']:<9} {f['path'].split('/')[-1]}  {f['message']}")
    click.echo("")
    click.echo(meters_table(summary["meters"]))
    click.echo(f"\nAudit under the tariff {demo.DEMO_TARIFF!r} (an invented utility):")
    rows = []
    for meter, a in audits.items():
        t = a["totals"]
        rows.append([meter, t.get("kwh"), t.get("pf"), t.get("total"), t.get("reactive_total")])
    click.echo(table(["meter", "kWh", "energy PF", f"total {a['currency']}", f"reactive {a['currency']}"], rows))
    for section in sections:
        click.echo("")
        click.echo(section)
    if not no_serve:
        from auditor.commands.serve import serve_dashboard

        serve_dashboard(store, host="127.0.0.1", port=port)
    return 0


def demo_extensions(store) -> dict:
    """The later stages of the demo: the savings case and the bill check."""
    from auditor.services.bills import demo_bill_check
    from auditor.services.demo_case import savings_case

    out: dict = {"_render": []}
    for key, stage in (("savings_case", savings_case), ("bill_check", demo_bill_check)):
        result = stage(store)
        out[key] = result["data"]
        out["_render"].append(result["text"])
    return out


commands = [demo_cmd]
