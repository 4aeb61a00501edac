"""Normal commands keep stderr clean: no warnings from the program or its libraries (stderr of
a cron job lands in someone's mail). The commands run in one child process, each one's stderr
caught at the file descriptor (so C-level writes count too), under Python's default warning
filters."""
from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from tests.espi_helpers import feed

ROOT = Path(__file__).resolve().parent.parent
DATA = ROOT / "tests" / "data"
PROFILES = ROOT / "auditor" / "profiles"
TARIFF = "harrowgate_industrial_tou"

# One child process runs the commands in turn; fd 2 goes to a file of its own per command.
_RUNNER = r"""
import json, os, sys, tempfile
from auditor.cli import main

results = []
for args in json.loads(sys.argv[1]):
    with tempfile.TemporaryFile() as err, open(os.devnull, "w") as out:
        sys.stdout.flush(); sys.stderr.flush()
        saved_out, saved_err = os.dup(1), os.dup(2)
        os.dup2(out.fileno(), 1); os.dup2(err.fileno(), 2)
        try:
            main(args)
            code = 0
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else 1
        finally:
            sys.stdout.flush(); sys.stderr.flush()
            os.dup2(saved_out, 1); os.dup2(saved_err, 2)
            os.close(saved_out); os.close(saved_err)
        err.seek(0)
        results.append({"args": args, "code": code, "stderr": err.read().decode("utf-8", "replace")})
print(json.dumps(results))
"""


def run_all(commands: list[list[str]], tmp_path: Path, *python_flags: str) -> list[dict]:
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONWARNINGS", "AUDITOR_DEBUG", "AUDITOR_DB_URL")}
    env.update(XDG_DATA_HOME=str(tmp_path / "data"), XDG_STATE_HOME=str(tmp_path / "state"),
               XDG_CACHE_HOME=str(tmp_path / "cache"))
    r = subprocess.run([sys.executable, *python_flags, "-c", _RUNNER, json.dumps(commands)], capture_output=True,
                       text=True, timeout=1800, env=env, cwd=tmp_path)
    assert r.returncode == 0, r.stderr[-2000:]
    return json.loads(r.stdout.strip().splitlines()[-1])


def normal_commands(tmp_path: Path) -> list[list[str]]:
    db = ["--db", f"sqlite:///{tmp_path / 'q.sqlite3'}"]
    demo = ["--db", f"sqlite:///{tmp_path / 'demo.sqlite3'}"]
    out = tmp_path / "out"
    out.mkdir(exist_ok=True)
    return [
        [*demo, "demo", "--no-serve"],
        [*demo, "audit", "--meter", "KQ-MAIN", "--tariff", TARIFF],
        [*demo, "audit", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--json"],
        [*demo, "size", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--fixed", "150"],
        [*demo, "size", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--optimize"],
        [*demo, "report", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--out", str(out / "r.html")],
        [*demo, "report", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--out", str(out / "r.xlsx")],
        [*demo, "report", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--out", str(out / "r.csv")],
        [*demo, "bills", "check", "--meter", "KQ-MAIN", "--tariff", TARIFF],
        [*demo, "bills", "dispute", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--out", str(out / "q.txt")],
        [*demo, "meters"], [*demo, "sites"], [*demo, "scenarios"], [*demo, "bills"],
        [*db, "import", str(DATA / "obis_fenwick_dairy_wh_end.csv"), str(DATA / "obis_millrace_short_codes.csv")],
        [*db, "import", "--profile", str(PROFILES / "semicolon_wh_end.toml"), "--timezone", "Europe/Berlin",
         str(DATA / "semicolon_wh_end.csv")],
        [*db, "import", "--profile", str(PROFILES / "logger_date_time_varh.toml"),
         str(DATA / "logger_date_time_varh.csv")],
        [*db, "import", str(DATA / "espi_birchfield_15min.xml"), str(DATA / "espi_bare_hourly.xml")],
        [*db, "meters"], [*db, "db", "current"], [*db, "db", "upgrade"], [*db, "db", "check"],
    ]


def _check(results: list[dict]) -> None:
    bad = [(r["args"][2:], r["code"], r["stderr"][-500:]) for r in results if r["code"] != 0 or r["stderr"]]
    assert bad == []


@pytest.mark.slow
def test_normal_commands_write_nothing_to_stderr(tmp_path):
    """Python's default filters show every RuntimeWarning and UserWarning once: an empty
    stderr means none was raised."""
    _check(run_all(normal_commands(tmp_path), tmp_path))


def test_a_month_of_espi_imports_quietly(tmp_path):
    rng = np.random.default_rng(7)
    n = 96 * 31
    wh = np.round(rng.uniform(2_000, 9_000, n)).astype(int)
    varh = np.round(rng.uniform(800, 5_000, n)).astype(int)
    f = tmp_path / "month.xml"
    f.write_text(feed([(72, 1, 0, list(wh)), (73, 1, 0, list(varh))], title="Orchard Row cold store"),
                 encoding="utf-8")
    db = ["--db", f"sqlite:///{tmp_path / 'e.sqlite3'}"]
    _check(run_all([[*db, "import", str(f)], [*db, "audit", "--meter", "Orchard Row cold store",
                                               "--tariff", TARIFF]], tmp_path))
