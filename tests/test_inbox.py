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


# --------------------------------------------------------------------------------------------
# an inbox that never stops
# --------------------------------------------------------------------------------------------
def test_poison_file_sorted_first_is_rejected_and_the_good_ones_imported(store, inbox, monkeypatch):
    """A file that ends in an unexpected error (here a planted bug in the reader) goes to
    rejected/ with its error; the run goes on and imports the two good files after it."""
    from auditor.ingest.readers import plain_csv

    original = plain_csv._canonical

    def bug_on_poison(chunk, lines, time_col, options, file, *rest):
        if Path(file).name.startswith("00-poison"):
            raise ZeroDivisionError("planted bug")
        return original(chunk, lines, time_col, options, file, *rest)

    monkeypatch.setattr(plain_csv, "_canonical", bug_on_poison)
    good(inbox, "00-poison.csv", meter="P0")
    good(inbox, "a.csv", meter="M1")
    good(inbox, "b.csv", meter="M2")
    res = run_inbox(store, inbox, ImportOptions())
    status = {Path(f["path"]).name: f["status"] for f in res["files"]}
    assert status == {"00-poison.csv": "rejected", "a.csv": "imported", "b.csv": "imported"}
    assert sorted(p.name for p in (inbox / "done").iterdir()) == ["a.csv", "b.csv"]
    assert sorted(p.name for p in (inbox / "rejected").iterdir()) == ["00-poison.csv", "00-poison.csv.error.txt"]
    report = (inbox / "rejected" / "00-poison.csv.error.txt").read_text()
    assert "internal error" in report and "ZeroDivisionError: planted bug" in report and "Traceback" in report
    assert reading_count(store) == 2 * 96
    log = log_lines(inbox)
    assert log[0]["status"] == "rejected" and log[-1]["rejected"] == 1 and log[-1]["imported"] == 2


def test_poison_files_through_the_cli(tmp_path, inbox):
    """Inputs that once stopped the inbox for good with exit 3 (year 0000, an XML declaring an
    unknown encoding, a field over 128 KB), sorted before two good files: exit 1, every poison
    file rejected with its error, both good files imported."""
    db = tmp_path / "cli.sqlite3"
    settled(write_csv(inbox / "00-year-zero.csv", ["Z0,0000-01-01T00:00:00+00:00,1,1,0",
                                                   "Z0,0000-01-01T00:15:00+00:00,1,1,0"]))
    (inbox / "01-encoding.xml").write_text('<?xml version="1.0" encoding="x-nothing"?>\n<feed xmlns="http://www.w3.'
                                           'org/2005/Atom"><entry><content><IntervalBlock xmlns="http://naesb.org/'
                                           'espi"/></content></entry></feed>\n')
    settled(inbox / "01-encoding.xml")
    settled(write_csv(inbox / "02-long-field.csv", ["F0,2025-01-06T00:00:00+00:00,1,1,\"" + "x" * 140_000 + "\""]))
    good(inbox, "a.csv", meter="M1")
    good(inbox, "b.csv", meter="M2")
    r = run_cli(["import", "--inbox", str(inbox), "--json"], db)
    assert r.returncode == 1, (r.stdout, r.stderr)
    assert "Traceback" not in r.stderr and "internal error" not in r.stdout + r.stderr
    files = {Path(f["path"]).name: f for f in json.loads(r.stdout)["files"]}
    assert [files[n]["status"] for n in sorted(files)] == ["rejected", "rejected", "rejected", "imported", "imported"]
    assert files["00-year-zero.csv"]["errors"][0]["line"] == 2
    assert files["01-encoding.xml"]["errors"][0]["line"] == 1
    assert files["02-long-field.csv"]["errors"][0]["line"] == 2
    assert sorted(p.name for p in (inbox / "done").iterdir()) == ["a.csv", "b.csv"]
    assert len(list((inbox / "rejected").glob("*.error.txt"))) == 3


def test_writer_pausing_past_the_settle_time_is_not_imported_truncated(store, inbox):
    """A writer that stops mid-row for longer than the settle time: the file is left for a later
    run (it is not complete by its format); once finished it is imported whole."""
    rows = day_rows(meter="W1") + day_rows(meter="W1", day="2025-01-07")
    text = "meter,start,kwh,kvarh_lag,kvarh_lead\n" + "\n".join(rows) + "\n"
    cut = text.index("\n", len(text) // 2) + 12  # a dozen bytes into a row
    path = inbox / "slow.csv"
    path.write_text(text[:cut])
    paused = time.time() - 60  # the pause: a minute, longer than the settle time
    os.utime(path, (paused, paused))
    res = run_inbox(store, inbox, ImportOptions())
    assert res["files"] == [] and reading_count(store) == 0
    reason = {Path(s["path"]).name: s["reason"] for s in res["skipped"]}["slow.csv"]
    assert "incomplete" in reason and "no line break" in reason
    assert path.exists() and not (inbox / "rejected").exists()
    with open(path, "a") as fh:  # the writer resumes and finishes
        fh.write(text[cut:])
    settled(path)
    res = run_inbox(store, inbox, ImportOptions())
    assert res["files"][0]["status"] == "imported" and reading_count(store) == 2 * 96


def test_writer_pausing_in_real_time(store, inbox):
    """The same with a real writer thread pausing past a short settle time."""
    import threading

    rows = day_rows(meter="W2")
    text = "meter,start,kwh,kvarh_lag,kvarh_lead\n" + "\n".join(rows) + "\n"
    cut = text.index("\n", len(text) // 3) + 7
    path = inbox / "thread.csv"
    paused, finish = threading.Event(), threading.Event()

    def writer():
        with open(path, "w") as fh:
            fh.write(text[:cut])
            fh.flush()
            paused.set()
            finish.wait(10)
            fh.write(text[cut:])

    t = threading.Thread(target=writer)
    t.start()
    paused.wait(5)
    time.sleep(0.6)
    res = run_inbox(store, inbox, ImportOptions(), settle_seconds=0.3)
    assert res["files"] == [] and reading_count(store) == 0
    finish.set()
    t.join()
    time.sleep(0.6)
    res = run_inbox(store, inbox, ImportOptions(), settle_seconds=0.3)
    assert res["files"][0]["status"] == "imported" and reading_count(store) == 96


def test_unclosed_xml_waits_then_is_rejected_after_the_limit(store, inbox):
    from tests.espi_helpers import feed

    path = inbox / "feed.xml"
    path.write_text(feed([(72, 1, 0, [1200, 1300])]).replace("</feed>\n", ""))
    paused = time.time() - 60
    os.utime(path, (paused, paused))
    res = run_inbox(store, inbox, ImportOptions())
    assert res["files"] == []
    assert "root <feed> is not closed" in res["skipped"][0]["reason"]
    res = run_inbox(store, inbox, ImportOptions(), incomplete_seconds=30)  # past the limit: cut off
    f = res["files"][0]
    assert f["status"] == "rejected" and "cut off" in f["message"]
    assert (inbox / "rejected" / "feed.xml.error.txt").exists() and reading_count(store) == 0


def test_a_file_that_changes_during_its_import_is_rolled_back(store, tmp_path):
    from auditor.ingest.pipeline import import_file

    p = write_csv(tmp_path / "a.csv", day_rows())
    st = p.stat()
    out = import_file(store, p, ImportOptions(), expect=(st.st_size - 1, st.st_mtime_ns))
    assert out.status == "changed" and reading_count(store) == 0
    assert import_file(store, p, ImportOptions(), expect=(st.st_size, st.st_mtime_ns)).status == "imported"


def test_completeness_by_format(tmp_path):
    from auditor.services.inbox import incomplete_reason

    cases = {"a.csv": (b"meter,start\nM1,2025", "no line break"), "b.csv": (b"meter,start\nM1,x\r\n", None),
             "c.xml": (b'<?xml version="1.0"?>\n<!-- c --><ns:feed a="1"><x/></ns:feed>\n', None),
             "d.xml": (b"<feed><entry>", "not closed"), "e.csv": (b"", "empty"), "f.bin": (b"\x00\x01", None)}
    for name, (data, want) in cases.items():
        (tmp_path / name).write_bytes(data)
        got = incomplete_reason(tmp_path / name)
        assert (got is None) if want is None else (want in got), (name, got)
