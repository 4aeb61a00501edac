"""The CLI as a user runs it: a real process, exit codes, --json."""
from __future__ import annotations

import json
import os
import subprocess
import sys

from tests.ingest_helpers import day_rows, write_csv


def run(args, db, check_rc=None):
    env = dict(os.environ, AUDITOR_DB_URL=f"sqlite:///{db}")
    r = subprocess.run([sys.executable, "-m", "auditor", *args], capture_output=True, text=True, env=env, timeout=120)
    if check_rc is not None:
        assert r.returncode == check_rc, (r.returncode, r.stdout, r.stderr)
    return r


def test_import_json_and_meters(tmp_path):
    db = tmp_path / "c.sqlite3"
    f = write_csv(tmp_path / "a.csv", day_rows())
    out = json.loads(run(["import", str(f), "--json"], db, 0).stdout)
    assert out["files"][0]["status"] == "imported" and out["files"][0]["rows"] == 96
    assert out["files"][0]["errors"] == []
    again = json.loads(run(["import", str(f), "--json"], db, 0).stdout)
    assert again["files"][0]["status"] == "unchanged"
    meters = json.loads(run(["meters", "--json"], db, 0).stdout)["meters"]
    assert meters[0]["meter"] == "M1" and meters[0]["intervals"] == 96 and meters[0]["coverage"] == 1.0
    assert set(meters[0]) >= {"meter", "site", "timezone", "first", "last", "intervals", "coverage"}


def test_rejected_file_exit_1_with_located_error(tmp_path):
    db = tmp_path / "c.sqlite3"
    bad = write_csv(tmp_path / "bad.csv", ["M1,2025-01-06T00:00:00+00:00,x,1,0"])
    r = run(["import", str(bad), "--json"], db, 1)
    err = json.loads(r.stdout)["files"][0]
    assert err["status"] == "rejected"
    assert err["errors"][0] == {"line": 2, "column": "kwh", "message": "not a number: 'x'"}
    r = run(["import", str(bad)], db, 1)
    assert "Traceback" not in r.stderr and "line 2" in r.stderr


def test_usage_errors_exit_2(tmp_path):
    db = tmp_path / "c.sqlite3"
    assert run(["import"], db).returncode == 2
    assert run(["import", "--nonsense"], db).returncode == 2
    assert run(["nosuchcommand"], db).returncode == 2


def test_db_upgrade_and_current(tmp_path):
    db = tmp_path / "c.sqlite3"
    r = run(["db", "upgrade"], db, 0)
    assert "→" in r.stdout
    r = run(["db", "current"], db, 0)
    assert "head" in r.stdout


def test_bad_db_url_is_one_line(tmp_path):
    r = subprocess.run([sys.executable, "-m", "auditor", "--db", "nosuchdialect://x", "meters"],
                       capture_output=True, text=True, timeout=60)
    assert r.returncode == 1 and "bad database URL" in r.stderr and "Traceback" not in r.stderr
