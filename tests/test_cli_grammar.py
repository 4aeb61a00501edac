"""The command line's grammar and start-up: help on every option, noun groups, old spellings kept,
usage errors exit 2, ``--quiet`` quiet, and ``--help`` without the heavy libraries."""
from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

import click
import pytest
from click.testing import CliRunner

from auditor.cli import _load_commands, group, main
from tests.ingest_helpers import day_rows, write_csv

HEAVY = ("pandas", "numpy", "sqlalchemy", "alembic")


def options_without_help(root: click.Command, path: tuple[str, ...] = ()) -> list[str]:
    """``"auditor meters list --json"`` for every option (hidden commands included) without a
    help text; help options themselves are click's own."""
    missing = []
    name = " ".join((*path, root.name or ""))
    for p in root.params:
        if isinstance(p, click.Option) and not p.hidden and not (p.help or "").strip():
            missing.append(f"{name} {p.opts[0]}")
    if isinstance(root, click.Group):
        for sub in root.commands.values():
            missing += options_without_help(sub, (*path, root.name or ""))
    return missing


def all_commands(root: click.Group, path: tuple[str, ...] = ()):
    for name, sub in root.commands.items():
        yield (*path, name)
        if isinstance(sub, click.Group):
            yield from all_commands(sub, (*path, name))


@pytest.fixture(scope="module")
def cli():
    _load_commands()
    return group


@dataclass
class Ran:
    exit_code: int
    output: str  # stdout and stderr as the user sees them


def invoke(*args, db=None) -> Ran:
    """``auditor ARGS`` through :func:`auditor.cli.main` (its exit codes and one-line errors)."""
    full = (["--db", db] if db else []) + [str(a) for a in args]
    runner = CliRunner()
    with runner.isolation() as streams:
        try:
            main(full)
            code = 0
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else 1
        return Ran(code, streams[-1].getvalue().decode("utf-8"))


# --------------------------------------------------------------------------------------------
# help on every option
# --------------------------------------------------------------------------------------------
def _synthetic(with_help: bool) -> click.Group:
    @click.group("root")
    def root():
        """A group."""

    @root.command("noun")
    @click.option("--meter", help="Meter id." if with_help else None)
    def noun(meter):
        """A command."""

    return root


@pytest.mark.parametrize("with_help, expected", [(True, []), (False, ["root noun --meter"])])
def test_the_help_check_finds_an_option_without_help(with_help, expected):
    assert options_without_help(_synthetic(with_help)) == expected


def test_every_option_of_every_command_has_help(cli):
    assert options_without_help(cli) == []


def test_every_commands_help_runs(cli):
    commands = list(all_commands(cli))
    assert ("meters", "list") in commands and ("meters", "set-multiplier") in commands
    for path in commands:
        r = CliRunner().invoke(cli, [*path, "--help"])
        assert r.exit_code == 0, (path, r.output)
        assert "Usage: " in r.output


def test_old_spellings_are_hidden_but_not_listed(cli):
    top = CliRunner().invoke(cli, ["--help"]).output
    listed = [line.split()[0] for line in top.split("Commands:")[1].splitlines() if line.strip()]
    assert "meters" in listed and "multiplier" not in listed
    assert "--revision" not in CliRunner().invoke(cli, ["db", "upgrade", "--help"]).output


# --------------------------------------------------------------------------------------------
# the grammar in use
# --------------------------------------------------------------------------------------------
@pytest.fixture()
def db(tmp_path, cli):
    url = f"sqlite:///{tmp_path / 'g.sqlite3'}"
    f = write_csv(tmp_path / "a.csv", day_rows())
    r = invoke("import", f, "--json", db=url)
    assert r.exit_code == 0, r.output
    return url


def test_meters_bare_and_list_agree(db):
    bare = json.loads(invoke("meters", "--json", db=db).output)
    listed = json.loads(invoke("meters", "list", "--json", db=db).output)
    assert bare == listed and bare["meters"][0]["meter"] == "M1"
    table = invoke("meters", db=db).output
    assert table == invoke("meters", "list", db=db).output
    # both ends of the span are instants, the end exclusive, and the headings say so
    head = table.splitlines()[0]
    assert "data from" in head and "data until" in head
    m = bare["meters"][0]
    assert m["first"].startswith("2025-01-06T00:00") and m["last"].startswith("2025-01-07T00:00")


def test_set_multiplier_new_and_old_spelling(db):
    r = invoke("meters", "set-multiplier", "M1", "40", db=db)
    assert r.exit_code == 0 and "multiplier 40" in r.output
    assert json.loads(invoke("meters", "--json", db=db).output)["meters"][0]["multiplier"] == 40
    r = invoke("multiplier", "--meter", "M1", "80", db=db)
    assert r.exit_code == 0, r.output
    assert json.loads(invoke("meters", "--json", db=db).output)["meters"][0]["multiplier"] == 80
    assert invoke("meters", "set-multiplier", "M1", "0", db=db).exit_code == 2
    assert invoke("meters", "set-multiplier", "NOPE", "2", db=db).exit_code == 1


def test_noun_groups_list_when_bare(db):
    assert invoke("sites", db=db).output == invoke("sites", "list", db=db).output
    assert json.loads(invoke("scenarios", "--json", db=db).output) == {"scenarios": []}
    assert invoke("bills", "--json", db=db).output.strip() == "[]"
    assert invoke("meters", "--nonsense", db=db).exit_code == 2


def test_db_revision_is_an_argument_and_the_old_option_still_works(tmp_path):
    url = f"sqlite:///{tmp_path / 'r.sqlite3'}"
    r = invoke("db", "upgrade", "0001", db=url)
    assert r.exit_code == 0 and "empty → 0001" in r.output, r.output
    r = invoke("db", "upgrade", "--revision", "0002", db=url)
    assert r.exit_code == 0 and "0001 → 0002" in r.output, r.output
    r = invoke("db", "downgrade", "0001", db=url)
    assert r.exit_code == 0 and "0002 → 0001" in r.output
    assert invoke("db", "downgrade", "nonsense", db=url).exit_code == 2
    assert invoke("db", "upgrade", "head", db=url).exit_code == 0


def test_bad_timezone_is_a_usage_error(tmp_path, db):
    f = write_csv(tmp_path / "b.csv", day_rows(meter="M2"))
    r = invoke("import", f, "--timezone", "Mars/Olympus", db=db)
    assert r.exit_code == 2 and "unknown time zone 'Mars/Olympus'" in r.output
    assert "M2" not in invoke("meters", db=db).output  # nothing read, nothing stored
    r = invoke("sites", "set", "X", "--timezone", "Nowhere/Town", db=db)
    assert r.exit_code == 2


def test_dates_in_the_wrong_order_are_a_usage_error(db):
    r = invoke("audit", "--meter", "M1", "--tariff", "millbrook_commercial_pf", "--from", "2025-02-01",
               "--to", "2025-01-01", db=db)
    assert r.exit_code == 2 and "--to" in r.output


def test_quiet_is_quiet(tmp_path, db):
    f = write_csv(tmp_path / "q.csv", day_rows(meter="M3"))
    r = invoke("--quiet", "import", f, db=db)
    assert r.exit_code == 0 and r.output == ""
    assert invoke("--quiet", "meters", "set-multiplier", "M3", "2", db=db).output == ""
    assert "M3" in invoke("--quiet", "meters", db=db).output  # asked-for output still prints
    bad = write_csv(tmp_path / "bad.csv", ["M4,2025-01-06T00:00:00+00:00,x,1,0"])
    r = invoke("--quiet", "import", bad, db=db)
    assert r.exit_code == 1 and "line 2" in r.output  # errors still shown


def test_misspelt_site_key_says_which_key_is_closest(tmp_path, db):
    f = tmp_path / "sites.toml"
    f.write_text('[[site]]\nnmae = "Plant"\n', encoding="utf-8")
    r = invoke("sites", "load", f, db=db)
    assert r.exit_code == 1 and "did you mean 'name'" in r.output, r.output
    f.write_text('[[site]]\nname = "Plant"\ntransformer_kav = 800\n', encoding="utf-8")
    r = invoke("sites", "load", f, db=db)
    assert "site[0].transformer_kav" in r.output and "did you mean 'transformer_kva'" in r.output


# --------------------------------------------------------------------------------------------
# start-up
# --------------------------------------------------------------------------------------------
_LOADED = """
import sys
from auditor.cli import main
try:
    main({args!r})
except SystemExit:
    pass
print("LOADED", " ".join(m for m in {heavy!r} if m in sys.modules))
"""


def loaded_after(args: list[str], env: dict | None = None) -> set[str]:
    code = _LOADED.format(args=args, heavy=HEAVY + ("mako", "flask", "plotly"))
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120,
                       env={**os.environ, **(env or {})})
    line = [x for x in r.stdout.splitlines() if x.startswith("LOADED")][-1]
    return set(line.split()[1:])


def test_help_loads_no_heavy_library():
    assert loaded_after(["--help"]).isdisjoint(HEAVY)
    assert loaded_after(["meters", "--help"]).isdisjoint(HEAVY)


def test_listing_meters_of_a_current_database_needs_neither_pandas_nor_alembic(db):
    loaded = loaded_after(["meters"], {"AUDITOR_DB_URL": db})
    assert "sqlalchemy" in loaded
    assert loaded.isdisjoint({"pandas", "numpy", "alembic", "mako"})


def test_quick_head_is_alembics_head(tmp_path):
    from auditor.store import open_store
    from auditor.store.engine import migrations_dir, quick_head_revision

    store = open_store(f"sqlite:///{tmp_path / 'h.sqlite3'}", upgrade=False)
    assert quick_head_revision() == store.head_revision()
    assert store.stored_revision() == (None, True)
    store.upgrade("0001")
    assert store.stored_revision() == ("0001", True) and not store.schema_is_current()
    store.upgrade()
    assert store.schema_is_current()
    # a second head (two files naming the same parent) is not plain: Alembic decides
    folder = tmp_path / "m"
    (folder / "versions").mkdir(parents=True)
    for f in (Path(migrations_dir()) / "versions").glob("*.py"):
        shutil.copy(f, folder / "versions")
    assert quick_head_revision(folder) == store.head_revision()
    (folder / "versions" / "9999_branch.py").write_text("revision = '9999'\ndown_revision = '0001'\n")
    assert quick_head_revision(folder) is None


def test_service_errors_speak_of_the_data_and_the_cli_adds_the_command(tmp_path):
    url = f"sqlite:///{tmp_path / 'e.sqlite3'}"
    r = invoke("audit", "--meter", "X1", "--tariff", "millbrook_commercial_pf", db=url)
    assert r.exit_code == 1
    assert "no meter 'X1'; the database has no meters yet (auditor import FILE)" in r.output
    from auditor.errors import NotFoundError
    from auditor.services.audit import audit_meter
    from auditor.services.database import open_database

    with pytest.raises(NotFoundError) as exc:
        audit_meter(open_database(url), "X1", "millbrook_commercial_pf")
    assert "auditor" not in exc.value.message and "--" not in exc.value.message
