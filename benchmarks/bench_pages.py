"""Server time of the dashboard pages on a meter-year (the demo's KQ-MAIN: 34,938 intervals).

Builds the demo database in a temporary folder (or uses ``--db URL``), then times requests
through the WSGI app (Flask's test client: server time only, no network, no browser drawing):

* the meter page and a saved scenario page, first request (cold: store read, audit and chart
  data computed) and the median of ``--repeat`` further requests (cached per data version);
* the scenario form POST of a fixed bank, cold and cached;
* the exports (CSV, XLSX, HTML report).

Prints each median against the 300 ms budget as a ratio (< 1 is within budget).

    python benchmarks/bench_pages.py [--repeat N] [--db URL]
"""
from __future__ import annotations

import argparse
import re
import statistics
import tempfile
import time
from pathlib import Path
from urllib.parse import quote

BUDGET_MS = 300.0
METER = "KQ-MAIN"
SCENARIO = "bench fixed 150"


def timed(fn) -> float:
    t0 = time.perf_counter()
    r = fn()
    dt = (time.perf_counter() - t0) * 1000.0
    assert r.status_code in (200, 302), (r.status_code, r.get_data(as_text=True)[:500])
    return dt


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=15)
    ap.add_argument("--db", help="database URL with the demo loaded (default: build one in a temp dir)")
    args = ap.parse_args()

    from auditor.services.cache import clear_caches
    from auditor.services.correction import SizeRequest, save_scenario, size_meter
    from auditor.services.demo import DEMO_TARIFF, load_demo
    from auditor.store import open_store
    from auditor.web import create_app

    tmp = Path(tempfile.mkdtemp(prefix="bench-pages-"))
    url = args.db or f"sqlite:///{tmp / 'demo.sqlite3'}"
    store = open_store(url)
    if not args.db:
        t0 = time.perf_counter()
        load_demo(store)
        print(f"demo database built in {time.perf_counter() - t0:.1f} s")
    save_scenario(store, SCENARIO, size_meter(store, SizeRequest(meter=METER, tariff=DEMO_TARIFF, fixed_kvar=150.0)))
    app = create_app({"INSTANCE_PATH": str(tmp / "instance")}, store=store)
    client = app.test_client()

    pages = {
        "meter page": f"/meters/{METER}?tariff={DEMO_TARIFF}",
        "saved scenario page": f"/scenarios/{quote(SCENARIO)}",
        "portfolio": "/",
        "export CSV": f"/export/{METER}.csv?tariff={DEMO_TARIFF}",
        "export XLSX": f"/export/{METER}.xlsx?scenario={quote(SCENARIO)}",
        "export HTML report": f"/export/{METER}.html?scenario={quote(SCENARIO)}",
    }
    rows = []
    clear_caches()
    for name, path in pages.items():
        cold = timed(lambda path=path: client.get(path))
        warm = [timed(lambda path=path: client.get(path)) for _ in range(args.repeat)]
        rows.append((name, cold, statistics.median(warm)))

    page = client.get(f"/scenario?meter={METER}").get_data(as_text=True)
    token = re.search(r'name="csrf_token" type="hidden" value="([^"]+)"', page).group(1)
    form = {"csrf_token": token, "meter": METER, "tariff": DEMO_TARIFF, "target_pf": "0.95",
            "design": "fixed", "fixed_kvar": "125", "detuning": "0"}
    cold = timed(lambda: client.post("/scenario", data=form))
    warm = [timed(lambda: client.post("/scenario", data=form)) for _ in range(args.repeat)]
    rows.append(("scenario form POST (fixed bank)", cold, statistics.median(warm)))
    form_opt = dict(form, design="optimise")
    cold = timed(lambda: client.post("/scenario", data=form_opt))
    warm = [timed(lambda: client.post("/scenario", data=form_opt)) for _ in range(args.repeat)]
    rows.append(("scenario form POST (optimiser)", cold, statistics.median(warm)))

    print(f"\nserver time per request, {args.repeat} repeats after the first (budget {BUDGET_MS:.0f} ms)")
    print(f"{'request':<34} {'first ms':>10} {'median ms':>10} {'median/budget':>14}")
    for name, c, m in rows:
        print(f"{name:<34} {c:>10.1f} {m:>10.1f} {m / BUDGET_MS:>14.2f}")
    store.dispose()


if __name__ == "__main__":
    main()
