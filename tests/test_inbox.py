"""Inbox runs: moves, error reports, run log, lock, skips, dry run, exit codes."""
from __future__ import annotations

import fcntl
import json
import os
import subprocess
import sys
import time
from pathlib import Path

import pytest

from auditor.errors import UsageError
from auditor.ingest.pipeline import ImportOptions
from auditor.services.inbox import LOCK_NAME, LOG_NAME, run_inbox
from tests.ingest_helpers import day_rows, reading_count, write_csv


def settled(*paths: Path) -> None:
    old = time.time() - 3600
    for p in paths:
        os.utime(p, (old, old))


@pytest.fixture
def inbox(tmp_path):
    d = tmp_path / "inbox"
    d.mkdir()
    return d


def good(inbox: Path, name: str, meter: str = "M1", day: str = "2025-01-06") -> Path:
    p = write_csv(inbox / name, day_rows(meter=meter, day=day))
    settled(p)
    return p


def bad(inbox: Path, name: str = "bad.csv") -> Path:
    p = write_csv(inbox / name, day_rows()[:3] + ["M1,2025-01-06T00:45:00+00:00,1.0,oops,0"])
    settled(p)
    return p


def log_lines(inbox: Path) -> list[dict]:
    return [json.loads(x) for x in (inbox / LOG_NAME).read_text().splitlines()]


def test_moves_reports_and_log(store, inbox):
    good(inbox, "a.csv")
    good(inbox, "b.csv", meter="M2")
    bad(inbox)
    res = run_inbox(store, inbox, ImportOptions())
    status = {Path(f["path"]).name: f["status"] for f in res["files"]}
    assert status == {"a.csv": "imported", "b.csv": "imported", "bad.csv": "rejected"}
    assert sorted(p.name for p in (inbox / "done").iterdir()) == ["a.csv", "b.csv"]
    assert sorted(p.name for p in (inbox / "rejected").iterdir()) == ["bad.csv", "bad.csv.error.txt"]
    assert not (inbox / "a.csv").exists() and not (inbox / "bad.csv").exists()
    report = (inbox / "rejected" / "bad.csv.error.txt").read_text()
    assert f"{inbox / 'bad.csv'}, line 5, column 'kvarh_lag': not a number: 'oops'" in report
    assert reading_count(store) == 2 * 96
    log = log_lines(inbox)
    assert [x.get("status") for x in log[:3]] == ["imported", "imported", "rejected"]
    assert log[2]["errors"][0] == {"line": 5, "column": "kvarh_lag", "message": "not a number: 'oops'"}
    assert log[-1]["run"] == "finished" and log[-1]["imported"] == 2 and log[-1]["rejected"] == 1


def test_never_overwrites_and_second_run_appends_to_log(store, inbox):
    good(inbox, "a.csv")
    run_inbox(store, inbox, ImportOptions())
    good(inbox, "a.csv", day="2025-01-07")  # same name, new content
    bad(inbox)
    run_inbox(store, inbox, ImportOptions())
    bad(inbox)
    run_inbox(store, inbox, ImportOptions())
    assert sorted(p.name for p in (inbox / "done").iterdir()) == ["a.2.csv", "a.csv"]
    assert sorted(p.name for p in (inbox / "rejected").iterdir()) == [
        "bad.2.csv", "bad.2.csv.error.txt", "bad.csv", "bad.csv.error.txt"]
    assert sum(1 for x in log_lines(inbox) if x.get("run") == "finished") == 3
    assert reading_count(store) == 2 * 96


def test_same_file_again_is_unchanged_not_double_imported(store, inbox):
    good(inbox, "a.csv")
    run_inbox(store, inbox, ImportOptions())
    (inbox / "done" / "a.csv").rename(inbox / "a-copy.csv")  # as if a crash left it before the move
    res = run_inbox(store, inbox, ImportOptions())
    assert res["files"][0]["status"] == "unchanged"
    assert reading_count(store) == 96


def test_skips_unready_and_foreign_entries(store, inbox):
    good(inbox, "ready.csv")
    write_csv(inbox / "fresh.csv", day_rows(meter="M9"))  # just written: not settled
    for name in ("upload.csv.part", "x.tmp", ".hidden.csv"):
        settled(write_csv(inbox / name, day_rows(meter="M8")))
    (inbox / "folder").mkdir()
    os.symlink(inbox / "ready.csv", inbox / "link.csv")
    res = run_inbox(store, inbox, ImportOptions())
    assert [Path(f["path"]).name for f in res["files"]] == ["ready.csv"]
    reasons = {Path(s["path"]).name: s["reason"] for s in res["skipped"]}
    assert set(reasons) == {"fresh.csv", "upload.csv.part", "x.tmp", "folder", "link.csv"}
    assert "modified less than" in reasons["fresh.csv"]
    assert (inbox / "fresh.csv").exists() and (inbox / ".hidden.csv").exists()
    assert "skipped" in res["message"]


def test_dry_run_changes_nothing(store, inbox):
    good(inbox, "a.csv")
    bad(inbox)
    res = run_inbox(store, inbox, ImportOptions(dry_run=True))
    assert [f["status"] for f in res["files"]] == ["imported", "rejected"]
    assert sorted(p.name for p in inbox.iterdir()) == [LOCK_NAME, "a.csv", "bad.csv"]
    assert reading_count(store) == 0
    assert res["message"].startswith("dry run")


def test_locked_inbox_exits_cleanly(store, inbox):
    good(inbox, "a.csv")
    with open(inbox / LOCK_NAME, "a+") as fh:
        fcntl.flock(fh, fcntl.LOCK_EX)
        res = run_inbox(store, inbox, ImportOptions())
        assert res["locked"] and res["files"] == [] and "another inbox run" in res["message"]
        t = time.monotonic()
        res = run_inbox(store, inbox, ImportOptions(), wait_seconds=0.5)
        assert res["locked"] and time.monotonic() - t >= 0.5
    assert (inbox / "a.csv").exists() and reading_count(store) == 0
    res = run_inbox(store, inbox, ImportOptions())
    assert not res["locked"] and res["files"][0]["status"] == "imported"


def test_missing_inbox_is_a_usage_error(store, tmp_path):
    with pytest.raises(UsageError, match="does not exist"):
        run_inbox(store, tmp_path / "nope", ImportOptions())


def test_database_failure_leaves_the_file(tmp_path, inbox):
    from auditor.store import open_store

    db = tmp_path / "full.sqlite3"
    store = open_store(f"sqlite:///{db}")
    with store.engine.connect() as c:
        pages = c.exec_driver_sql("PRAGMA page_count").scalar()
    # later connections may not grow the file at all: the write fails "full"
    from sqlalchemy import event

    event.listen(store.engine, "connect", lambda con, _r: con.execute(f"PRAGMA max_page_count={pages}"))
    store.engine.dispose()
    rows = [r for d in range(6, 16) for r in day_rows(day=f"2025-01-{d:02d}")]
    settled(write_csv(inbox / "a.csv", rows))
    res = run_inbox(store, inbox, ImportOptions())
    f = res["files"][0]
    assert f["status"] == "rejected" and "full" in f["errors"][0]["message"]
    assert (inbox / "a.csv").exists() and not (inbox / "rejected").exists()
    assert "stays in the inbox" in res["message"]


def run_cli(args, db, timeout=120):
    env = dict(os.environ, AUDITOR_DB_URL=f"sqlite:///{db}")
    return subprocess.run([sys.executable, "-m", "auditor", *args], capture_output=True, text=True, env=env,
                          timeout=timeout)


def test_cli_exit_codes_and_concurrent_runs(tmp_path, inbox):
    db = tmp_path / "cli.sqlite3"
    for i in range(6):
        good(inbox, f"f{i}.csv", meter=f"M{i}")
    # two runs at once on the same inbox: one imports, the other waits for nothing or finds
    # nothing left; no file is imported twice
    procs = [subprocess.Popen([sys.executable, "-m", "auditor", "import", "--inbox", str(inbox), "--json"],
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                              env=dict(os.environ, AUDITOR_DB_URL=f"sqlite:///{db}")) for _ in range(2)]
    outs = [p.communicate(timeout=120) for p in procs]
    assert [p.returncode for p in procs] == [0, 0], outs
    results = [json.loads(o[0]) for o in outs]
    statuses = [f["status"] for r in results for f in r["files"]]
    assert statuses.count("imported") == 6 and "rejected" not in statuses
    assert len(list((inbox / "done").iterdir())) == 6
    bad(inbox)
    r = run_cli(["import", "--inbox", str(inbox)], db)
    assert r.returncode == 1 and "line 5" in r.stderr and "Traceback" not in r.stderr
    r = run_cli(["import", "--inbox", str(inbox)], db)
    assert r.returncode == 0 and "0 file(s)" in r.stdout
