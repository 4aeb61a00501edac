"""Options of a client's case shared by ``auditor size`` and ``auditor report`` (the cover, the
finance items, rates as fractions or percents), and ``auditor scenarios compare``."""
from __future__ import annotations

import click

from auditor.commands.context import Context, pass_ctx
from auditor.render import echo_json

RATE_HELP = "fraction a year (0.08) or percent with a % sign (8%)"


class Rate(click.ParamType):
    """A rate a year: ``0.08`` or ``8%`` (a bare number above 1 is refused: it is a percent
    without its sign)."""

    name = "RATE"

    def convert(self, value, param, ctx):
        if isinstance(value, float):
            return value
        from auditor.errors import UsageError
        from auditor.finance import parse_rate

        try:
            return parse_rate(value, bare="fraction", name=param.opts[0] if param else "rate")
        except UsageError as exc:
            self.fail(exc.message, param, ctx)


RATE = Rate()


def cover_options(f):
    """``--client``, ``--project``, ``--author``: the cover of the case document."""
    for name, what in (("author", "who prepared the case"), ("project", "the project the case belongs to"),
                       ("client", "the client the case is for")):
        f = click.option(f"--{name}", name, metavar="TEXT",
                         help=f"Cover of the case document: {what} (stored with a saved scenario).")(f)
    return f


def cover_of(kwargs: dict) -> dict:
    """The cover fields given (popped from ``kwargs``)."""
    return {k: v for k in ("client", "project", "author") if (v := kwargs.pop(k, None)) is not None}


#: (option, key of CostInputs, click type, help)
FINANCE_OPTIONS = (
    ("--incentive", "incentive", click.FloatRange(min=0), "One-off incentive or rebate, currency (default none)."),
    ("--incentive-year", "incentive_year", click.IntRange(0, 60),
     "Year the incentive is received: 0 with the purchase (default), 1 the first year..."),
    ("--replacement-year", "replacement_year", click.IntRange(1, 60),
     "Year in which capacitor cells or contactors are replaced (with --replacement-cost)."),
    ("--replacement-cost", "replacement_cost", click.FloatRange(min=0),
     "Cost of that replacement, currency of that year."),
    ("--tax-rate", "tax_rate", RATE, "Profit tax on the net benefit, a fraction (0.25) or percent with a % sign "
     "(25%); default no tax."),
    ("--depreciation-years", "depreciation_years", click.IntRange(1, 60),
     "Straight-line tax depreciation period of capex less incentive (default the life; with --tax-rate)."),
    ("--network-loss", "network_loss_percent", click.FloatRange(0, 20),
     "Losses in the site's network between meter and bank, percent of the energy (default 1.5), "
     "for the line-loss reduction."),
    ("--count-loss-reduction", "count_loss_reduction", None,
     "Count the money value of the line-loss reduction in the payback, NPV and IRR (default: shown apart)."),
)


def finance_options(f):
    """The finance items of a client's case (each off by default)."""
    for opt, key, typ, help_ in reversed(FINANCE_OPTIONS):
        if typ is None:
            f = click.option(opt, key, is_flag=True, default=None, help=help_)(f)
        else:
            f = click.option(opt, key, type=typ, help=help_)(f)
    return f


def finance_costs(kwargs: dict) -> dict:
    """The finance items given (popped from ``kwargs``), as CostInputs keys."""
    out = {}
    for _, key, _, _ in FINANCE_OPTIONS:
        value = kwargs.pop(key, None)
        if value is not None:
            out[key] = value
    return out


# --------------------------------------------------------------------------------------------
# auditor scenarios compare
# --------------------------------------------------------------------------------------------
@click.command("compare")
@click.argument("names", nargs=-1, required=True, metavar="A B [C D]")
@click.option("--out", "out", type=click.Path(dir_okay=False), metavar="FILE",
              help="Also write the comparison: .html, .pdf, .xlsx or .csv (by the suffix).")
@click.option("--paper", type=click.Choice(["a4", "letter"]), default="a4", show_default=True,
              help="Paper size of the printed comparison (with --out .html or .pdf).")
@click.option("--json", "json_out", is_flag=True, help="Machine-readable output (the same data as the table).")
@pass_ctx
def compare_cmd(ctx: Context, names, out, paper, json_out):
    """Put two to four saved scenarios side by side: design, money, screening, PF."""
    from auditor.services.compare import compare_scenarios, render_text, write_comparison

    if not 2 <= len(names) <= 4:
        raise click.UsageError(f"compare two to four saved scenarios, not {len(names)}")
    if len(set(names)) != len(names):
        raise click.UsageError("each scenario once: a name is given twice")
    cmp = compare_scenarios(ctx.store, list(names))
    if out:
        path = write_comparison(cmp, out, paper=paper)
        ctx.say(f"wrote {path} ({path.stat().st_size:,} bytes)")
    if json_out:
        echo_json(cmp)
    else:
        click.echo(render_text(cmp))
    return 0


commands: list = []
#: commands added to a noun group of another module: (group name, command)
subcommands = [("scenarios", compare_cmd)]
