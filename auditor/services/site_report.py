"""A site's portfolio document: every meter of the site audited through the batch audit
(:func:`auditor.services.batch.audit_meters`), one row per meter, as a self-contained HTML page
or CSV (``auditor report --site NAME --tariff T --out FILE``)."""
from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

from auditor.errors import NotFoundError, UsageError
from auditor.services.batch import BatchAudit, audit_meters, same_tariff, select_meters
from auditor.store import Store
from auditor.tariffs import Tariff

__all__ = ["SiteReport", "build_site_report", "write_site_report", "SITE_FORMATS"]

SITE_FORMATS = ("html", "csv")


@dataclass(frozen=True)
class SiteReport:
    site: str
    tariff_name: str
    generated_at: str
    batch: BatchAudit

    @property
    def rows(self) -> list[dict]:
        return self.batch.rows

    @property
    def totals(self) -> dict:
        ok = [r for r in self.rows if r["error"] is None]
        kwh = sum(r["kwh"] or 0.0 for r in ok)
        return {"meters": len(self.rows), "audited": len(ok), "kwh": kwh,
                "reactive_total": sum(r["reactive_total"] or 0.0 for r in ok),
                "total": sum(r["total"] or 0.0 for r in ok),
                "currencies": sorted({r["currency"] for r in ok if r["currency"]})}

    @property
    def span(self) -> tuple[str | None, str | None]:
        """The first period's start and the last period's end over every meter (local dates)."""
        starts = [a["periods"][0]["start"] for a in self.batch.audits if a["periods"]]
        ends = [a["periods"][-1]["end"] for a in self.batch.audits if a["periods"]]
        return (min(starts) if starts else None, max(ends) if ends else None)


def build_site_report(store: Store, site: str, tariff: str | Path | Tariff, *, workers: int | None = None) -> SiteReport:
    tariff_for = same_tariff(tariff)
    meters = select_meters(store, site=site)
    if not meters:
        raise NotFoundError(f"site {site!r} has no meters")
    batch = audit_meters(store, meters, tariff_for, workers=workers)
    return SiteReport(site=site, tariff_name=tariff_for(meters[0]).name,
                      generated_at=datetime.now(UTC).isoformat(timespec="seconds"), batch=batch)


def render_site_html(report: SiteReport) -> str:
    from auditor.presentation import document_environment, stylesheet
    from auditor.services.report import DISCLAIMER

    return document_environment().get_template("documents/site_portfolio.html").render(
        r=report, css=stylesheet(), disclaimer=DISCLAIMER)


def render_site_csv(report: SiteReport) -> bytes:
    import csv
    import io

    from auditor.services.batch import CSV_COLUMNS

    buf = io.StringIO()
    w = csv.writer(buf)
    w.writerow(CSV_COLUMNS)
    for r in report.rows:
        w.writerow(["" if r[k] is None else r[k] for k in CSV_COLUMNS])
    return buf.getvalue().encode("utf-8")


def write_site_report(store: Store, site: str, tariff: str | Path | Tariff, out: str | Path,
                      *, workers: int | None = None) -> tuple[Path, SiteReport]:
    """Write the site's document named by ``out``'s suffix (.html or .csv)."""
    out = Path(out)
    fmt = out.suffix.lower().lstrip(".")
    fmt = "html" if fmt == "htm" else fmt
    if fmt not in SITE_FORMATS:
        raise UsageError(f"{out.name}: a site report file name must end in .html or .csv")
    report = build_site_report(store, site, tariff, workers=workers)
    data = render_site_html(report).encode("utf-8") if fmt == "html" else render_site_csv(report)
    try:
        out.parent.mkdir(parents=True, exist_ok=True)
        out.write_bytes(data)
    except OSError as exc:
        raise UsageError(f"cannot write {out} ({exc.strerror})") from None
    return out, report
