"""Imports only run downward: every module's imports, read with ``ast``, against the layer table
in DEVELOPERS.md ("Layers"). The table is parsed from the guide itself, so the guide and this
test cannot drift apart."""
from __future__ import annotations

import ast
import re
import sys
from dataclasses import dataclass
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
#: source folders and the package names they install as (pyproject.toml's package-dir)
PACKAGES = {"auditor": ROOT / "auditor", "auditor.web": ROOT / "web",
            "auditor.migrations": ROOT / "migrations", "auditor.demo_data": ROOT / "demo_data"}
STDLIB = set(sys.stdlib_module_names) | {"__future__"}


@dataclass(frozen=True)
class Room:
    prefixes: tuple[str, ...]  # module names (a package covers its submodules)
    may_import: frozenset[str]  # short room names: "store", "web", "cli", ...
    libraries: frozenset[str]


def _module_of_cell(path: str) -> str:
    path = path.strip().strip("`").rstrip("/")
    if path.endswith(".py"):
        path = path[:-3].removesuffix("/__init__")
    top, _, rest = path.partition("/")
    pkg = {"web": "auditor.web", "migrations": "auditor.migrations", "demo_data": "auditor.demo_data"}.get(top, top)
    return ".".join(x for x in (pkg, rest.replace("/", ".")) if x)


def short_name(module: str) -> str:
    """``auditor.store.engine`` → ``store``; ``auditor.web.meters`` → ``web``."""
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else parts[0]


def _names(cell: str) -> frozenset[str]:
    cell = cell.strip()
    return frozenset() if cell in ("—", "-", "") else frozenset(x.strip() for x in cell.split(","))


def read_layer_table(text: str) -> list[Room]:
    """The rows of the table under "### Layers" in DEVELOPERS.md."""
    section = text.split("### Layers", 1)[1]
    table = section.split("| room |", 1)[1].split("\n\n", 1)[0]  # up to the first blank line
    rows = [line for line in table.splitlines() if line.startswith("| `")]
    rooms = []
    for line in rows:
        cells = [c.strip() for c in line.strip().strip("|").split("|")]
        paths = re.findall(r"`([^`]+/|[^`]+\.py)`", cells[0])
        rooms.append(Room(tuple(_module_of_cell(p) for p in paths), _names(cells[2]), _names(cells[3])))
    return rooms


def room_of(module: str, rooms: list[Room]) -> Room | None:
    best, length = None, -1
    for r in rooms:
        for p in r.prefixes:
            covers = module == p or (p != "auditor" and module.startswith(p + "."))  # the root: itself only
            if covers and len(p) > length:
                best, length = r, len(p)
    return best


def _type_checking_nodes(tree: ast.AST) -> set[int]:
    """ids of the nodes under ``if TYPE_CHECKING:`` (annotations only, not dependencies)."""
    out: set[int] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.If) and "TYPE_CHECKING" in ast.unparse(node.test):
            for child in node.body:
                out.update(id(n) for n in ast.walk(child))
    return out


def _is_module(package: str, name: str) -> bool:
    folder = PACKAGES["auditor"] if package == "auditor" else None
    return folder is not None and ((folder / f"{name}.py").exists() or (folder / name).is_dir()
                                   or f"auditor.{name}" in PACKAGES)


def imports_of(source: str, module: str, is_package: bool = False) -> list[str]:
    """Absolute names imported anywhere in ``source`` (relative imports resolved)."""
    tree = ast.parse(source)
    skip = _type_checking_nodes(tree)
    out = []
    for node in ast.walk(tree):
        if id(node) in skip:
            continue
        if isinstance(node, ast.Import):
            out += [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                anchor = module.split(".") if is_package else module.split(".")[:-1]
                anchor = anchor[: len(anchor) - (node.level - 1)]
                base = ".".join([*anchor, base] if base else anchor)
            if base == "auditor":  # from auditor import charts: the module auditor.charts
                out += [f"auditor.{a.name}" if _is_module("auditor", a.name) else "auditor" for a in node.names]
            else:
                out.append(base)
    return out


def violations(module: str, source: str, rooms: list[Room], is_package: bool = False) -> list[str]:
    room = room_of(module, rooms)
    if room is None:
        return [f"{module}: in no room of the layer table"]
    own = {short_name(p) for p in room.prefixes}
    bad = []
    for name in imports_of(source, module, is_package):
        top = name.split(".")[0]
        if top == "auditor":
            if name == "auditor":
                continue  # the package's __init__ (its version)
            target = short_name(name)
            if target in own or target in room.may_import:
                continue
            bad.append(f"{module} imports {name} ({target} is not in its row)")
        elif top not in STDLIB and top not in room.libraries:
            bad.append(f"{module} imports the library {top} (not in its row)")
    return bad


def project_modules():
    for pkg, folder in PACKAGES.items():
        for f in sorted(folder.rglob("*.py")):
            rel = f.relative_to(folder).with_suffix("").parts
            if pkg == "auditor" and rel[0] in ("web", "migrations", "demo_data"):
                continue
            is_package = rel[-1] == "__init__"
            name = ".".join([pkg, *(rel[:-1] if is_package else rel)])
            yield name, f, is_package


@pytest.fixture(scope="module")
def rooms() -> list[Room]:
    return read_layer_table((ROOT / "DEVELOPERS.md").read_text(encoding="utf-8"))


def test_the_table_is_read(rooms):
    assert len(rooms) >= 15
    services = room_of("auditor.services.portfolio", rooms)
    assert "store" in services.may_import and "web" not in services.may_import
    assert room_of("auditor.web.meters", rooms).prefixes == ("auditor.web",)
    assert room_of("auditor.cli", rooms) is room_of("auditor.commands.meters", rooms)


def test_every_module_keeps_to_its_row(rooms):
    found = []
    modules = list(project_modules())
    assert len(modules) > 60
    for name, path, is_package in modules:
        found += violations(name, path.read_text(encoding="utf-8"), rooms, is_package)
    assert found == []


# A synthetic module for each way of running a layer backwards: the check must catch each one.
UPWARD = [
    ("auditor.quantities", "from auditor.store import open_store\n", "store is not in its row"),
    ("auditor.services.report", "def f():\n    from auditor.web import charts\n", "web is not in its row"),
    ("auditor.tariffs.engine", "import flask\n", "the library flask"),
    ("auditor.bills", "from auditor import services\n", "services is not in its row"),
    ("auditor.web.meters", "from auditor.store.queries import get_meter\n", "store is not in its row"),
    ("auditor.commands.meters", "from ..store import open_store\n", "store is not in its row"),
    ("auditor.elsewhere.checks", "import numpy\n", "in no room"),
]


@pytest.mark.parametrize("module, source, message", UPWARD)
def test_an_upward_import_fails(rooms, module, source, message):
    found = violations(module, source, rooms)
    assert len(found) == 1 and message in found[0], found


@pytest.mark.parametrize("module, source", [
    ("auditor.services.report", "from auditor.charts import pf_by_period\n"),
    ("auditor.commands.meters", "from typing import TYPE_CHECKING\nif TYPE_CHECKING:\n    from auditor.store import Store\n"),
    ("auditor.audit", "from .quantities import energy_pf\nimport numpy as np\n"),
    ("auditor.cli", "from auditor import __version__\n"),
])
def test_a_downward_import_passes(rooms, module, source):
    assert violations(module, source, rooms) == []
