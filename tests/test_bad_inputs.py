"""The generated bad inputs (tests/bad_inputs.py), each one through the command line as a user
runs it: rejected with exit 1 (or 2), a located one-line error, no traceback, no internal error,
and nothing stored — the readings, the bills and the meters exactly as they were.

Every case goes through ``auditor.cli.main`` in this process (the real click group, its exit
codes and its error printing); a sample of the classes that once ended in exit 3 also runs as
``python -m auditor`` in a child process. Manual bill entry has no command of its own: it runs
through the service the dashboard's form calls. The count of cases is printed (``pytest -s``)
and written to ``bad_input_counts.json`` in the test's temporary folder.
"""
from __future__ import annotations

import contextlib
import io
import json
import os
import subprocess
import sys
from collections import Counter
from pathlib import Path

import pytest

from auditor.cli import main
from auditor.errors import AuditorError
from auditor.ingest.pipeline import import_file
from auditor.services.bills import add_bill
from auditor.store import open_store
from tests.bad_inputs import BILL_HEADER, Case, _csv, _rows, cases
from tests.ingest_helpers import stored_rows

CASES = cases()
COUNTS: Counter = Counter()


@pytest.fixture(scope="module")
def world(tmp_path_factory):
    folder = tmp_path_factory.mktemp("bad-inputs")
    url = f"sqlite:///{folder / 'bad.sqlite3'}"
    store = open_store(url)
    base = folder / "base.csv"
    base.write_bytes(_csv(_rows(meter="BX-1")))
    assert import_file(store, base).status == "imported"
    bills = folder / "bills.csv"
    bills.write_text(f"{BILL_HEADER}\nBX-1,2025-01-01,2025-02-01,1000,500,10,12,0.9,1,100\n")
    assert run_cli(["--db", url, "bills", "import", str(bills)])[0] == 0
    yield store, url, folder
    total = sum(COUNTS.values())
    (folder / "bad_input_counts.json").write_text(json.dumps({"total": total, "by_class": dict(COUNTS)}, indent=1))
    print(f"\ngenerated bad inputs tried: {total} in {len(COUNTS)} classes")
    store.dispose()


def run_cli(argv: list[str]) -> tuple[int, str, str]:
    """``auditor ARGV`` in this process: (exit code, stdout, stderr)."""
    out, err = io.StringIO(), io.StringIO()
    code = 0
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            main(argv)
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else 1
    return code, out.getvalue(), err.getvalue()


def snapshot(store) -> tuple:
    with store.engine.connect() as c:
        readings = [r[:7] for r in stored_rows(c)]  # meter_id, start, the quantities, flags
        meters = c.exec_driver_sql("SELECT id, external_id, site_id, max_kw FROM meter ORDER BY id").fetchall()
        bills = c.exec_driver_sql("SELECT meter_id, period_start, period_end, kwh FROM bill ORDER BY id").fetchall()
        revisions = c.exec_driver_sql("SELECT count(*) FROM reading_revision").scalar()
    return readings, meters, bills, revisions


def argv_for(case: Case, folder: Path, url: str) -> list[str]:
    path = folder / case.name
    path.write_bytes(case.data)
    if case.target == "bills":
        return ["--db", url, "bills", "import", str(path)]
    argv = ["--db", url, "--quiet", "import", str(path), *case.args]
    if case.profile is not None:
        profile = folder / f"{case.name}.toml"
        profile.write_text(case.profile, encoding="utf-8")
        argv += ["--profile", str(profile)]
    return argv


def assert_clean_rejection(code: int, out: str, err: str, case: Case) -> None:
    text = out + err
    assert code in (1, 2), (case.kind, case.name, code, text[-800:])
    assert "Traceback" not in text and "internal error" not in text, (case.kind, case.name, text[-800:])
    assert "unknown meter" not in text, (case.name, "rejected for the wrong reason", text[-400:])
    assert "error" in err.lower() or "rejected" in out, (case.name, text[-400:])


@pytest.mark.parametrize("case", [c for c in CASES if c.target != "bill"], ids=lambda c: c.name)
def test_bad_input_through_the_cli(world, case):
    store, url, folder = world
    before = snapshot(store)
    code, out, err = run_cli(argv_for(case, folder, url))
    COUNTS[case.kind] += 1
    assert_clean_rejection(code, out, err, case)
    assert snapshot(store) == before, f"{case.name}: a rejected input changed what is stored"


@pytest.mark.parametrize("case", [c for c in CASES if c.target == "bill"], ids=lambda c: c.name)
def test_bad_manual_bill(world, case):
    store, _, _ = world
    before = snapshot(store)
    COUNTS[case.kind] += 1
    with pytest.raises(AuditorError) as exc:
        add_bill(store, **case.bill)
    assert exc.value.exit_code == 1 and "unknown meter" not in exc.value.message
    assert snapshot(store) == before


# one case of each class that once ended in "internal error", exit 3, as a user runs it
CRASHERS = ["plain-date-0-0.csv", "plain-date-1-0.csv", "wide-9999-12-31-Europe-Berlin.csv", "plain-long-2-2.csv",
            "espi-enc-x-nothing.xml", "profile-enc-rot13.csv", "profile-enc2-utf-16.csv", "plain-junk-first.csv"]


@pytest.mark.parametrize("name", CRASHERS)
def test_former_crashes_in_a_child_process(world, name):
    store, url, folder = world
    case = next(c for c in CASES if c.name == name)
    argv = argv_for(case, folder, url)[2:]  # the URL goes through the environment here
    before = snapshot(store)
    r = subprocess.run([sys.executable, "-m", "auditor", *argv], capture_output=True, text=True, timeout=120,
                       env=dict(os.environ, AUDITOR_DB_URL=url))
    assert r.returncode == 1, (r.returncode, r.stdout, r.stderr)
    assert "Traceback" not in r.stderr and "internal error" not in r.stderr, r.stderr
    assert str(folder / name) in r.stderr or name in r.stdout
    assert snapshot(store) == before


def test_the_generator_covers_every_reader_profiles_and_bills():
    kinds = {c.kind.split(":")[0] for c in CASES}
    assert {"plain", "obis", "wide", "espi", "profile", "bills", "mixed"} <= kinds
    assert len(CASES) >= 500
    assert len({c.name for c in CASES}) == len(CASES)
