"""Crash safety: an import killed at any moment leaves each file wholly stored or not at all and
a re-run completes it; a read-only database or a full disk is a clear error; two imports of
different files into one database at once both succeed."""
from __future__ import annotations

import os
import random
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from auditor.ingest.pipeline import import_file
from auditor.store import open_store
from tests.ingest_helpers import stored_rows

pytestmark = pytest.mark.slow

SQLITE_KILLS = 20
PG_KILLS = 10
METERS_A = ("CR-A1", "CR-A2")
METERS_B = ("CR-B1",)
ROWS_PER_METER = 35040  # a meter-year of quarter hours


def _write(path: Path, meters: tuple[str, ...], seed: int) -> Path:
    rng = np.random.default_rng(seed)
    stamps = pd.date_range("2025-01-01", periods=ROWS_PER_METER, freq="15min", tz="UTC").strftime(
        "%Y-%m-%dT%H:%M:%SZ")
    with open(path, "w") as fh:
        fh.write("meter,start,kwh,kvarh_lag,kvarh_lead\n")
        for m in meters:
            kwh = (10 + 5 * rng.random(ROWS_PER_METER)).round(3)
            pd.DataFrame({"meter": m, "start": stamps, "kwh": kwh, "lag": (kwh * 0.6).round(3),
                          "lead": 0.0}).to_csv(fh, header=False, index=False)
    return path


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("crash")
    return _write(d / "a.csv", METERS_A, 1), _write(d / "b.csv", METERS_B, 2)


def _env(url: str) -> dict:
    return dict(os.environ, AUDITOR_DB_URL=url)


def _cmd(*paths: Path) -> list[str]:
    return [sys.executable, "-m", "auditor", "--quiet", "import", *map(str, paths)]


def _counts(url: str) -> tuple[dict[str, int], list[str]]:
    store = open_store(url)
    try:
        with store.engine.connect() as c:
            names = dict(c.exec_driver_sql("SELECT id, external_id FROM meter").fetchall())
            per_meter = dict.fromkeys(names.values(), 0)
            for r in stored_rows(c):
                per_meter[names[r[0]]] += 1
            statuses = c.exec_driver_sql("SELECT status FROM import_batch").scalars().all()
    finally:
        store.dispose()
    return per_meter, statuses


def _whole_or_nothing(per_meter: dict[str, int], meters: tuple[str, ...]) -> bool:
    """True when the file is wholly stored, False when not at all; anything else fails the test."""
    counts = [per_meter.get(m, 0) for m in meters]
    assert counts in ([0] * len(meters), [ROWS_PER_METER] * len(meters)), counts
    return counts[0] == ROWS_PER_METER


def _reset(url: str) -> None:
    if url.startswith("sqlite"):
        path = Path(url.split("///", 1)[1])
        for p in path.parent.glob(path.name + "*"):
            p.unlink()
        return
    store = open_store(url)
    try:
        with store.engine.begin() as c:
            for t in ("reading_revision", "reading_block", "quality_flag", "channel", "meter_summary", "meter_data", "meter",
                      "site", "import_batch"):
                c.exec_driver_sql(f"DELETE FROM {t}")
    finally:
        store.dispose()


def test_sigkill_at_random_points(db_url, files):
    a, b = files
    kills = SQLITE_KILLS if db_url.startswith("sqlite") else PG_KILLS
    env = _env(db_url)
    t = time.perf_counter()
    subprocess.run(_cmd(a, b), env=env, check=True, capture_output=True, timeout=300)
    full = time.perf_counter() - t
    rng = random.Random(20250115)
    seen = {"neither": 0, "a only": 0, "both": 0}
    for _ in range(kills):
        _reset(db_url)
        open_store(db_url).dispose()  # schema in place, so kills land in the import itself
        proc = subprocess.Popen(_cmd(a, b), env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        time.sleep(rng.uniform(0.3, full))
        proc.send_signal(signal.SIGKILL)
        proc.wait()
        per_meter, statuses = _counts(db_url)
        stored = (_whole_or_nothing(per_meter, METERS_A), _whole_or_nothing(per_meter, METERS_B))
        assert stored != (False, True)  # files go in order
        assert "importing" not in statuses  # the batch row commits with its readings or not at all
        seen[{(False, False): "neither", (True, False): "a only", (True, True): "both"}[stored]] += 1
        # the re-run (in this process: the same import_file the command calls) completes the work
        store = open_store(db_url)
        try:
            again = [import_file(store, f).status for f in (a, b)]
        finally:
            store.dispose()
        assert again == [("unchanged" if stored[0] else "imported"), ("unchanged" if stored[1] else "imported")]
        per_meter, _ = _counts(db_url)
        assert _whole_or_nothing(per_meter, METERS_A) and _whole_or_nothing(per_meter, METERS_B)
    print(f"\n{kills} kills on {db_url.split(':')[0]} (uninterrupted run {full:.2f} s): {seen}")
    assert sum(seen.values()) == kills


def test_two_processes_import_different_files_at_once(db_url, files):
    a, b = files
    env = _env(db_url)
    open_store(db_url).dispose()
    procs = [subprocess.Popen(_cmd(f), env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
             for f in (a, b)]
    outs = [p.communicate(timeout=300) for p in procs]
    assert [p.returncode for p in procs] == [0, 0], outs
    per_meter, statuses = _counts(db_url)
    assert _whole_or_nothing(per_meter, METERS_A) and _whole_or_nothing(per_meter, METERS_B)
    assert sorted(statuses) == ["imported", "imported"]


def test_read_only_database_is_a_clear_error(tmp_path):
    db = tmp_path / "ro.sqlite3"
    open_store(f"sqlite:///{db}").dispose()
    small = tmp_path / "small.csv"
    small.write_text("meter,start,kwh,kvarh_lag,kvarh_lead\nRO-1,2025-01-01T00:00:00Z,1,1,0\n"
                     "RO-1,2025-01-01T00:15:00Z,1,1,0\n")
    if os.geteuid() == 0:
        # root writes through file permissions: open the file read-only the way SQLite offers
        url = f"sqlite:///file:{db}?mode=ro&uri=true"
    else:
        db.chmod(0o444)
        tmp_path.chmod(0o555)
        url = f"sqlite:///{db}"
    try:
        r = subprocess.run(_cmd(small), env=_env(url), capture_output=True, text=True, timeout=120,
                           cwd=tmp_path)
    finally:
        tmp_path.chmod(0o755)
    assert r.returncode == 1
    assert "Traceback" not in r.stderr and "internal error" not in r.stderr, r.stderr
    assert "read-only" in r.stdout + r.stderr, (r.stdout, r.stderr)
    assert sorted(p.name for p in tmp_path.iterdir() if not p.name.startswith("ro.sqlite3")) == ["small.csv"]
    per_meter, _ = _counts(f"sqlite:///{db}")
    assert sum(per_meter.values()) == 0


def _mount_tiny_tmpfs(where: Path) -> bool:
    if os.geteuid() != 0 or not shutil.which("mount"):
        return False
    r = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=1m", "tmpfs", str(where)], capture_output=True)
    return r.returncode == 0


def test_full_disk_is_a_clear_error(tmp_path, files):
    a, _ = files
    where = Path(tempfile.mkdtemp(prefix="auditor-full-"))
    if _mount_tiny_tmpfs(where):
        try:
            db = where / "full.sqlite3"
            r = subprocess.run(_cmd(a), env=_env(f"sqlite:///{db}"), capture_output=True, text=True, timeout=300)
            assert r.returncode == 1, (r.stdout, r.stderr)
            assert "Traceback" not in r.stderr and "internal error" not in r.stderr, r.stderr
            assert "disk is full" in r.stderr or "disk is full" in r.stdout, (r.stdout, r.stderr)
            per_meter, _ = _counts(f"sqlite:///{db}")
            assert sum(per_meter.values()) == 0
        finally:
            subprocess.run(["umount", str(where)], check=False)
            where.rmdir()
        return
    where.rmdir()
    # no mount privileges: cap the database file's size instead
    from sqlalchemy import event

    store = open_store(f"sqlite:///{tmp_path / 'cap.sqlite3'}")
    with store.engine.connect() as c:
        pages = c.exec_driver_sql("PRAGMA page_count").scalar()
    event.listen(store.engine, "connect", lambda con, _r: con.execute(f"PRAGMA max_page_count={pages + 50}"))
    store.engine.dispose()
    out = import_file(store, a)
    assert out.status == "rejected" and "full" in out.errors[0].message
    assert stored_rows(store) == []
