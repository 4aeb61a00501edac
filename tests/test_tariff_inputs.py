"""Bad tariff files: every one is a one-line error naming the key (and its line), never a
traceback, never numbers.

A generator takes the shipped example tariffs and spoils one value at a time (out-of-range,
non-finite, wrong type, deeply nested), plus whole-file damage (nesting 5,000 deep, binary
bytes, truncation). Prices and ratios have documented ranges (DEVELOPERS.md, "Ranges") that keep
every total finite.
"""
from __future__ import annotations

import os
import re
import subprocess
import sys

import numpy as np
import pytest

from auditor.audit import audit
from auditor.errors import InputError, TariffError
from auditor.tariffs import EXAMPLES_DIR, load_tariff
from auditor.tariffs.loader import MAX_PRICE_PER_DEMAND, MAX_PRICE_PER_UNIT
from tests.audit_helpers import TZ, june_frame, tariff

NUMBER_LINE = re.compile(r"^(\s*)([a-z_]+)(\s*=\s*)(-?[0-9][0-9_.eE+-]*)(\s*(?:#.*)?)$", re.M)
BAD_VALUES = ["1e308", "-1e308", "inf", "-inf", "nan", "-0.5", "1e19", '"12"', "true", "[1, 2]", "{ a = 1 }",
              "[" * 40 + "]" * 40]


def spoiled_examples():
    """(name, text, key name) for every numeric value of every example, spoiled each way."""
    for path in sorted(EXAMPLES_DIR.glob("*.toml")):
        text = path.read_text(encoding="utf-8")
        for m in NUMBER_LINE.finditer(text):
            for bad in BAD_VALUES:
                spoiled = text[: m.start(4)] + bad + text[m.end(4):]
                yield f"{path.stem}:{m.group(2)}={bad[:12]}", spoiled, m.group(2)


CASES = list(spoiled_examples())


def test_the_generator_covers_every_example_value():
    assert len(CASES) >= 300
    assert {c[2] for c in CASES} >= {"price_per_kwh", "price_per_kw", "tan_phi_limit", "ratchet_percent",
                                      "allowance_ratio", "percent_per_hundredth", "base_pf", "min_pf"}


def test_every_spoiled_value_is_a_located_one_line_error(tmp_path):
    """Every spoiling is refused (none of the bad values is inside any key's range), naming the
    spoiled key and the file's line, in one line."""
    rejected = accepted = 0
    for name, text, key in CASES:
        p = tmp_path / "t.toml"
        p.write_text(text, encoding="utf-8")
        try:
            t = load_tariff(p)
        except TariffError as exc:
            msg = str(exc)
            assert "\n" not in msg, (name, msg)
            assert exc.key == "(syntax)" or exc.key.split(".")[-1] == key or key in exc.key, (name, msg)
            assert exc.line is not None or exc.key == "(syntax)", (name, msg)
            assert "line " in msg, (name, msg)
            rejected += 1
        else:
            accepted += 1
            r = audit(june_frame(), t, tz=TZ, interval_minutes=60)
            assert np.isfinite(r.total), name
    assert (rejected, accepted) == (len(CASES), 0)


def test_a_price_of_1e308_is_refused_naming_the_key(tmp_path):
    p = tmp_path / "t.toml"
    p.write_text('name = "X"\ncurrency = "EUR"\n[energy]\nprice_per_kwh = 1e308\n', encoding="utf-8")
    with pytest.raises(TariffError) as e:
        load_tariff(p)
    assert e.value.key == "energy.price_per_kwh" and e.value.line == 4
    assert f"at most {MAX_PRICE_PER_UNIT:g}" in str(e.value)


def test_array_nested_5000_deep_is_a_located_error(tmp_path):
    p = tmp_path / "deep.toml"
    p.write_text('name = "X"\ncurrency = "EUR"\n[energy]\nprice_per_kwh = 0.1\nextra = '
                 + "[" * 5000 + "]" * 5000 + "\n", encoding="utf-8")
    with pytest.raises(TariffError) as e:
        load_tariff(p)
    assert e.value.key == "(syntax)" and e.value.line == 5
    assert "nested more than 16 deep" in str(e.value) and "\n" not in str(e.value)
    q = tmp_path / "deep_table.toml"
    q.write_text('name = "X"\ncurrency = "EUR"\n[energy]\nprice_per_kwh = { a = ' + "{ b = " * 3000 + "1"
                 + " }" * 3001 + "\n", encoding="utf-8")
    with pytest.raises(TariffError) as e:
        load_tariff(q)
    assert e.value.line == 4


def test_the_command_line_says_one_line_and_exits_1(tmp_path):
    p = tmp_path / "deep.toml"
    p.write_text('name = "X"\ncurrency = "EUR"\n[energy]\nprice_per_kwh = ' + "[" * 5000 + "]" * 5000 + "\n",
                 encoding="utf-8")
    env = dict(os.environ, AUDITOR_DB_URL=f"sqlite:///{tmp_path / 'empty.sqlite3'}")
    r = subprocess.run([sys.executable, "-m", "auditor", "audit", "--meter", "M1", "--tariff", str(p)],
                       capture_output=True, text=True, env=env, timeout=120)
    assert r.returncode == 1, (r.stdout, r.stderr)
    assert "Traceback" not in r.stderr and "line 4" in r.stderr and len(r.stderr.strip().splitlines()) == 1


@pytest.mark.parametrize("damage", [b"\xff\xfe\x00garbage", b'name = "X"\ncurrency = "EU', b"[[reactive]\n",
                                    b'name = "X"\n\x00\x01\n'])
def test_damaged_files(tmp_path, damage):
    p = tmp_path / "d.toml"
    p.write_bytes(damage)
    with pytest.raises(TariffError) as e:
        load_tariff(p)
    assert "\n" not in str(e.value)


def test_totals_stay_finite_at_the_top_of_every_range():
    """Every price at its maximum and a month of 1e6 kWh an hour (720 hours, 7.2e8 kWh) still
    gives finite totals; quantities beyond any meter are refused rather than priced as inf."""
    t = tariff([{"kind": "kvarh_excess", "tan_phi_limit": 0, "price_per_kvarh": MAX_PRICE_PER_UNIT},
                {"kind": "kvar_demand", "allowance_ratio": 0, "price_per_kvar": MAX_PRICE_PER_DEMAND}],
               energy={"price_per_kwh": MAX_PRICE_PER_UNIT},
               demand={"basis": "kva", "price_per_kw": MAX_PRICE_PER_DEMAND})
    f = june_frame(kwh=1e6, kvarh_lag=1e6)
    r = audit(f, t, tz=TZ, interval_minutes=60)
    assert np.isfinite(r.total) and r.total > 1e15
    with pytest.raises(InputError, match="not a finite amount"):
        audit(june_frame(kwh=1e300, kvarh_lag=1e300), t, tz=TZ, interval_minutes=60)
