"""Options that mean the same thing in every command, declared once so that they keep one
name, one metavar and one help text everywhere."""
from __future__ import annotations

import click


def json_option(f):
    return click.option("--json", "json_out", is_flag=True,
                        help="Machine-readable output (the same data as the table).")(f)


def wide_option(f):
    return click.option("--wide", "wide", is_flag=True,
                        help="Every column (the default fits 120 characters: the headline columns).")(f)


def _check_timezone(ctx: click.Context, param: click.Parameter, value: str | None) -> str | None:
    """A bad time zone is a usage error (exit 2), caught before any file is read."""
    if value is None:
        return None
    from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

    try:
        ZoneInfo(value)
    except (ZoneInfoNotFoundError, ValueError):
        raise click.BadParameter(f"unknown time zone {value!r} (use an IANA name such as Europe/Berlin)",
                                 ctx=ctx, param=param) from None
    return value


def timezone_option(help: str):
    return click.option("--timezone", "tz", metavar="TZ", callback=_check_timezone, help=help)


def meter_option(help: str = "Meter id as imported.", required: bool = True, multiple: bool = False):
    return click.option("--meter", "meter", required=required, metavar="M", help=help, multiple=multiple)


def tariff_option(required: bool = True, help: str = "Tariff TOML file (or the name of a shipped example)."):
    return click.option("--tariff", "tariff", required=required, metavar="FILE", help=help)


def date_range_options(f):
    f = click.option("--to", "end", type=click.DateTime(["%Y-%m-%d"]), metavar="YYYY-MM-DD",
                     help="Last local day, exclusive (default: the end of the data).")(f)
    return click.option("--from", "start", type=click.DateTime(["%Y-%m-%d"]), metavar="YYYY-MM-DD",
                        help="First local day, inclusive (default: the start of the data).")(f)


def check_date_range(start, end) -> None:
    if start is not None and end is not None and end <= start:
        raise click.BadParameter(f"{end.date()} must be after --from {start.date()}", param_hint="--to")


class NounGroup(click.Group):
    """The commands of one noun (``meters``, ``sites``, ``scenarios``, ``bills``).

    Bare ``auditor NOUN [OPTIONS]`` runs ``auditor NOUN list [OPTIONS]``, so ``auditor meters``
    and ``auditor meters --json`` list; ``auditor NOUN --help`` shows the group's commands.
    """

    def parse_args(self, ctx: click.Context, args: list[str]) -> list[str]:
        if "list" in self.commands and (not args or (args[0].startswith("-")
                                                     and args[0] not in ctx.help_option_names)):
            args = ["list", *args]
        return super().parse_args(ctx, args)

