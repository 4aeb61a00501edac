"""Tariffs from the dashboard and by path: the Tariffs page uploads and edits a tariff with the
command line's validation messages and keeps it in the instance folder; ``auditor serve
--tariff`` takes a file or a known name and refuses anything else with a usage error (exit 2)."""
from __future__ import annotations

import io
import re

import pytest
from markupsafe import escape

from auditor.commands.serve import tariff_config
from auditor.errors import TariffError, UsageError
from auditor.services.tariff_files import check_tariff_text, delete_tariff, save_tariff
from auditor.tariffs import EXAMPLES_DIR, load_tariff

GOOD = ('name = "Quayside test rate"\ncurrency = "EUR"\n[energy]\nprice_per_kwh = 0.11\n[demand]\n'
        'price_per_kw = 8.0\n[[reactive]]\nkind = "kvarh_excess"\ntan_phi_limit = 0.4\nprice_per_kvarh = 0.02\n')
MISSPELT = GOOD.replace("tan_phi_limit", "tan_phi_limt")
SYNTAX = GOOD.replace("price_per_kw = 8.0", "price_per_kw = = 8.0")


def token(html: str, prefix: str) -> str:
    m = re.search(rf'id="{prefix}-csrf_token" name="{prefix}-csrf_token" type="hidden" value="([^"]+)"', html) or \
        re.search(rf'name="{prefix}-csrf_token" type="hidden" value="([^"]+)"', html)
    assert m, f"no CSRF token for {prefix}"
    return m.group(1)


@pytest.fixture
def app(demo_db, tmp_path):
    from auditor.web import create_app

    return create_app({"INSTANCE_PATH": str(tmp_path / "instance"), "TESTING": True}, store=demo_db)


@pytest.fixture
def client(app):
    return app.test_client()


def own(tmp_path):
    return tmp_path / "instance" / "tariffs"


def upload(client, body: bytes, filename: str, name: str = ""):
    html = client.get("/tariffs").get_data(as_text=True)
    return client.post("/tariffs/upload", data={"upload-csrf_token": token(html, "upload"), "upload-name": name,
                                                "upload-file": (io.BytesIO(body), filename)},
                       content_type="multipart/form-data")


# --------------------------------------------------------------------------------------------
# the service
# --------------------------------------------------------------------------------------------
def test_check_gives_the_command_lines_message_without_the_server_path(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text(MISSPELT, encoding="utf-8")
    with pytest.raises(TariffError) as cli_side:
        load_tariff(bad)
    with pytest.raises(TariffError) as page_side:
        check_tariff_text(MISSPELT, "mine.toml")
    assert page_side.value.key == cli_side.value.key == "reactive[0].tan_phi_limt"
    assert str(cli_side.value).replace(str(bad), "mine.toml") == str(page_side.value)
    assert "/tmp" not in str(page_side.value) and "auditor-tariff-" not in str(page_side.value)
    with pytest.raises(TariffError) as syntax:
        check_tariff_text(SYNTAX, "mine.toml")
    assert "line 6, column 16" in str(syntax.value) and syntax.value.key == "(syntax)"


def test_save_writes_only_good_tariffs_under_a_safe_name(tmp_path):
    path, tariff = save_tariff(tmp_path, "quay_rate", GOOD)
    assert path == tmp_path / "quay_rate.toml" and tariff.name == "Quayside test rate"
    with pytest.raises(TariffError):
        save_tariff(tmp_path, "quay_rate", MISSPELT)
    assert path.read_text(encoding="utf-8") == GOOD  # the good file is untouched
    for bad_name in ("../escape", "a/b", "", ".hidden", "x" * 65, "name with space"):
        with pytest.raises(UsageError):
            save_tariff(tmp_path, bad_name, GOOD)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["quay_rate.toml"]
    delete_tariff(tmp_path, "quay_rate")
    with pytest.raises(UsageError):
        delete_tariff(tmp_path, "quay_rate")


# --------------------------------------------------------------------------------------------
# the page
# --------------------------------------------------------------------------------------------
def test_upload_keeps_the_tariff_and_every_page_offers_it(client, tmp_path):
    r = upload(client, GOOD.encode(), "quay rate.toml", name="quay_rate")
    assert r.status_code == 302
    assert (own(tmp_path) / "quay_rate.toml").read_text(encoding="utf-8") == GOOD
    for page in ("/", "/bills", "/meters/KQ-DOCKS"):
        html = client.get(page).get_data(as_text=True)
        assert '<option value="quay_rate"' in html, page
    html = client.get("/?tariff=quay_rate").get_data(as_text=True)
    assert "Quayside test rate" in html


def test_upload_without_a_name_takes_the_files(client, tmp_path):
    assert upload(client, GOOD.encode(), "harbour-2026.toml").status_code == 302
    assert (own(tmp_path) / "harbour-2026.toml").is_file()


@pytest.mark.parametrize("body, said", [
    (MISSPELT, "tariff key 'reactive[0].tan_phi_limt': unknown key; did you mean 'tan_phi_limit'?"),
    (GOOD + "tan_phi_limt = 0.5\n", "tariff key 'reactive[0].tan_phi_limt': unknown key"),
    (SYNTAX, "TOML syntax error at line 6, column 16"),
    (GOOD.replace('"EUR"', '"euro"'), "tariff key 'currency'"),
])
def test_bad_upload_shows_the_key_and_keeps_nothing(client, tmp_path, body, said):
    r = upload(client, body.encode(), "mine.toml")
    html = r.get_data(as_text=True)
    assert r.status_code == 422 and str(escape(said)) in html
    assert "mine.toml" in html and "/tmp" not in html and "auditor-tariff-" not in html
    assert not own(tmp_path).exists() or list(own(tmp_path).iterdir()) == []


def test_editor_changes_a_tariff_and_reports_errors_in_place(client, tmp_path):
    html = client.get("/tariffs/edit").get_data(as_text=True)
    assert 'name = &#34;My utility' in html or "name = &quot;My utility" in html
    t = token(html, "tariff")
    r = client.post("/tariffs/edit", data={"tariff-csrf_token": t, "tariff-name": "harbour", "tariff-source": GOOD})
    assert r.status_code == 302
    changed = GOOD.replace("0.11", "0.13")
    html = client.get("/tariffs/edit?name=harbour").get_data(as_text=True)
    assert "Quayside test rate" in html and "Edit tariff harbour" in html
    r = client.post("/tariffs/edit", data={"tariff-csrf_token": t, "tariff-name": "harbour",
                                           "tariff-source": changed.replace("\n", "\r\n")})
    assert r.status_code == 302
    assert load_tariff(own(tmp_path) / "harbour.toml").energy.price_per_kwh == 0.13
    r = client.post("/tariffs/edit", data={"tariff-csrf_token": t, "tariff-name": "harbour", "tariff-source": MISSPELT})
    page = r.get_data(as_text=True)
    assert r.status_code == 422 and "reactive[0].tan_phi_limt" in page and "harbour.toml" in page
    assert "tan_phi_limt" in page  # the text typed comes back to be corrected
    assert load_tariff(own(tmp_path) / "harbour.toml").energy.price_per_kwh == 0.13
    r = client.post("/tariffs/edit", data={"tariff-csrf_token": t, "tariff-name": "../x", "tariff-source": GOOD})
    assert r.status_code == 422 and "tariff name" in r.get_data(as_text=True)


def test_a_copy_of_an_example_overrides_it_and_can_be_removed(client, tmp_path):
    example = (EXAMPLES_DIR / "millbrook_commercial_pf.toml").read_text(encoding="utf-8")
    html = client.get("/tariffs/edit?name=millbrook_commercial_pf").get_data(as_text=True)
    assert "A copy of millbrook_commercial_pf" in html and "Millbrook General Service PF" in html
    t = token(html, "tariff")
    mine = example.replace('name = "Millbrook General Service PF"', 'name = "Millbrook as negotiated"')
    assert client.post("/tariffs/edit", data={"tariff-csrf_token": t, "tariff-name": "millbrook_commercial_pf",
                                              "tariff-source": mine}).status_code == 302
    assert "Millbrook as negotiated" in client.get("/?tariff=millbrook_commercial_pf").get_data(as_text=True)
    assert (EXAMPLES_DIR / "millbrook_commercial_pf.toml").read_text(encoding="utf-8") == example
    html = client.get("/tariffs").get_data(as_text=True)
    d = token(html, "delete")
    assert client.post("/tariffs/millbrook_commercial_pf/delete", data={"delete-csrf_token": d}).status_code == 302
    assert "Millbrook General Service PF" in client.get("/?tariff=millbrook_commercial_pf").get_data(as_text=True)
    # a shipped example itself cannot be removed
    r = client.post("/tariffs/tidewater_banded_kva/delete", data={"delete-csrf_token": d})
    assert r.status_code == 400 and (EXAMPLES_DIR / "tidewater_banded_kva.toml").is_file()


def test_tariff_forms_need_csrf(client, tmp_path):
    r = client.post("/tariffs/edit", data={"tariff-name": "x", "tariff-source": GOOD})
    assert r.status_code == 400
    r = client.post("/tariffs/upload", data={"upload-file": (io.BytesIO(GOOD.encode()), "x.toml")},
                    content_type="multipart/form-data")
    assert r.status_code == 400
    assert not own(tmp_path).exists() or list(own(tmp_path).iterdir()) == []


# --------------------------------------------------------------------------------------------
# auditor serve --tariff
# --------------------------------------------------------------------------------------------
def test_serve_tariff_by_path_is_offered_by_its_name(demo_db, tmp_path):
    from auditor.web import create_app

    path = tmp_path / "elsewhere" / "quay_contract.toml"
    path.parent.mkdir()
    path.write_text(GOOD, encoding="utf-8")
    cfg = tariff_config(str(path), tmp_path / "instance")
    assert cfg == {"TARIFF_FILES": [str(path.resolve())], "DEFAULT_TARIFF": "quay_contract"}
    app = create_app({"INSTANCE_PATH": str(tmp_path / "instance"), "TESTING": True, **cfg}, store=demo_db)
    html = app.test_client().get("/").get_data(as_text=True)
    assert "Quayside test rate" in html  # the pages open with it
    assert '<option value="quay_contract" selected' in html
    assert str(path.parent) not in app.test_client().get("/tariffs").get_data(as_text=True)
    # the dashboard will not keep an edited copy under the served file's name
    client = app.test_client()
    t = token(client.get("/tariffs/edit").get_data(as_text=True), "tariff")
    r = client.post("/tariffs/edit", data={"tariff-csrf_token": t, "tariff-name": "quay_contract",
                                           "tariff-source": GOOD})
    assert r.status_code == 422 and "another name" in r.get_data(as_text=True)


def test_serve_tariff_by_name(tmp_path):
    assert tariff_config("tidewater_banded_kva", tmp_path) == {"DEFAULT_TARIFF": "tidewater_banded_kva"}
    save_tariff(tmp_path / "tariffs", "kept_here", GOOD)
    assert tariff_config("kept_here", tmp_path) == {"DEFAULT_TARIFF": "kept_here"}


@pytest.mark.parametrize("given, said", [
    ("no_such_tariff", "no tariff of that name"),
    ("missing/file.toml", "no such tariff file"),
    ("BAD", "tariff key 'reactive[0].tan_phi_limt': unknown key; did you mean 'tan_phi_limit'?"),
])
def test_serve_bad_tariff_is_a_usage_error(tmp_path, given, said):
    from test_cli_grammar import invoke

    if given == "BAD":
        bad = tmp_path / "bad.toml"
        bad.write_text(MISSPELT, encoding="utf-8")
        given = str(bad)
    r = invoke("serve", "--port", "0", "--tariff", given, db=f"sqlite:///{tmp_path / 'x.sqlite3'}")
    assert r.exit_code == 2, r.output
    assert said in r.output and "Dashboard:" not in r.output
