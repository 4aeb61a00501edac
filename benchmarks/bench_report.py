"""Time to produce the case document of a meter-year (the demo's KQ-MAIN: 34,938 intervals).

Builds the demo database in a temporary folder (or uses ``--db URL``), saves an automatic bank
scenario and times, ``--repeat`` times each, in one run:

* gathering the case (saved scenario, chart data of the meter-year);
* the HTML document (every section, plotly.js inline);
* the page-per-section PDF, printed by headless Chromium (whole: HTML + Chromium);
* the XLSX workbook;
* beside them, the floor: the same Chromium printing a one-line page (its start-up and print).

Prints medians and the PDF's ratio to its 10 s budget (< 1 is within budget).

    python benchmarks/bench_report.py [--repeat N] [--db URL] [--paper a4|letter]
"""
from __future__ import annotations

import argparse
import statistics
import tempfile
import time
from pathlib import Path

BUDGET_S = 10.0
SCENARIO = "bench automatic 6x25"


def median_of(fn, repeat: int) -> tuple[float, object]:
    times, out = [], None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--db", help="an existing database with the demo data (default: build it)")
    ap.add_argument("--paper", default="a4", choices=["a4", "letter"])
    args = ap.parse_args()

    from auditor.services import report as rp
    from auditor.services.correction import SizeRequest, save_scenario, size_meter
    from auditor.services.demo import DEMO_TARIFF, load_demo
    from auditor.store import open_store

    with tempfile.TemporaryDirectory() as tmp:
        store = open_store(args.db or f"sqlite:///{Path(tmp) / 'bench.sqlite3'}")
        if not args.db:
            load_demo(store)
        save_scenario(store, SCENARIO, size_meter(store, SizeRequest(meter="KQ-MAIN", tariff=DEMO_TARIFF,
                                                                      steps="6x25")))
        t_case, report = median_of(lambda: rp.build_case(store, SCENARIO), args.repeat)
        t_html, html = median_of(lambda: rp.render_html(report, paper=args.paper), args.repeat)
        t_pdf, pdf = median_of(lambda: rp.render_pdf(report, args.paper), args.repeat)
        t_xlsx, xlsx = median_of(lambda: rp.render_xlsx(report), args.repeat)
        from auditor.services.pdf import html_to_pdf

        t_floor, _ = median_of(lambda: html_to_pdf("<!doctype html><p>one line</p>", args.paper), args.repeat)
        from io import BytesIO

        from pypdf import PdfReader

        pages = len(PdfReader(BytesIO(pdf)).pages)
        store.dispose()
    print(f"case document of a meter-year ({len(report.audit['periods'])} billing periods), medians of {args.repeat}:")
    print(f"  gather the case (scenario, chart data)   {t_case:7.2f} s")
    print(f"  HTML ({len(html) / 1e6:.1f} MB)                          {t_html:7.2f} s")
    print(f"  PDF ({pages} pages, {len(pdf) / 1e6:.2f} MB, {args.paper})       {t_pdf:7.2f} s   "
          f"ratio to the {BUDGET_S:.0f} s budget {t_pdf / BUDGET_S:.2f}")
    print(f"  XLSX ({len(xlsx) / 1e3:.0f} kB)                           {t_xlsx:7.2f} s")
    print(f"  floor: Chromium printing one line        {t_floor:7.2f} s   PDF / floor {t_pdf / t_floor:.2f}")


if __name__ == "__main__":
    main()
