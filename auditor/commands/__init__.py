"""Command modules; each exposes ``commands`` (a list of click commands or groups)."""
from __future__ import annotations

import importlib

import click

MODULES = ("data", "audit", "size", "bills", "report", "serve", "demo")


def register(group: click.Group) -> None:
    for name in MODULES:
        try:
            module = importlib.import_module(f"auditor.commands.{name}")
        except ModuleNotFoundError as exc:
            if exc.name == f"auditor.commands.{name}":
                continue  # an area not built yet
            raise
        for cmd in module.commands:
            group.add_command(cmd)
