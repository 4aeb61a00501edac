"""Revisions decided by content and by age, never by the bytes of a file.

* A file whose rows were all stored before is ``unchanged`` whatever its bytes — a CRLF re-save
  of an old export included — and does not undo the revision that replaced its values.
* An export older than the file that wrote the stored values (its modification time earlier by
  more than store.write.OLDER_SLACK_S) does not undo them: ``older``, with the count of intervals
  it would change, nothing stored; ``--force`` applies it.
Every test runs on SQLite and on PostgreSQL (the ``store`` fixture).
"""
from __future__ import annotations

import os
import time

import numpy as np
import pytest

from auditor.ingest.pipeline import ImportOptions, import_file
from auditor.store.write import OLDER_SLACK_S
from tests.ingest_helpers import HEADER, day_rows, reading_count, readings, write_csv

DAY = 86_400


def aged(path, days_ago: float):
    t = time.time() - days_ago * DAY
    os.utime(path, (t, t))
    return path


def revision_count(store) -> int:
    with store.engine.connect() as c:
        return c.exec_driver_sql("SELECT count(*) FROM reading_revision").scalar()


def test_crlf_resave_of_an_old_export_is_unchanged_and_keeps_the_revision(store, tmp_path):
    # the utility's first export holds estimates (E); its revised export replaces 8 with actuals
    first = [r + (",E" if 10 <= i < 18 else ",A") for i, r in enumerate(day_rows())]
    revised = [r + ",A" for r in day_rows(kwh=12.0)[10:18]]
    old = write_csv(tmp_path / "export-v1.csv", first, HEADER + ",flag")
    assert import_file(store, old).status == "imported"
    new = write_csv(tmp_path / "export-v2.csv", revised, HEADER + ",flag")
    assert import_file(store, new).status == "revised"
    after_revision = readings(store)
    # someone opens the old export and saves it again with Windows line ends
    copy = tmp_path / "export-v1 (copy).csv"
    copy.write_bytes(old.read_bytes().replace(b"\n", b"\r\n"))
    out = import_file(store, copy)
    assert out.status == "unchanged", out.message
    assert out.superseded == 8 and out.revised == 0 and out.inserted == 0
    assert "imported before" in out.message and "--force" in out.cli_hint
    assert readings(store).equals(after_revision)
    assert revision_count(store) == 8
    # asked for, the old values come back (and the actuals become revisions in their turn)
    forced = import_file(store, copy, ImportOptions(force=True))
    assert forced.status == "revised" and forced.revised == 8
    assert (readings(store)["flags"] & 1).sum() == 8


def test_replayed_values_beside_new_days_are_kept_and_the_new_days_stored(store, tmp_path):
    v1 = write_csv(tmp_path / "v1.csv", day_rows(n=8))
    import_file(store, v1)
    import_file(store, write_csv(tmp_path / "v2.csv", day_rows(n=8, kwh=11.0)[:4]))
    both = write_csv(tmp_path / "v1-and-next-day.csv", day_rows(n=8) + day_rows(day="2025-01-07", n=8))
    out = import_file(store, both)
    assert out.status == "imported" and out.inserted == 8 and out.superseded == 4
    assert any("later imports replaced" in w.message for w in out.warnings)
    kwh = readings(store)["kwh"].to_numpy()
    np.testing.assert_allclose(kwh[:4], 11.0 + 0.01 * np.arange(4))  # the revision stays


def test_an_older_export_does_not_undo_a_newer_one(store, tmp_path):
    # both exports cover the same day; the one written later (by its modification time) wins,
    # whatever the order in which they are imported
    newer = aged(write_csv(tmp_path / "march-revised.csv", day_rows(kwh=12.0)), days_ago=1)
    older = aged(write_csv(tmp_path / "march-first.csv", day_rows(kwh=10.0)[:30]), days_ago=3)
    assert import_file(store, newer).status == "imported"
    before = readings(store)
    out = import_file(store, older)
    assert out.status == "older" and out.older == 30
    assert out.inserted == 0 and out.revised == 0
    assert "older than the stored data" in out.message and "30 interval(s)" in out.message
    assert "--force" in out.cli_hint and "--" not in out.message
    assert readings(store).equals(before) and revision_count(store) == 0
    with store.engine.connect() as c:
        status = c.exec_driver_sql("SELECT status FROM import_batch ORDER BY id DESC").scalars().first()
    assert status == "older"
    forced = import_file(store, older, ImportOptions(force=True))
    assert forced.status == "revised" and forced.revised == 30
    np.testing.assert_allclose(readings(store)["kwh"].to_numpy()[:30], 10.0 + 0.01 * np.arange(30))


def test_an_older_file_is_rolled_back_whole_even_with_new_meters(store, tmp_path):
    newer = aged(write_csv(tmp_path / "b.csv", day_rows(meter="M1", kwh=12.0)), days_ago=1)
    import_file(store, newer)
    older = aged(write_csv(tmp_path / "a.csv", day_rows(meter="M0") + day_rows(meter="M1", kwh=10.0)
                           + day_rows(meter="M2")), days_ago=2)
    out = import_file(store, older)
    assert out.status == "older" and out.older == 96
    assert reading_count(store) == 96  # neither M0 nor M2 was stored
    with store.engine.connect() as c:
        meters = c.exec_driver_sql("SELECT external_id FROM meter").scalars().all()
    assert meters == ["M1"]


def test_files_written_close_together_are_not_older(store, tmp_path):
    # a checkout or a copy gives files modification times seconds apart in any order: neither
    # is older, and the one imported last is applied as a revision, as before
    later = aged(write_csv(tmp_path / "b.csv", day_rows(kwh=12.0)), days_ago=0)
    earlier = write_csv(tmp_path / "a.csv", day_rows(kwh=10.0))
    t = later.stat().st_mtime - (OLDER_SLACK_S - 5)
    os.utime(earlier, (t, t))
    import_file(store, later)
    assert import_file(store, earlier).status == "revised"


def test_newer_export_revises_as_before(store, tmp_path):
    import_file(store, aged(write_csv(tmp_path / "a.csv", day_rows()), days_ago=2))
    out = import_file(store, aged(write_csv(tmp_path / "b.csv", day_rows(kwh=20.0)[:10]), days_ago=1))
    assert out.status == "revised" and out.revised == 10


@pytest.mark.parametrize("fmt", ["json", "text"])
def test_cli_reports_older_with_exit_1(tmp_path, fmt):
    import json
    import subprocess
    import sys

    db = tmp_path / "c.sqlite3"
    env = dict(os.environ, AUDITOR_DB_URL=f"sqlite:///{db}")
    newer = aged(write_csv(tmp_path / "b.csv", day_rows(kwh=12.0)), days_ago=1)
    older = aged(write_csv(tmp_path / "a.csv", day_rows(kwh=10.0)), days_ago=5)
    args = ["--json"] if fmt == "json" else []
    run = [sys.executable, "-m", "auditor", "import"]
    assert subprocess.run(run + [str(newer)], env=env, capture_output=True, timeout=120).returncode == 0
    r = subprocess.run(run + [str(older), *args], env=env, capture_output=True, text=True, timeout=120)
    assert r.returncode == 1 and "Traceback" not in r.stderr
    if fmt == "json":
        f = json.loads(r.stdout)["files"][0]
        assert f["status"] == "older" and f["older"] == 96
    else:
        assert "older" in r.stdout and "--force" in r.stderr
    r = subprocess.run(run + [str(older), "--force"], env=env, capture_output=True, text=True, timeout=120)
    assert r.returncode == 0 and "revised" in r.stdout
