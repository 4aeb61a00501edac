"""Monitoring settings (file and environment), the webhook's retries and timeouts, secrets kept
out of every message, and the CLI's one-line errors."""
from __future__ import annotations

import json
import os
import subprocess
import sys

import pytest
from local_servers import start_http

from auditor.services.notify import (
    DeliveryError,
    SettingsError,
    WebhookSettings,
    load_settings,
    post_webhook,
    safe_url,
    send_digest,
)


def write(tmp_path, text):
    p = tmp_path / "alerts.toml"
    p.write_text(text, encoding="utf-8")
    return p


GOOD = """
[checks]
stale_hours = 12
recent_days = 5

[email]
host = "mail.example.invalid"
username = "ops"
password_env = "MY_PW"
from = "alerts@example.invalid"
to = ["a@example.invalid"]

[webhook]
url = "https://user:pw@hooks.example.invalid/in?token=abc#x"
token_env = "MY_TOKEN"
retries = 4
"""


def test_settings_from_file_and_environment(tmp_path):
    env = {"MY_PW": "pa55-secret", "MY_TOKEN": "t0ken-secret"}
    s = load_settings(write(tmp_path, GOOD), env=env)
    assert s.checks.stale_hours == 12 and s.checks.recent_days == 5 and s.checks.baseline_days == 28
    assert s.email.port == 587 and s.email.starttls and not s.email.ssl and s.email.password == "pa55-secret"
    assert s.webhook.retries == 4 and s.webhook.token == "t0ken-secret"
    shown = " ".join(s.describe()) + repr(s)
    for secret in ("pa55-secret", "t0ken-secret", "token=abc", ":pw@"):
        assert secret not in shown
    assert "https://hooks.example.invalid/in" in shown
    # the environment wins over the file
    env2 = {**env, "AUDITOR_SMTP_HOST": "other.invalid", "AUDITOR_SMTP_PORT": "465", "AUDITOR_SMTP_SSL": "1",
            "AUDITOR_SMTP_TO": "x@example.invalid, y@example.invalid", "AUDITOR_WEBHOOK_URL": "http://127.0.0.1:9/h"}
    s2 = load_settings(write(tmp_path, GOOD), env=env2)
    assert (s2.email.host, s2.email.port, s2.email.ssl) == ("other.invalid", 465, True)
    assert s2.email.to == ("x@example.invalid", "y@example.invalid") and s2.webhook.url.endswith("/h")
    # environment only, no file at all
    s3 = load_settings(None, env={"AUDITOR_WEBHOOK_URL": "https://h.invalid/x", "AUDITOR_WEBHOOK_TOKEN": "t"})
    assert s3.email is None and s3.webhook.token == "t" and s3.source is None


@pytest.mark.parametrize("text, where", [
    ("[email]\nhots = 'x'\n", "email.hots: unknown key"),
    ("[checks]\nstale_hourz = 3\n", "checks.stale_hourz: unknown key"),
    ("[checks]\nstale_hours = 'soon'\n", "checks.stale_hours: expected a number"),
    ("[checks]\nrecent_days = 2.5\n", "checks.recent_days: expected a whole number"),
    ("[email]\nhost = 'h'\nto = ['a@b']\nfrom = 'c@d'\nport = 70000\n", "email.port: 70000 is outside"),
    ("[email]\nhost = 'h'\nfrom = 'c@d'\n", "email.to: give at least one recipient"),
    ("[email]\nhost = 'h'\nto = ['a@b']\n", "email.from: the sender address is required"),
    ("[email]\nhost = 'h'\nto = ['a@b']\nfrom = 'c@d'\nusername = 'u'\n", "a username without a password"),
    ("[email]\nport = 25\n", "email.host is required"),
    ("[webhook]\nurl = 'ftp://x/y'\n", "webhook.url: must be an http or https URL"),
    ("[webhook]\nretries = 2\n", "webhook.url is required"),
    ("[digest]\nalways = 'perhaps'\n", "digest.always: expected true or false"),
    ("[alarms]\nx = 1\n", "alarms: unknown key"),
    ("[email\n", "not valid TOML"),
])
def test_bad_settings_name_file_and_key(tmp_path, text, where):
    p = write(tmp_path, text)
    with pytest.raises(SettingsError) as e:
        load_settings(p, env={})
    assert where in e.value.message and str(p.name) in e.value.message
    assert e.value.exit_code == 2


def test_missing_settings_file(tmp_path):
    with pytest.raises(SettingsError, match="no such settings file"):
        load_settings(tmp_path / "nope.toml", env={})


def test_safe_url():
    assert safe_url("https://u:p@h.invalid:8443/a/b?k=v#f") == "https://h.invalid:8443/a/b"


def test_webhook_retries_then_succeeds_and_gives_up_on_client_errors():
    http, stop = start_http()
    try:
        http.fail_next = 2
        assert post_webhook(WebhookSettings(http.url, token="tk", retries=3, retry_delay_seconds=0.01),
                            {"alerts": []}) == 204
        assert len(http.posts) == 1 and http.posts[0]["json"] == {"alerts": []}
        http.status = 400
        with pytest.raises(DeliveryError) as e:
            post_webhook(WebhookSettings(http.url, token="tk", retries=3, retry_delay_seconds=0.01), {"alerts": []})
        assert "HTTP 400" in e.value.message and "after 1 try" in e.value.message and "key=abc" not in e.value.message
        assert len(http.posts) == 2  # no retry on a client error
        http.status, http.delay = 204, 1.0
        with pytest.raises(DeliveryError, match="failed after 2 tries: timed out"):
            post_webhook(WebhookSettings(http.url, retries=1, timeout_seconds=0.2, retry_delay_seconds=0.01), {})
    finally:
        stop()


def test_digest_needs_a_channel(store):
    with pytest.raises(SettingsError, match="no channel configured"):
        send_digest(store, load_settings(None, env={}))


def run(db, *args, rc, env=None):
    e = {**os.environ, "AUDITOR_DB_URL": f"sqlite:///{db}", **(env or {})}
    for k in ("AUDITOR_ALERTS_SETTINGS", "AUDITOR_SMTP_HOST", "AUDITOR_WEBHOOK_URL"):
        e.pop(k, None)
    r = subprocess.run([sys.executable, "-m", "auditor", *args], capture_output=True, text=True, env=e, timeout=120)
    assert r.returncode == rc, (args, r.stdout, r.stderr)
    assert "Traceback" not in r.stderr
    return r


def test_cli_errors_are_one_line(tmp_path):
    db = tmp_path / "c.sqlite3"
    csv = tmp_path / "m.csv"
    csv.write_text("meter,start,kwh,kvarh_lag,kvarh_lead\nM1,2025-01-06T00:00:00+00:00,1,0.5,0\n", encoding="utf-8")
    out = json.loads(run(db, "import", str(csv), "--json", rc=0).stdout)
    assert out["checks"]["meters"] == 1
    for args, rc, text in (
        (("alerts", "--as-of", "next tuesday"), 2, "is not an ISO date"),
        (("alerts", "--as-of", "2025-01-07", "--no-check"), 2, "--as-of needs the checks"),
        (("alerts", "digest"), 2, "no channel configured"),
        (("alerts", "digest", "--settings", str(tmp_path / "none.toml")), 2, "no such settings file"),
        (("alerts", "seen", "42"), 2, "no alert 42"),
        (("alerts", "--meter", "NOPE"), 1, "no meter 'NOPE'"),
        (("audit", "--meter", "M1"), 2, "meter M1 has no tariff of its own: give --tariff FILE"),
        (("meters", "set-tariff", "M1"), 2, "give the tariff file"),
        (("meters", "set-tariff", "M1", "no_such_tariff"), 1, "no tariff file 'no_such_tariff'"),
        (("meters", "set-tariff", "M2", "millbrook_commercial_pf"), 1, "no meter 'M2'"),
    ):
        r = run(db, *args, rc=rc)
        assert text in r.stderr, (args, r.stderr)
        assert len([x for x in r.stderr.splitlines() if x.strip()]) <= 3, r.stderr
    assert "M1" in run(db, "meters", rc=0).stdout
    assert "Millbrook" in run(db, "meters", "set-tariff", "M1", "millbrook_commercial_pf", "--billing-day", "5", rc=0).stdout
    audit = json.loads(run(db, "audit", "--meter", "M1", "--json", rc=0).stdout)
    assert audit["tariff"] == "Millbrook General Service PF" and audit["periods"][0]["start"] == "2025-01-05"
    assert "removed" in run(db, "meters", "set-tariff", "M1", "--clear", rc=0).stdout
    # a year-old import is an archive, not a stopped meter; three days after its data, it is
    assert json.loads(run(db, "alerts", "--json", rc=0).stdout)["alerts"] == []
    alerts = json.loads(run(db, "alerts", "--as-of", "2025-01-09", "--json", rc=0).stdout)
    assert [a["kind"] for a in alerts["alerts"]] == ["data_stopped"] and alerts["run"]["meters"] == 1
