"""Bills a manager recognises: the utility's account and invoice numbers travel from the CSV or
the dashboard's form through the store (migration 0008) into the list, the check and the billing
query; money shows to the cent; a finding's cause has one name in the summary and the detail."""
from __future__ import annotations

import re

import pytest

from auditor.bills import CAUSE_LABELS, CAUSES
from auditor.errors import InputError
from auditor.ingest.pipeline import ImportOptions
from auditor.services.bills import add_bill, check_bills, dispute_summary, import_bills, list_bills
from auditor.services.ingest import import_files
from tests.audit_helpers import TZ
from tests.test_bills_service import HEADER, JULY, JUNE
from tests.test_bills_service import _meter_csv as meter_csv
from tests.test_bills_web import TARIFF_TOML

HEADER = HEADER + ",account,invoice"
# July billed with every quantity and charge 1.25 times the metered one (a wrong multiplier)
JULY_OVER = "M1,2025-07-01,2025-08-01,93000,55800,125,145.78,0.86,372.00,10922.00"
assert JULY.startswith("M1,2025-07-01,2025-08-01,74400,44640,100,")


def tariff_file(folder):
    path = folder / "numbers.toml"
    path.write_text(TARIFF_TOML, encoding="utf-8")
    return path


@pytest.fixture
def loaded(store, tmp_path):
    import_files(store, [meter_csv(tmp_path / "m1.csv")], ImportOptions(site="Test site", timezone=TZ))
    return store


def write(tmp_path, *rows, header=HEADER, name="bills.csv"):
    p = tmp_path / name
    p.write_text("\n".join([header, *rows]) + "\n", encoding="utf-8")
    return p


def test_numbers_are_stored_listed_and_kept_as_printed(loaded, tmp_path):
    import_bills(loaded, write(tmp_path, JUNE + ",0042-77,INV 2025/06", JULY_OVER + ",0042-77,INV 2025/07"))
    rows = list_bills(loaded, "M1")
    assert [(b["account"], b["invoice"]) for b in rows] == [("0042-77", "INV 2025/06"), ("0042-77", "INV 2025/07")]
    # a later file without the columns keeps the numbers; one with another invoice number updates it
    res = import_bills(loaded, write(tmp_path, JUNE.replace("8488.00", "8500.00"),
                                     header=HEADER.rsplit(",", 2)[0], name="reissue.csv"))
    assert res["updated"][0]["changes"] == {"total": {"was": 8488.0, "now": 8500.0}}
    assert list_bills(loaded, "M1")[0]["invoice"] == "INV 2025/06"
    res = import_bills(loaded, write(tmp_path, JUNE.replace("8488.00", "8500.00") + ",0042-77,INV 2025/06-R",
                                     name="reissue2.csv"))
    assert res["updated"][0]["changes"] == {"invoice": {"was": "INV 2025/06", "now": "INV 2025/06-R"}}


@pytest.mark.parametrize("cells, column, said", [
    ("," + "9" * 65 + ",X1", "account", "longer than 64"),
    (",A1,INV\x07", "invoice", "control character"),
])
def test_bad_numbers_are_located(loaded, tmp_path, cells, column, said):
    with pytest.raises(InputError) as exc:
        import_bills(loaded, write(tmp_path, JUNE + cells))
    (problem,) = exc.value.problems
    assert (problem.line, problem.column) == (2, column) and said in problem.message
    assert list_bills(loaded) == []


def test_manual_entry_takes_numbers(loaded):
    add_bill(loaded, "M1", "2025-06-01", "2025-07-01", kwh=72000, total=8488, account=" 0042-77 ", invoice="")
    (b,) = list_bills(loaded, "M1")
    assert (b["account"], b["invoice"], b["source"]) == ("0042-77", None, "manual entry")


def test_check_and_billing_query_carry_numbers_peak_times_and_one_cause_name(loaded, tmp_path):
    import_bills(loaded, write(tmp_path, JUNE + ",0042-77,INV-06", JULY_OVER + ",0042-77,INV-07"))
    d = check_bills(loaded, "M1", tariff_file(tmp_path))
    july = d["bills"][1]
    assert (july["account"], july["invoice"]) == ("0042-77", "INV-07")
    # the summary's causes are the findings' causes, by the same names
    causes = {f["cause_label"] for f in d["findings"] if f["period_start"] == "2025-07-01"}
    assert set(july["cause_labels"]) == causes
    assert causes <= set(CAUSE_LABELS.values()) and set(CAUSE_LABELS) == {*CAUSES, None}
    # the computed peak's time: the first hour of July at the constant load, local (CEST)
    peak = next(f for f in d["findings"] if f["field"] == "peak_kw")
    assert peak["expected_at"] == "2025-07-01T00:00:00+02:00"
    text = dispute_summary(d, "text")
    assert "Account 0042-77." in text and "(invoice INV-07)" in text
    assert "with the computed peak at 2025-07-01 00:00 CEST" in text
    assert f"Probable cause: {peak['cause_label']}." in text
    html = dispute_summary(d, "html")
    assert "<td>INV-07</td>" in html and "peak at 2025-07-01 00:00 CEST" in html
    # money to the cent everywhere in the letter
    for amount in re.findall(r"in question ([\d,.-]+) EUR", text):
        assert re.fullmatch(r"-?[\d,]+\.\d\d", amount), amount


def test_cli_lists_numbers_and_money_to_the_cent(loaded, tmp_path):
    from test_cli_grammar import invoke

    import_bills(loaded, write(tmp_path, JUNE + ",0042-77,INV-06"))
    out = invoke("bills", "list", db=loaded.url).output
    head, _, row = out.splitlines()
    assert head.split()[:3] == ["meter", "account", "invoice"]
    assert "0042-77" in row and "INV-06" in row and "288.00" in row and "8,488.00" in row
    assert "source" not in head and "source" in invoke("bills", "list", "--wide", db=loaded.url).output


def test_web_form_enters_numbers(loaded, tmp_path):
    from auditor.web import create_app

    inst = tmp_path / "instance"
    (inst / "tariffs").mkdir(parents=True)
    tariff_file(inst / "tariffs")
    c = create_app({"TESTING": True, "INSTANCE_PATH": str(inst), "DEFAULT_TARIFF": "numbers"}, store=loaded).test_client()
    html = c.get("/bills?meter=M1").get_data(as_text=True)
    token = re.search(r'name="bill-csrf_token" type="hidden" value="([^"]+)"', html).group(1)
    r = c.post("/bills/add?tariff=numbers", data={
        "bill-csrf_token": token, "bill-meter": "M1", "bill-period_start": "2025-06-01",
        "bill-period_end": "2025-07-01", "bill-account": "0042-77", "bill-invoice": "INV-06", "bill-total": "9000"},
        follow_redirects=True)
    page = r.get_data(as_text=True)
    assert r.status_code == 200 and "invoice INV-06" in page and "account 0042-77" in page
    assert "9,000.00" in page  # billed total to the cent
    # the Bills page offers the same tariff list as the other pages (no free-text box)
    assert '<select id="tariff" name="tariff"' in page and '<input name="tariff"' not in page
