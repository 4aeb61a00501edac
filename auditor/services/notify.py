"""Monitoring settings and the digest: what the checks found, sent by email and to a webhook.

Settings come from a TOML file (``--settings FILE``, else ``AUDITOR_ALERTS_SETTINGS``, else
``alerts.toml`` in the user's config folder when it exists) and from environment variables,
which win over the file::

    [checks]                      # any field of auditor.monitoring.CheckSettings
    stale_hours = 36

    [email]                       # SMTP with STARTTLS (or ssl = true for port 465) and login
    host = "smtp.example.org"     # AUDITOR_SMTP_HOST
    port = 587                    # AUDITOR_SMTP_PORT
    starttls = true               # AUDITOR_SMTP_STARTTLS (1/0)
    ssl = false                   # AUDITOR_SMTP_SSL (1/0)
    username = "alerts"           # AUDITOR_SMTP_USERNAME
    password_env = "MY_SMTP_PW"   # the variable holding the password (default AUDITOR_SMTP_PASSWORD)
    from = "pf-auditor <alerts@example.org>"   # AUDITOR_SMTP_FROM
    to = ["ops@example.org"]      # AUDITOR_SMTP_TO (comma separated)
    timeout_seconds = 30
    ca_file = "/etc/ssl/private-ca.pem"        # trust this CA as well (a private mail server)

    [webhook]                     # HTTP POST of the digest as JSON
    url = "https://hooks.example.org/pf"       # AUDITOR_WEBHOOK_URL
    token_env = "MY_HOOK_TOKEN"   # sent as "Authorization: Bearer ..." (default AUDITOR_WEBHOOK_TOKEN)
    timeout_seconds = 10
    retries = 3                   # further tries after a failure (timeouts, 5xx, 408, 429)
    retry_delay_seconds = 2       # doubled after each try

    [digest]
    always = false                # also send when nothing changed ("all quiet")

Secrets (the SMTP password, the webhook token) are read only from environment variables, or
from ``password`` / ``token`` in a file that should then be readable by its owner only; they
are never printed, logged or put in an error message, and a webhook URL is shown without its
query string and user part.

A digest lists the alerts not yet sent and those resolved since they were sent. It goes to every
configured channel; alerts are marked sent only when every channel took it, so a failed channel
is tried again next time (the other one may then receive the same digest twice).
"""
from __future__ import annotations

import json
import logging
import os
import smtplib
import ssl
import time
import tomllib
import urllib.error
import urllib.request
from dataclasses import dataclass, field, fields
from email.message import EmailMessage
from email.utils import formatdate, make_msgid
from pathlib import Path
from urllib.parse import urlsplit

from sqlalchemy import select

from auditor import __version__
from auditor.errors import AuditorError, UsageError
from auditor.monitoring import CheckSettings
from auditor.store import Store
from auditor.store.models import Alert, Notification
from auditor.store.queries import now_utc

__all__ = ["Settings", "EmailSettings", "WebhookSettings", "SettingsError", "load_settings",
           "build_digest", "send_digest", "send_email", "post_webhook", "safe_url", "DeliveryError"]

log = logging.getLogger("auditor.notify")

SETTINGS_ENV = "AUDITOR_ALERTS_SETTINGS"


class SettingsError(UsageError):
    """A bad monitoring setting: names the file and key (exit code 2)."""


class DeliveryError(AuditorError):
    """A digest that did not reach a channel (exit code 1); the message holds no secret."""


@dataclass(frozen=True)
class EmailSettings:
    host: str
    to: tuple[str, ...]
    sender: str
    port: int = 587
    starttls: bool = True
    ssl: bool = False
    username: str | None = None
    password: str | None = field(default=None, repr=False)
    timeout_seconds: float = 30.0
    ca_file: str | None = None
    retries: int = 1
    retry_delay_seconds: float = 5.0

    def describe(self) -> str:
        mode = "SSL" if self.ssl else ("STARTTLS" if self.starttls else "plain")
        who = f", login {self.username}" if self.username else ""
        return f"email via {self.host}:{self.port} ({mode}{who}) to {', '.join(self.to)}"


@dataclass(frozen=True)
class WebhookSettings:
    url: str = field(repr=False)
    token: str | None = field(default=None, repr=False)
    timeout_seconds: float = 10.0
    retries: int = 3
    retry_delay_seconds: float = 2.0

    def describe(self) -> str:
        return f"webhook POST to {safe_url(self.url)}" + (" (with a bearer token)" if self.token else "")


@dataclass(frozen=True)
class Settings:
    checks: CheckSettings = field(default_factory=CheckSettings)
    email: EmailSettings | None = None
    webhook: WebhookSettings | None = None
    always: bool = False
    source: str | None = None

    def describe(self) -> list[str]:
        out = [f"settings: {self.source or 'defaults and environment'}"]
        out.append(self.email.describe() if self.email else "email: not configured")
        out.append(self.webhook.describe() if self.webhook else "webhook: not configured")
        return out


def safe_url(url: str) -> str:
    """``scheme://host[:port]/path`` without user, password, query or fragment."""
    try:
        p = urlsplit(url)
        host = p.hostname or ""
        port = f":{p.port}" if p.port else ""
        return f"{p.scheme}://{host}{port}{p.path}"
    except ValueError:
        return "(unparseable URL)"


# --------------------------------------------------------------------------------------------
# settings
# --------------------------------------------------------------------------------------------
def default_settings_path() -> Path:
    import platformdirs

    from auditor.store.engine import APP_DIR_NAME

    return Path(platformdirs.user_config_dir(APP_DIR_NAME)) / "alerts.toml"


def _bool(value, where: str) -> bool:
    if isinstance(value, bool):
        return value
    if isinstance(value, str) and value.strip().lower() in ("1", "true", "yes", "on"):
        return True
    if isinstance(value, str) and value.strip().lower() in ("0", "false", "no", "off", ""):
        return False
    raise SettingsError(f"{where}: expected true or false, not {value!r}")


def _number(value, where: str, lo: float, hi: float, integer: bool = False):
    try:
        if isinstance(value, bool):
            raise ValueError
        v = int(value) if integer else float(value)
        if integer and float(value) != v:
            raise ValueError
    except (TypeError, ValueError):
        raise SettingsError(f"{where}: expected {'a whole number' if integer else 'a number'}, not {value!r}") from None
    if not lo <= v <= hi:
        raise SettingsError(f"{where}: {v} is outside {lo:g}..{hi:g}")
    return v


def _table(data: dict, key: str, where: str) -> dict:
    t = data.get(key, {})
    if not isinstance(t, dict):
        raise SettingsError(f"{where}: [{key}] must be a table")
    return t


def _unknown(table: dict, allowed: set[str], where: str) -> None:
    extra = sorted(set(table) - allowed)
    if extra:
        raise SettingsError(f"{where}.{extra[0]}: unknown key; allowed: {', '.join(sorted(allowed))}")


def load_settings(path: str | Path | None = None, env: dict | None = None) -> Settings:
    """Settings from ``path`` (or ``AUDITOR_ALERTS_SETTINGS``, or the default file when it
    exists) and the environment ``env`` (default ``os.environ``)."""
    env = dict(os.environ if env is None else env)
    if path is None:
        path = env.get(SETTINGS_ENV) or None
        if path is None and default_settings_path().is_file():
            path = default_settings_path()
    data: dict = {}
    where = "environment"
    if path is not None:
        p = Path(path)
        where = str(p)
        try:
            data = tomllib.loads(p.read_text(encoding="utf-8"))
        except FileNotFoundError:
            raise SettingsError(f"{p}: no such settings file") from None
        except (OSError, UnicodeDecodeError) as exc:
            raise SettingsError(f"{p}: cannot be read ({exc})") from None
        except tomllib.TOMLDecodeError as exc:
            raise SettingsError(f"{p}: not valid TOML: {exc}") from None
        _unknown(data, {"checks", "email", "webhook", "digest"}, p.name)
    checks = _checks(_table(data, "checks", where), where)
    email = _email(_table(data, "email", where), env, where)
    webhook = _webhook(_table(data, "webhook", where), env, where)
    digest = _table(data, "digest", where)
    _unknown(digest, {"always"}, f"{where}: digest")
    always = _bool(env.get("AUDITOR_DIGEST_ALWAYS", digest.get("always", False)), f"{where}: digest.always")
    return Settings(checks, email, webhook, always, str(path) if path is not None else None)


def _checks(table: dict, where: str) -> CheckSettings:
    defaults = CheckSettings()
    names = {f.name: f for f in fields(CheckSettings)}
    _unknown(table, set(names), f"{where}: checks")
    values = {}
    for k, v in table.items():
        integer = isinstance(getattr(defaults, k), int)
        values[k] = _number(v, f"{where}: checks.{k}", 0, 10_000, integer=integer)
    return CheckSettings(**values)


def _secret(table: dict, env: dict, key: str, env_key_field: str, default_env: str, where: str) -> str | None:
    var = table.get(env_key_field, default_env)
    if not isinstance(var, str) or not var:
        raise SettingsError(f"{where}.{env_key_field}: must name an environment variable")
    if env.get(var):
        return env[var]
    v = table.get(key)
    if v is not None and not isinstance(v, str):
        raise SettingsError(f"{where}.{key}: must be text")
    return v or None


def _email(table: dict, env: dict, where: str) -> EmailSettings | None:
    allowed = {"host", "port", "starttls", "ssl", "username", "password", "password_env", "from", "to",
               "timeout_seconds", "ca_file", "retries", "retry_delay_seconds"}
    _unknown(table, allowed, f"{where}: email")
    host = env.get("AUDITOR_SMTP_HOST") or table.get("host")
    if not host:
        if any(k in table for k in allowed - {"password_env"}) or env.get("AUDITOR_SMTP_TO"):
            raise SettingsError(f"{where}: email.host is required (or AUDITOR_SMTP_HOST)")
        return None
    w = f"{where}: email"
    to_raw = env.get("AUDITOR_SMTP_TO") or table.get("to")
    if isinstance(to_raw, str):
        to = tuple(x.strip() for x in to_raw.split(",") if x.strip())
    elif isinstance(to_raw, list) and all(isinstance(x, str) for x in to_raw):
        to = tuple(x.strip() for x in to_raw if x.strip())
    else:
        to = ()
    if not to:
        raise SettingsError(f"{w}.to: give at least one recipient (or AUDITOR_SMTP_TO)")
    sender = env.get("AUDITOR_SMTP_FROM") or table.get("from")
    if not sender or not isinstance(sender, str):
        raise SettingsError(f"{w}.from: the sender address is required (or AUDITOR_SMTP_FROM)")
    use_ssl = _bool(env.get("AUDITOR_SMTP_SSL", table.get("ssl", False)), f"{w}.ssl")
    starttls = _bool(env.get("AUDITOR_SMTP_STARTTLS", table.get("starttls", not use_ssl)), f"{w}.starttls")
    port = _number(env.get("AUDITOR_SMTP_PORT", table.get("port", 465 if use_ssl else 587)), f"{w}.port", 1, 65535, True)
    username = env.get("AUDITOR_SMTP_USERNAME") or table.get("username") or None
    password = _secret(table, env, "password", "password_env", "AUDITOR_SMTP_PASSWORD", w)
    if username and not password:
        raise SettingsError(f"{w}: a username without a password (set AUDITOR_SMTP_PASSWORD or password_env)")
    ca = table.get("ca_file")
    if ca is not None and not Path(ca).is_file():
        raise SettingsError(f"{w}.ca_file: no such file {ca}")
    return EmailSettings(host=str(host), to=to, sender=sender, port=port, starttls=starttls, ssl=use_ssl,
                         username=username, password=password,
                         timeout_seconds=_number(table.get("timeout_seconds", 30), f"{w}.timeout_seconds", 0.1, 600),
                         ca_file=ca, retries=_number(table.get("retries", 1), f"{w}.retries", 0, 10, True),
                         retry_delay_seconds=_number(table.get("retry_delay_seconds", 5), f"{w}.retry_delay_seconds", 0, 600))


def _webhook(table: dict, env: dict, where: str) -> WebhookSettings | None:
    allowed = {"url", "token", "token_env", "timeout_seconds", "retries", "retry_delay_seconds"}
    _unknown(table, allowed, f"{where}: webhook")
    url = env.get("AUDITOR_WEBHOOK_URL") or table.get("url")
    w = f"{where}: webhook"
    if not url:
        if any(k in table for k in allowed - {"token_env"}):
            raise SettingsError(f"{w}.url is required (or AUDITOR_WEBHOOK_URL)")
        return None
    scheme = urlsplit(str(url)).scheme
    if scheme not in ("http", "https"):
        raise SettingsError(f"{w}.url: must be an http or https URL, not {safe_url(str(url))!r}")
    return WebhookSettings(url=str(url), token=_secret(table, env, "token", "token_env", "AUDITOR_WEBHOOK_TOKEN", w),
                           timeout_seconds=_number(table.get("timeout_seconds", 10), f"{w}.timeout_seconds", 0.1, 600),
                           retries=_number(table.get("retries", 3), f"{w}.retries", 0, 10, True),
                           retry_delay_seconds=_number(table.get("retry_delay_seconds", 2), f"{w}.retry_delay_seconds", 0, 600))


# --------------------------------------------------------------------------------------------
# the digest
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Digest:
    new: list[dict]
    resolved: list[dict]
    open: int
    generated_at: str

    @property
    def empty(self) -> bool:
        return not self.new and not self.resolved

    def to_dict(self) -> dict:
        """The webhook's JSON: ``alerts`` (new since the last digest, the shape of ``auditor
        alerts --json``), ``resolved``, ``open`` and when."""
        return {"alerts": self.new, "resolved": self.resolved, "open": self.open,
                "generated_at": self.generated_at, "source": f"pf-auditor {__version__}"}

    def subject(self) -> str:
        crit = sum(1 for a in self.new if a["severity"] == "critical")
        parts = [f"{len(self.new)} new alert{'s' if len(self.new) != 1 else ''}"]
        if crit:
            parts[0] += f" ({crit} critical)"
        if self.resolved:
            parts.append(f"{len(self.resolved)} resolved")
        if self.empty:
            parts = ["all quiet"]
        return "pf-auditor: " + ", ".join(parts)

    def text(self) -> str:
        lines = [self.subject(), ""]
        if self.empty:
            lines.append(f"No new or resolved alerts; {self.open} open.")
        for a in self.new:
            money = f", about {a['money_per_month']:,.0f} {a.get('currency') or ''} a month" if a["money_per_month"] else ""
            lines.append(f"[{a['severity']}] {a['meter']} — {a['kind']} since {_short(a['since'])}{money}")
            lines.append(f"    {a['message']}")
        if self.resolved:
            lines += ["", "Resolved:"]
            for a in self.resolved:
                lines.append(f"  {a['meter']} — {a['kind']} (since {_short(a['since'])}), resolved {_short(a['resolved_at'])}")
        lines += ["", f"{self.open} alert{'s' if self.open != 1 else ''} open in all. "
                  "`auditor alerts` lists them; `auditor alerts seen --all` marks them seen.",
                  "This tool estimates; it does not certify."]
        return "\n".join(lines) + "\n"


def _short(iso: str | None) -> str:
    if not iso:
        return "?"
    return iso[:16].replace("T", " ") if "T00:00:00" not in iso else iso[:10]


def build_digest(store: Store) -> Digest:
    from auditor.services.alerts import list_alerts

    everything = list_alerts(store, states=None)
    with store.session() as s:
        pending = {a.id: a for a in s.scalars(select(Alert).where(
            (Alert.notified.is_(False) & Alert.state.in_(("new", "seen")))
            | (Alert.notified.is_(True) & (Alert.state == "resolved") & Alert.resolved_notified.is_(False))))}
    new = [a for a in everything if a["id"] in pending and a["state"] != "resolved"]
    resolved = [a for a in everything if a["id"] in pending and a["state"] == "resolved"]
    n_open = sum(1 for a in everything if a["state"] in ("new", "seen"))
    return Digest(sorted(new, key=_rank), resolved, n_open, now_utc().isoformat(timespec="seconds"))


def _rank(a: dict):
    order = {"critical": 0, "warning": 1, "info": 2}
    return (order.get(a["severity"], 3), -(a["money_per_month"] or 0.0), a["meter"], a["kind"])


def send_email(settings: EmailSettings, subject: str, body: str, attachment: dict | None = None) -> None:
    """Send one message (STARTTLS or SSL, login when a username is set); retries on connection
    failures. Raises :class:`DeliveryError` without any secret in its message."""
    msg = EmailMessage()
    msg["Subject"] = subject
    msg["From"] = settings.sender
    msg["To"] = ", ".join(settings.to)
    msg["Date"] = formatdate(localtime=False)
    msg["Message-ID"] = make_msgid(domain="pf-auditor.invalid")
    msg.set_content(body)
    if attachment is not None:
        msg.add_attachment(json.dumps(attachment, indent=1).encode("utf-8"), maintype="application",
                           subtype="json", filename="alerts.json")
    context = ssl.create_default_context(cafile=settings.ca_file) if settings.ca_file else ssl.create_default_context()
    where = f"{settings.host}:{settings.port}"
    last = None
    for attempt in range(settings.retries + 1):
        if attempt:
            time.sleep(settings.retry_delay_seconds * 2 ** (attempt - 1))
        try:
            if settings.ssl:
                client = smtplib.SMTP_SSL(settings.host, settings.port, timeout=settings.timeout_seconds, context=context)
            else:
                client = smtplib.SMTP(settings.host, settings.port, timeout=settings.timeout_seconds)
            with client:
                client.ehlo()
                if settings.starttls and not settings.ssl:
                    client.starttls(context=context)
                    client.ehlo()
                if settings.username:
                    client.login(settings.username, settings.password or "")
                client.send_message(msg)
            log.info("digest emailed via %s to %d recipient(s)", where, len(settings.to))
            return
        except smtplib.SMTPAuthenticationError as exc:
            raise DeliveryError(f"email via {where}: the server refused the login of {settings.username!r} "
                                f"({exc.smtp_code})") from None
        except smtplib.SMTPNotSupportedError:
            raise DeliveryError(f"email via {where}: the server does not offer STARTTLS or login") from None
        except smtplib.SMTPRecipientsRefused as exc:
            raise DeliveryError(f"email via {where}: recipients refused: {', '.join(exc.recipients)}") from None
        except smtplib.SMTPResponseException as exc:
            last = f"the server answered {exc.smtp_code}"
            if 500 <= exc.smtp_code < 600:
                break
        except ssl.SSLError as exc:
            raise DeliveryError(f"email via {where}: TLS failed ({exc.reason or type(exc).__name__})") from None
        except (OSError, smtplib.SMTPException) as exc:
            last = type(exc).__name__ + (f": {exc.strerror}" if getattr(exc, "strerror", None) else "")
    raise DeliveryError(f"email via {where} failed after {attempt + 1} tr{'ies' if attempt else 'y'}: {last}")


def post_webhook(settings: WebhookSettings, document: dict) -> int:
    """POST ``document`` as JSON; retries timeouts, connection failures, 5xx, 408 and 429 with a
    doubling delay. Returns the HTTP status; raises :class:`DeliveryError` (no secret inside)."""
    body = json.dumps(document, ensure_ascii=False).encode("utf-8")
    headers = {"Content-Type": "application/json; charset=utf-8", "User-Agent": f"pf-auditor/{__version__}"}
    if settings.token:
        headers["Authorization"] = f"Bearer {settings.token}"
    where = safe_url(settings.url)
    last = None
    for attempt in range(settings.retries + 1):
        if attempt:
            time.sleep(settings.retry_delay_seconds * 2 ** (attempt - 1))
        req = urllib.request.Request(settings.url, data=body, headers=headers, method="POST")
        try:
            with urllib.request.urlopen(req, timeout=settings.timeout_seconds) as resp:  # noqa: S310 - http(s) only, checked
                status = resp.status
            log.info("digest posted to %s (HTTP %d)", where, status)
            return status
        except urllib.error.HTTPError as exc:
            last = f"HTTP {exc.code}"
            if exc.code < 500 and exc.code not in (408, 429):
                break
        except (urllib.error.URLError, TimeoutError, ConnectionError) as exc:
            reason = getattr(exc, "reason", exc)
            last = "timed out" if isinstance(reason, TimeoutError) else type(reason).__name__
    raise DeliveryError(f"webhook {where} failed after {attempt + 1} tr{'ies' if attempt else 'y'}: {last}")


def send_digest(store: Store, settings: Settings, *, dry_run: bool = False) -> dict:
    """Build the digest and send it to every configured channel.

    Returns ``{"sent": bool, "channels": {...}, "alerts": n, "resolved": n, "subject": ...}``;
    nothing is sent when the digest is empty (unless ``[digest] always``) or no channel is
    configured (a usage error then). A channel that fails raises :class:`DeliveryError` after the
    others were tried; the alerts then stay unsent for the next digest.
    """
    if settings.email is None and settings.webhook is None:
        raise SettingsError("no channel configured for the digest: set [email] and/or [webhook] in the settings "
                            "file, or AUDITOR_SMTP_HOST / AUDITOR_WEBHOOK_URL")
    digest = build_digest(store)
    out = {"sent": False, "channels": {}, "alerts": len(digest.new), "resolved": len(digest.resolved),
           "open": digest.open, "subject": digest.subject()}
    if (digest.empty and not settings.always) or dry_run:
        out["reason"] = "dry run" if dry_run else "nothing new"
        if dry_run:
            out["text"] = digest.text()
        return out
    errors = []
    doc = digest.to_dict()
    for channel, send in (("email", lambda: send_email(settings.email, digest.subject(), digest.text(), doc)),
                          ("webhook", lambda: post_webhook(settings.webhook, doc))):
        if getattr(settings, channel) is None:
            continue
        try:
            send()
            out["channels"][channel] = "sent"
            _log(store, channel, len(digest.new), "sent", None)
        except DeliveryError as exc:
            out["channels"][channel] = exc.message
            errors.append(exc.message)
            _log(store, channel, len(digest.new), "failed", exc.message)
    if errors:
        raise DeliveryError("; ".join(errors))
    ids_new = [a["id"] for a in digest.new]
    ids_res = [a["id"] for a in digest.resolved]
    with store.session() as s:
        for a in s.scalars(select(Alert).where(Alert.id.in_(ids_new + ids_res))):
            if a.id in ids_new:
                a.notified = True
            else:
                a.resolved_notified = True
    out["sent"] = True
    return out


def _log(store: Store, channel: str, n: int, status: str, error: str | None) -> None:
    with store.session() as s:
        s.add(Notification(sent_at=now_utc(), channel=channel, alerts=n, status=status, error=error))
