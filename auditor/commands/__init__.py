"""Command modules; each exposes ``commands`` (a list of click commands or groups)."""
from __future__ import annotations

import importlib

import click

MODULES = ("data", "audit", "size", "bills", "report", "serve", "demo", "alerts")


def register(group: click.Group) -> None:
    for name in MODULES:
        module = importlib.import_module(f"auditor.commands.{name}")
        for cmd in module.commands:
            group.add_command(cmd)
    # subcommands other modules add to `auditor meters` (a group; bare `auditor meters` lists)
    for name in MODULES:
        for cmd in getattr(importlib.import_module(f"auditor.commands.{name}"), "meter_commands", ()):
            group.commands["meters"].add_command(cmd)
