"""Real local servers for the notification tests: an SMTP server that insists on STARTTLS and a
login (aiosmtpd, with a throw-away CA and server certificate made here with the cryptography
package), and an HTTP server that records what is posted to it."""
from __future__ import annotations

import datetime as dt
import ipaddress
import json
import socket
import ssl
import threading
from dataclasses import dataclass, field
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path

SMTP_USER = "alerts"
SMTP_PASSWORD = "wh1sper-Quay-7731"  # a test secret: must never appear in any output
WEBHOOK_TOKEN = "tok-Kestrel-88f2e1"  # likewise


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def make_certificates(folder: Path) -> tuple[Path, Path, Path]:
    """A CA and a server certificate for localhost / 127.0.0.1 signed by it: (ca, cert, key)."""
    from cryptography import x509
    from cryptography.hazmat.primitives import hashes, serialization
    from cryptography.hazmat.primitives.asymmetric import ec
    from cryptography.x509.oid import ExtendedKeyUsageOID, NameOID

    now = dt.datetime.now(dt.UTC)
    ca_key = ec.generate_private_key(ec.SECP256R1())
    ca_name = x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, "pf-auditor test CA")])
    ca = (x509.CertificateBuilder().subject_name(ca_name).issuer_name(ca_name).public_key(ca_key.public_key())
          .serial_number(x509.random_serial_number()).not_valid_before(now - dt.timedelta(minutes=5))
          .not_valid_after(now + dt.timedelta(days=1))
          .add_extension(x509.BasicConstraints(ca=True, path_length=0), critical=True)
          .add_extension(x509.KeyUsage(digital_signature=True, key_cert_sign=True, crl_sign=True,
                                       content_commitment=False, key_encipherment=False, data_encipherment=False,
                                       key_agreement=False, encipher_only=False, decipher_only=False), critical=True)
          .add_extension(x509.SubjectKeyIdentifier.from_public_key(ca_key.public_key()), critical=False)
          .sign(ca_key, hashes.SHA256()))
    key = ec.generate_private_key(ec.SECP256R1())
    cert = (x509.CertificateBuilder()
            .subject_name(x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, "localhost")]))
            .issuer_name(ca_name).public_key(key.public_key()).serial_number(x509.random_serial_number())
            .not_valid_before(now - dt.timedelta(minutes=5)).not_valid_after(now + dt.timedelta(days=1))
            .add_extension(x509.SubjectAlternativeName([x509.DNSName("localhost"),
                                                        x509.IPAddress(ipaddress.ip_address("127.0.0.1"))]),
                           critical=False)
            .add_extension(x509.BasicConstraints(ca=False, path_length=None), critical=True)
            .add_extension(x509.ExtendedKeyUsage([ExtendedKeyUsageOID.SERVER_AUTH]), critical=False)
            .add_extension(x509.AuthorityKeyIdentifier.from_issuer_public_key(ca_key.public_key()), critical=False)
            .sign(ca_key, hashes.SHA256()))
    paths = (folder / "ca.pem", folder / "server.pem", folder / "server.key")
    paths[0].write_bytes(ca.public_bytes(serialization.Encoding.PEM))
    paths[1].write_bytes(cert.public_bytes(serialization.Encoding.PEM))
    paths[2].write_bytes(key.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
                                           serialization.NoEncryption()))
    return paths


@dataclass
class Received:
    sender: str
    recipients: list[str]
    data: bytes
    tls: bool
    login: str | None


@dataclass
class SmtpServer:
    host: str
    port: int
    ca_file: Path
    messages: list[Received] = field(default_factory=list)
    logins_refused: int = 0


class _Handler:
    def __init__(self, box: SmtpServer):
        self.box = box

    async def handle_DATA(self, server, session, envelope):  # noqa: N802 - aiosmtpd's hook name
        auth = getattr(session, "auth_data", None)
        login = auth.login.decode() if session.authenticated and hasattr(auth, "login") else None
        self.box.messages.append(Received(envelope.mail_from, list(envelope.rcpt_tos), envelope.original_content
                                          or envelope.content, session.ssl is not None, login))
        return "250 OK"


def start_smtp(folder: Path):
    """Start the SMTP server; returns (SmtpServer, stop function)."""
    from aiosmtpd.controller import Controller
    from aiosmtpd.smtp import AuthResult, LoginPassword

    ca, cert, key = make_certificates(folder)
    context = ssl.create_default_context(ssl.Purpose.CLIENT_AUTH)
    context.load_cert_chain(cert, key)
    box = SmtpServer("localhost", free_port(), ca)

    def authenticate(server, session, envelope, mechanism, auth_data):
        if (isinstance(auth_data, LoginPassword) and auth_data.login.decode() == SMTP_USER
                and auth_data.password.decode() == SMTP_PASSWORD):
            return AuthResult(success=True, auth_data=auth_data)
        box.logins_refused += 1
        return AuthResult(success=False, handled=False)

    controller = Controller(_Handler(box), hostname="127.0.0.1", port=box.port, tls_context=context,
                            require_starttls=True, authenticator=authenticate, auth_require_tls=True,
                            server_hostname="localhost", ready_timeout=10)
    controller.start()
    return box, controller.stop


@dataclass
class HttpServer:
    url: str
    posts: list[dict] = field(default_factory=list)
    fail_next: int = 0  # answer 500 to this many requests first
    status: int = 204
    delay: float = 0.0  # seconds to wait before answering
    lock: threading.Lock = field(default_factory=threading.Lock)


def start_http():
    """Start the webhook receiver; returns (HttpServer, stop function)."""
    box = HttpServer("")

    class Handler(BaseHTTPRequestHandler):
        def do_POST(self):  # noqa: N802 - http.server's hook name
            body = self.rfile.read(int(self.headers.get("Content-Length", 0)))
            if box.delay:
                import time

                time.sleep(box.delay)
            with box.lock:
                fail = box.fail_next > 0
                if fail:
                    box.fail_next -= 1
                else:
                    box.posts.append({"path": self.path, "headers": dict(self.headers), "body": body,
                                      "json": json.loads(body)})
            self.send_response(500 if fail else box.status)
            self.send_header("Content-Length", "0")
            self.end_headers()

        def log_message(self, *args):  # keep the test output quiet
            pass

    server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
    box.url = f"http://127.0.0.1:{server.server_address[1]}/hooks/pf?key=abc"
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()

    def stop():
        server.shutdown()
        server.server_close()
        thread.join(timeout=5)

    return box, stop


def settings_file(folder: Path, smtp: SmtpServer, http: HttpServer, retries: int = 2) -> Path:
    """A monitoring settings file for the two servers; the secrets stay in the environment."""
    p = folder / "alerts.toml"
    p.write_text(f"""
[checks]
stale_hours = 36

[email]
host = "{smtp.host}"
port = {smtp.port}
starttls = true
username = "{SMTP_USER}"
password_env = "TEST_SMTP_SECRET"
from = "pf-auditor <alerts@kestrel-quay.invalid>"
to = ["facilities@kestrel-quay.invalid", "energy@kestrel-quay.invalid"]
timeout_seconds = 10
ca_file = "{smtp.ca_file}"

[webhook]
url = "{http.url}"
token_env = "TEST_HOOK_SECRET"
timeout_seconds = 5
retries = {retries}
retry_delay_seconds = 0.05
""", encoding="utf-8")
    return p


SECRET_ENV = {"TEST_SMTP_SECRET": SMTP_PASSWORD, "TEST_HOOK_SECRET": WEBHOOK_TOKEN}
