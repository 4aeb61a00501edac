"""The monitoring job end to end, as an operator runs it: the demo data with a failed capacitor
step planted on KQ-MAIN and KQ-DOCKS stopping mid-month; `auditor alerts --as-of` finds both with
the right dates and money; one digest reaches a real local SMTP server (STARTTLS, login) and one
a real local HTTP server; a second run raises nothing new and sends nothing."""
from __future__ import annotations

import email
import json
import os
import shutil
import subprocess
import sys

import pandas as pd
import pytest
from local_servers import (
    SECRET_ENV,
    SMTP_PASSWORD,
    SMTP_USER,
    WEBHOOK_TOKEN,
    settings_file,
    start_http,
    start_smtp,
)
from monitoring_helpers import (
    AS_OF,
    STEP_DAY,
    STEP_KVAR,
    STOP_AT,
    weekdays_without_holidays,
    write_planted,
)

from auditor.services.demo import demo_dir
from auditor.tariffs import EXAMPLES_DIR, load_tariff

SECRETS = (SMTP_PASSWORD, WEBHOOK_TOKEN)


@pytest.fixture
def servers(tmp_path):
    smtp, stop_smtp = start_smtp(tmp_path)
    http, stop_http = start_http()
    try:
        yield smtp, http
    finally:
        stop_http()
        stop_smtp()


@pytest.fixture(scope="module")
def imported(tmp_path_factory):
    """The planted case imported with the CLI, each meter given the demo tariff (built once)."""
    folder = tmp_path_factory.mktemp("planted")
    db = folder / "template.sqlite3"
    cli(db, "sites", "load", str(demo_dir() / "sites.toml"))
    for meter in ("KQ-MAIN", "KQ-DOCKS", "AR-01"):
        cli(db, "meters", "set-tariff", meter, "harrowgate_industrial_tou")
    out = json.loads(cli(db, "import", *map(str, write_planted(folder)), "--timezone", "Europe/Berlin",
                         "--json").stdout)
    return db, out


def copy_of(imported, tmp_path):
    db = tmp_path / "night.sqlite3"
    shutil.copyfile(imported[0], db)
    return db


def cli(db, *args, rc=0, env=None):
    e = {**os.environ, "AUDITOR_DB_URL": f"sqlite:///{db}", **SECRET_ENV, **(env or {})}
    e.pop("AUDITOR_ALERTS_SETTINGS", None)
    r = subprocess.run([sys.executable, "-m", "auditor", *args], capture_output=True, text=True, env=e, timeout=300)
    for secret in SECRETS:
        assert secret not in r.stdout and secret not in r.stderr, args
    assert r.returncode == rc, (args, r.returncode, r.stdout[-2000:], r.stderr[-2000:])
    return r


def test_nightly_monitoring_end_to_end(tmp_path, servers, imported):
    smtp, http = servers
    db = copy_of(imported, tmp_path)
    settings = settings_file(tmp_path, smtp, http)
    assert {f["status"] for f in imported[1]["files"]} == {"imported"}
    assert imported[1]["checks"]["meters"] == 3  # the checks ran after the import (as of now)

    as_of = AS_OF.isoformat()
    out = json.loads(cli(db, "alerts", "--as-of", as_of, "--settings", str(settings), "--json").stdout)
    found = {(a["meter"], a["kind"]): a for a in out["alerts"]}
    assert set(found) == {("KQ-MAIN", "correction_loss"), ("KQ-DOCKS", "data_stopped")}
    step, stop = found[("KQ-MAIN", "correction_loss")], found[("KQ-DOCKS", "data_stopped")]
    assert step["since"] == STEP_DAY.isoformat() == "2025-09-15T00:00:00+02:00"
    assert stop["since"] == STOP_AT.isoformat() == "2025-09-24T14:00:00+02:00"
    # the money: the clause's excess-kvarh formula worked by hand (see test_monitoring_checks)
    clause = next(m for m in load_tariff(EXAMPLES_DIR / "harrowgate_industrial_tou.toml").reactive
                  if m.label == "reactive_daytime")
    weekdays = weekdays_without_holidays(STEP_DAY - pd.Timedelta(days=28), 28)
    by_hand = clause.price_per_kvarh * STEP_KVAR * 16 * weekdays * (365.25 / 12) / 28
    assert step["money_per_month"] == pytest.approx(by_hand, rel=0.05)
    assert stop["money_per_month"] is None
    for a in (step, stop):
        assert {"meter", "kind", "since", "severity", "money_per_month", "message", "state"} <= set(a)
        assert a["state"] == "new"

    digest = cli(db, "alerts", "digest", "--settings", str(settings))
    assert "sent" in digest.stdout
    assert len(smtp.messages) == 1 and len(http.posts) == 1
    mail = smtp.messages[0]
    assert mail.tls and mail.login == SMTP_USER
    assert sorted(mail.recipients) == ["energy@kestrel-quay.invalid", "facilities@kestrel-quay.invalid"]
    msg = email.message_from_bytes(mail.data)
    assert msg["Subject"] == "pf-auditor: 2 new alerts (1 critical)"
    body = next(p for p in msg.walk() if p.get_content_type() == "text/plain").get_payload(decode=True).decode()
    assert "KQ-DOCKS — data_stopped since 2025-09-24 14:00" in body
    assert "KQ-MAIN — correction_loss since 2025-09-15" in body
    post = http.posts[0]
    assert post["headers"]["Authorization"] == f"Bearer {WEBHOOK_TOKEN}"
    assert post["headers"]["Content-Type"].startswith("application/json")
    assert {(a["meter"], a["kind"]) for a in post["json"]["alerts"]} == set(found)
    assert post["json"]["alerts"][0]["kind"] == "data_stopped"  # critical first

    # the next night: the same causes, nothing new, nothing sent
    again = json.loads(cli(db, "alerts", "--as-of", as_of, "--settings", str(settings), "--json").stdout)
    assert again["run"]["raised"] == []
    assert {(a["meter"], a["kind"], a["state"]) for a in again["alerts"]} == {
        ("KQ-MAIN", "correction_loss", "new"), ("KQ-DOCKS", "data_stopped", "new")}
    quiet = cli(db, "alerts", "digest", "--settings", str(settings))
    assert "nothing sent" in quiet.stdout
    assert len(smtp.messages) == 1 and len(http.posts) == 1

    # mark them seen; the listing and the plain table say so
    cli(db, "alerts", "seen", "--all")
    table = cli(db, "alerts", "--no-check").stdout
    assert table.count(" seen ") == 2 and "EUR/month" in table


def test_a_failing_channel_keeps_the_alerts_for_the_next_digest(tmp_path, servers, imported):
    smtp, http = servers
    db = copy_of(imported, tmp_path)
    settings = settings_file(tmp_path, smtp, http, retries=1)
    cli(db, "alerts", "--as-of", AS_OF.isoformat(), "--settings", str(settings))
    http.fail_next = 5  # more failures than tries
    r = cli(db, "alerts", "digest", "--settings", str(settings), rc=1)
    assert "webhook http://127.0.0.1:" in r.stderr and "HTTP 500" in r.stderr and "key=abc" not in r.stderr
    assert len(smtp.messages) == 1 and http.posts == []
    http.fail_next = 1  # one failure, then the retry goes through
    cli(db, "alerts", "digest", "--settings", str(settings))
    assert len(http.posts) == 1 and len(smtp.messages) == 2
    assert len(http.posts[0]["json"]["alerts"]) >= 2


def test_refused_login_is_one_line_without_the_password(tmp_path, servers, imported):
    smtp, http = servers
    db = copy_of(imported, tmp_path)
    settings = settings_file(tmp_path, smtp, http)
    cli(db, "alerts", "--as-of", AS_OF.isoformat(), "--settings", str(settings))  # something to send
    r = cli(db, "alerts", "digest", "--settings", str(settings), rc=1, env={"TEST_SMTP_SECRET": "wrong-password"})
    assert "refused the login of 'alerts' (535)" in r.stderr and "wrong-password" not in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1 and "Traceback" not in r.stderr
    assert smtp.logins_refused >= 1 and smtp.messages == []
