"""Security of the dashboard: response headers and the access token.

With ``AUTH_TOKEN`` set (``auditor serve --token``, required beyond loopback) every request
needs it: a first ``?token=...`` (or the login form) sets an HTTP-only cookie holding an HMAC of
the token, and the address is reloaded without the token so it does not linger in the history.
"""
from __future__ import annotations

import hashlib
import hmac
import re
from urllib.parse import quote, urlencode, urlsplit

from flask import (
    Blueprint,
    Flask,
    current_app,
    redirect,
    render_template,
    request,
    url_for,
)

bp = Blueprint("auth", __name__)

COOKIE = "auditor_access"
# the login page and its public assets (stylesheet, scripts, plotly.js): no data in them
EXEMPT_ENDPOINTS = {"auth.login", "static", "portfolio.plotly_js"}

# Scripts only from this server (plotly.js is served from the plotly package); chart data
# travel as JSON data blocks, never as inline code. plotly.js writes inline styles and
# <style> elements, hence 'unsafe-inline' for styles only; its image export uses data:/blob:.
CSP = ("default-src 'self'; script-src 'self'; style-src 'self' 'unsafe-inline'; "
       "img-src 'self' data: blob:; font-src 'self' data:; connect-src 'self'; object-src 'none'; "
       "base-uri 'none'; form-action 'self'; frame-ancestors 'none'")


def _cookie_value(token: str) -> str:
    key = current_app.config["SECRET_KEY"].encode()
    return hmac.new(key, token.encode(), hashlib.sha256).hexdigest()


def token_ok(candidate: str | None) -> bool:
    token = current_app.config.get("AUTH_TOKEN")
    return bool(candidate) and hmac.compare_digest(candidate.encode(), token.encode())


def _check_access():
    token = current_app.config.get("AUTH_TOKEN")
    if not token or request.endpoint in EXEMPT_ENDPOINTS:
        return None
    given = request.args.get("token")
    if given is not None:
        if not token_ok(given):
            return render_template("login.html", error="That token is not valid."), 401
        args = [(k, v) for k, v in request.args.items(multi=True) if k != "token"]
        target = local_path(_quoted_path() + (("?" + urlencode(args)) if args else ""))
        resp = redirect(target or url_for("portfolio.index"))
        _set_cookie(resp, token)
        return resp
    cookie = request.cookies.get(COOKIE)
    if cookie and hmac.compare_digest(cookie, _cookie_value(token)):
        return None
    if request.method == "GET" and request.accept_mimetypes.accept_html:
        query = request.query_string.decode("latin-1")
        return redirect(url_for("auth.login", next=_quoted_path() + (f"?{query}" if query else "")))
    return render_template("login.html", error="An access token is required."), 401


def _set_cookie(resp, token: str) -> None:
    resp.set_cookie(COOKIE, _cookie_value(token), httponly=True, samesite="Lax",
                    secure=request.is_secure, path="/")


def _headers(resp):
    h = resp.headers
    h.setdefault("Content-Security-Policy", CSP)
    h.setdefault("X-Content-Type-Options", "nosniff")
    h.setdefault("X-Frame-Options", "DENY")
    h.setdefault("Referrer-Policy", "no-referrer")
    h.setdefault("Cross-Origin-Opener-Policy", "same-origin")
    h.setdefault("Permissions-Policy", "camera=(), microphone=(), geolocation=()")
    if resp.mimetype == "text/html":
        h.setdefault("Cache-Control", "no-store")
    return resp


# C0 and C1 control characters and DEL: browsers drop tabs and line breaks from addresses
# (so "/<TAB>/host" becomes "//host") and CR/LF cannot go into a header
_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f]")
#: characters left as they are when a decoded path is written back into an address
_PATH_SAFE = "/!$&'()*+,;=:@~-._"


def _quoted_path() -> str:
    """The request's path as it travels in an address (a meter id's "%", "?" or "#" encoded)."""
    return quote(request.path, safe=_PATH_SAFE)


def local_path(target: str | None) -> str | None:
    """``target`` when it is a path on this server, else None.

    Accepted: "/" alone, or "/" followed by a character other than "/" and a backslash, with
    no control character, no backslash anywhere, no scheme and no host. Everything else —
    "//host", "/<backslash>host", "/<TAB>/host", "https://host", "javascript:...", a CR/LF — is
    refused.
    """
    if not target or len(target) > 4096 or not target.startswith("/"):
        return None
    if _CONTROL.search(target) or "\\" in target:
        return None
    if len(target) > 1 and target[1] in "/\\":
        return None
    try:
        parts = urlsplit(target)
    except ValueError:
        return None
    if parts.scheme or parts.netloc or not parts.path.startswith("/"):
        return None
    return target


def _safe_next(target: str | None) -> str:
    """Where the login goes next: a local path, else the portfolio."""
    return local_path(target) or url_for("portfolio.index")


@bp.route("/login", methods=["GET", "POST"])
def login():
    if not current_app.config.get("AUTH_TOKEN"):
        return redirect(url_for("portfolio.index"))
    nxt = _safe_next(request.values.get("next"))
    if request.method == "POST":
        if token_ok(request.form.get("token")):
            resp = redirect(nxt)
            _set_cookie(resp, current_app.config["AUTH_TOKEN"])
            return resp
        return render_template("login.html", error="That token is not valid.", next=nxt), 401
    return render_template("login.html", next=nxt)


def init_app(app: Flask) -> None:
    app.before_request(_check_access)
    app.after_request(_headers)
