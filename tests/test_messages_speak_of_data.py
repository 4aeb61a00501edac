"""Messages below the command line speak of the data, not of command-line options: the
dashboard shows them too. An option that would help travels as ``cli_hint``, which only the
command line prints (``auditor.errors.cli_text``).

The source of every module below the presenters is read (``ast``) and each message given to an
error, a located problem or a quality finding is checked for an option ("--name"); then the
command line and the dashboard are shown the same bad inputs.
"""
from __future__ import annotations

import ast
import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1] / "auditor"
#: Rooms whose messages reach the dashboard as well as the command line.
BELOW = ["services", "ingest", "correction", "tariffs", "monitoring", "store", "audit.py", "bills.py",
         "quantities.py", "finance.py", "errors.py"]
#: Calls whose text is a message to the user.
MESSAGE_CALLS = {"AuditorError", "UsageError", "InputError", "NotFoundError", "StoreError", "TariffError",
                 "ProfileError", "DatabaseSettingError", "DataWouldBeLost", "Problem", "QualityFinding"}
OPTION = re.compile(r"(?<![\w-])--[a-z][a-z-]+")
#: Another program's command a message may quote (the package manager's, to upgrade this one).
OTHER_PROGRAMS = re.compile(r"pip install --upgrade")


def _modules():
    for room in BELOW:
        path = ROOT / room
        yield from (sorted(path.rglob("*.py")) if path.is_dir() else [path])


def _text(node: ast.AST) -> str:
    """The literal text of a message argument (f-strings with their holes left out)."""
    if isinstance(node, ast.Constant) and isinstance(node.value, str):
        return node.value
    if isinstance(node, ast.JoinedStr):
        return "".join(_text(v) for v in node.values)
    if isinstance(node, ast.BinOp):
        return _text(node.left) + _text(node.right)
    return ""


def _messages(path: Path):
    tree = ast.parse(path.read_text(encoding="utf-8"))
    for node in ast.walk(tree):
        if not isinstance(node, ast.Call):
            continue
        name = node.func.id if isinstance(node.func, ast.Name) else getattr(node.func, "attr", "")
        if name not in MESSAGE_CALLS:
            continue
        for arg in list(node.args) + [k.value for k in node.keywords if k.arg in ("message", "note")]:
            yield node.lineno, OTHER_PROGRAMS.sub("", _text(arg))


def test_no_message_below_the_command_line_names_an_option():
    found = [f"{path.relative_to(ROOT.parent)}:{line}: {OPTION.search(text).group(0)} in {text[:90]!r}"
             for path in _modules() for line, text in _messages(path) if OPTION.search(text)]
    assert found == []


def test_the_checker_sees_an_option(tmp_path):
    """The check above can fail: an option in a message of each kind is found."""
    bad = tmp_path / "bad.py"
    bad.write_text('raise UsageError(f"give --tariff {x}")\nProblem("use --profile", 1)\n'
                   'InputError(f, Problem(message="add --move"))\n', encoding="utf-8")
    assert [OPTION.search(t).group(0) for _, t in _messages(bad) if OPTION.search(t)] == [
        "--tariff", "--profile", "--move"]


@pytest.mark.parametrize("body, option, page_words", [
    ("a,b,c\n1,2,3\n", "--profile", "choose a mapping profile"),
    ("meter,start,kwh,kvarh_lag,kvarh_lead\nL1,2025-02-03T00:00:00,1,1,0\n", "--timezone", "fill in the time zone"),
])
def test_the_command_line_names_the_option_and_the_page_its_field(store, tmp_path, body, option, page_words):
    from auditor.ingest.pipeline import import_file
    from tests.test_cli_grammar import invoke

    f = tmp_path / "odd.csv"
    f.write_text(body, encoding="utf-8")
    out = import_file(store, f)
    assert out.status == "rejected" and option not in out.errors[0].message and option in out.errors[0].cli_hint
    r = invoke("import", f, db=store.url)
    assert r.exit_code == 1 and option in r.output
    from auditor.web.helpers import page_message

    shown = page_message(out.errors[0].message, cli_hint=out.errors[0].cli_hint)
    assert page_words in shown and "--" not in shown


def test_a_meter_without_a_tariff(store, tmp_path):
    """The service says what is missing; the command line adds the command that sets it."""
    from auditor.errors import UsageError, cli_text
    from auditor.ingest.pipeline import import_file
    from auditor.services.meter_tariff import tariff_for_meter
    from tests.ingest_helpers import day_rows, write_csv

    import_file(store, write_csv(tmp_path / "a.csv", day_rows(meter="NT-1", n=4)))
    with pytest.raises(UsageError) as err:
        tariff_for_meter(store, "NT-1", None)
    assert err.value.message == "meter NT-1 has no tariff of its own"
    assert cli_text(err.value.message, err.value.cli_hint) == (
        "meter NT-1 has no tariff of its own: give --tariff FILE, or set the meter's own with: "
        "auditor meters set-tariff NT-1 FILE")
    assert cli_text("a", "b") == "a (b)" and cli_text("a", None) == "a"
