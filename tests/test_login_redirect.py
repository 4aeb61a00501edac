"""Login ``next``: only a path on this server; anything else goes to the portfolio, and no value
(a CR/LF, a control character, a huge string) makes a server error.

The payloads are the usual open-redirect tricks: scheme-relative and backslash forms, tabs and
line breaks that browsers drop from addresses, other schemes, user-info and encoded forms.
Each answer's ``Location`` is resolved the way a browser resolves it (WHATWG URL parsing, as
far as it matters here: tabs and line breaks removed, leading spaces and controls stripped,
backslashes read as slashes in http(s) addresses) and must stay on this server.
"""
from __future__ import annotations

import re
from urllib.parse import urljoin, urlsplit

import pytest

from tests.test_web_routes import csrf_token

TOKEN = "correct-horse-battery"
HOST = "localhost"

PAYLOADS = [
    "//evil.example", "///evil.example", "////evil.example", "//evil.example/%2F..",
    "/\\evil.example", "\\/evil.example", "\\\\evil.example", "/\\/evil.example", "\\evil.example",
    "/\t/evil.example", "/\n/evil.example", "/\r/evil.example", "/\r\n/evil.example",
    "\t//evil.example", " //evil.example", "\x00//evil.example", "/\x00/evil.example",
    "/\x0b/evil.example", "/\x0c/evil.example", "/\x7f/evil.example", "/\x85/evil.example",
    "https://evil.example", "HTTPS://evil.example", "http:evil.example", "http:/evil.example",
    "https:/\\evil.example", "http://localhost@evil.example", "//localhost@evil.example",
    "javascript:alert(1)", "JaVaScRiPt:alert(1)", "java\tscript:alert(1)", "data:text/html,<b>x</b>",
    "evil.example", "@evil.example", ".evil.example", "%2F%2Fevil.example", "//evil%2Eexample",
    "/imports\r\nSet-Cookie: planted=1", "/imports\nLocation: //evil.example",
    "/" + "a" * 10_000, "",
]

LOCAL = ["/", "/imports", "/meters/KQ-MAIN?tariff=harrowgate_industrial_tou", "/scenarios/a%2Fb",
         "/meters/%C3%BCmlaut", "/%2F/evil.example", "/%09/evil.example", "/.hidden"]


def browser_resolves(location: str, base: str = f"http://{HOST}/login") -> str:
    """The host a browser goes to for ``Location: location`` on a page at ``base``."""
    loc = re.sub(r"[\t\n\r]", "", location).strip("\x00\x01\x02\x03\x04\x05\x06\x07\x08\x0b\x0c\x0e"
                                                  "\x0f\x10\x11\x12\x13\x14\x15\x16\x17\x18\x19\x1a"
                                                  "\x1b\x1c\x1d\x1e\x1f ")
    scheme = urlsplit(loc).scheme.lower() if re.match(r"^[A-Za-z][A-Za-z0-9+.-]*:", loc) else ""
    if scheme in ("", "http", "https"):
        loc = loc.replace("\\", "/")
    target = urlsplit(urljoin(base, loc))
    return target.hostname or f"<{target.scheme}>"


@pytest.fixture
def app(demo_db, tmp_path):
    from auditor.web import create_app

    return create_app({"INSTANCE_PATH": str(tmp_path / "i"), "AUTH_TOKEN": TOKEN}, store=demo_db)


def test_the_browser_model_sees_the_tricks():
    """The resolver above is strict enough to catch what the payloads aim at."""
    assert browser_resolves("//evil.example") == "evil.example"
    assert browser_resolves("/\t/evil.example") == "evil.example"
    assert browser_resolves("/\\evil.example") == "evil.example"
    assert browser_resolves("javascript:alert(1)") == "<javascript>"
    assert browser_resolves("/imports") == HOST


@pytest.mark.parametrize("payload", PAYLOADS, ids=lambda p: repr(p[:40]))
def test_login_never_sends_anyone_off_site(app, payload):
    c = app.test_client()
    page = c.get("/login", query_string={"next": payload})
    assert page.status_code == 200
    hidden = re.search(r'name="next" value="([^"]*)"', page.get_data(as_text=True)).group(1)
    assert hidden == "/", hidden
    r = c.post("/login", data={"csrf_token": csrf_token(page.data), "token": TOKEN, "next": payload})
    assert r.status_code == 302, r.status_code
    assert r.headers["Location"] == "/"  # the portfolio
    assert "planted" not in str(r.headers)
    # a wrong token shows the form again, with the same safe next
    r = c.post("/login", data={"csrf_token": csrf_token(page.data), "token": "nope", "next": payload})
    assert r.status_code == 401


@pytest.mark.parametrize("path", LOCAL)
def test_a_local_path_is_kept(app, path):
    c = app.test_client()
    page = c.get("/login", query_string={"next": path})
    r = c.post("/login", data={"csrf_token": csrf_token(page.data), "token": TOKEN, "next": path})
    assert r.status_code == 302 and r.headers["Location"] == path
    assert browser_resolves(r.headers["Location"]) == HOST


def test_the_login_redirect_carries_the_encoded_path(app):
    """A page asked for without the cookie sends to the login page with ``next`` = that page,
    its encoded characters kept encoded (a meter id holding "%41" stays "%41")."""
    c = app.test_client()
    r = c.get("/meters/a%2541%3Fb", headers={"Accept": "text/html"})
    assert r.status_code == 302
    page = c.get(r.headers["Location"])
    hidden = re.search(r'name="next" value="([^"]*)"', page.get_data(as_text=True)).group(1)
    assert hidden == "/meters/a%2541%3Fb"


@pytest.mark.parametrize("path", ["//evil.example", "//evil.example/x", "/\t/evil.example", "/a\r\nb"])
def test_the_token_redirect_stays_on_site(app, path):
    """``?token=`` reloads the address without the token: never to another host, never a 500."""
    c = app.test_client()
    r = c.get("/", query_string={"token": TOKEN}, environ_overrides={"PATH_INFO": path})
    assert r.status_code in (302, 404), r.status_code
    if r.status_code == 302:
        assert browser_resolves(r.headers["Location"]) == HOST, r.headers["Location"]
    r = c.get("/", headers={"Accept": "text/html"}, environ_overrides={"PATH_INFO": path})
    assert r.status_code in (302, 404) and (r.status_code == 404 or "/login" in r.headers["Location"])
