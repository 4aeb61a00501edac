"""Command modules; each exposes ``commands`` (a list of click commands or groups).

A command module imports only click, the standard library and the other modules of this
package at its top; services are imported inside the command functions, so ``auditor --help``
loads neither pandas nor SQLAlchemy.
"""
from __future__ import annotations

import importlib

import click

MODULES = ("data", "meters", "db", "audit", "size", "bills", "report", "case", "serve", "demo", "alerts")


def register(group: click.Group) -> None:
    """Add every module's ``commands``, then each ``subcommands`` entry (group name, command) to
    the noun group of that name (a module may add a command to another module's noun)."""
    later = []
    for name in MODULES:
        module = importlib.import_module(f"auditor.commands.{name}")
        for cmd in module.commands:
            group.add_command(cmd)
        later.extend(getattr(module, "subcommands", ()))
    for noun, cmd in later:
        group.commands[noun].add_command(cmd)
