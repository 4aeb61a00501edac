"""Tables for spreadsheets and CSV: columns with units, and the one place that writes cells.

Every XLSX and CSV cell the project writes passes through :func:`xlsx_value` /
:func:`csv_value`, which neutralise text that a spreadsheet would read as a formula: a cell
starting with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return (a meter, site, tariff or
scenario name is user text). In XLSX such text is stored as a string cell marked "quoted"
(shown as typed, never evaluated, not even after an edit); in CSV it gets a leading apostrophe
(the usual defence for files opened in a spreadsheet). Numbers stay numbers.
"""
from __future__ import annotations

import csv
import io
import math
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass

__all__ = ["Column", "FORMULA_LEAD", "neutralise", "csv_value", "xlsx_value", "render_csv_table",
           "Workbook", "column_groups"]

#: First characters that make a spreadsheet read text as a formula (or a DDE command).
FORMULA_LEAD = ("=", "+", "-", "@", "\t", "\r")


def neutralise(text: str) -> str:
    """``'=HYPERLINK(...)`` for ``=HYPERLINK(...)``; other text unchanged."""
    return "'" + text if text and text[0] in FORMULA_LEAD else text


def is_formula_like(value) -> bool:
    return isinstance(value, str) and bool(value) and value[0] in FORMULA_LEAD


@dataclass(frozen=True)
class Column:
    """One column of a table: header (in words, with its unit), value getter and number kind
    (``text``, ``int``, ``energy`` (0 decimals), ``power`` (1), ``pf`` (3), ``percent`` (1; the
    value is already ×100), ``money`` (2), ``ratio`` (a fraction shown as percent in XLSX))."""

    header: str
    get: Callable[[object], object]
    kind: str = "text"

    @property
    def numeric(self) -> bool:
        return self.kind != "text"


def column_groups(columns: Sequence[Column], max_columns: int, keep: int = 1) -> list[list[Column]]:
    """Split a wide table into tables of at most ``max_columns`` columns that each repeat the
    first ``keep`` columns (so a printed page never has to clip a table)."""
    head, rest = list(columns[:keep]), list(columns[keep:])
    per = max(1, max_columns - keep)
    if not rest:
        return [head]
    return [head + rest[i:i + per] for i in range(0, len(rest), per)]


# --------------------------------------------------------------------------------------------
# CSV
# --------------------------------------------------------------------------------------------
def csv_value(v):
    """A CSV field: empty for no value, numbers at full precision (6 decimals), text
    neutralised."""
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return ""
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, float):
        return repr(round(v, 6))
    if isinstance(v, str):
        return neutralise(v)
    return v


def render_csv_table(columns: Sequence[Column], items: Iterable, *, header: bool = True) -> bytes:
    """One table as CSV (UTF-8, comma, one header row of words with units)."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    if header:
        w.writerow([csv_value(c.header) for c in columns])
    for item in items:
        w.writerow([csv_value(c.get(item)) for c in columns])
    return buf.getvalue().encode("utf-8")


# --------------------------------------------------------------------------------------------
# XLSX
# --------------------------------------------------------------------------------------------
def xlsx_value(v):
    """A value openpyxl may store as it is: None for no value, plain Python numbers."""
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return None
    if hasattr(v, "item") and not isinstance(v, str):  # numpy scalar
        v = v.item()
    return v


def number_formats(currency: str | None) -> dict[str, str]:
    cur = f' "{currency}"' if currency and currency.isalnum() else ""
    return {"int": "#,##0", "energy": "#,##0", "power": "#,##0.0", "pf": "0.000", "percent": "0.0%",
            "ratio": "0.0%", "money": f"#,##0.00{cur}", "years": "0.0", "kvar": "#,##0.0", "number": "General"}


class Workbook:
    """An openpyxl workbook written sheet by sheet: tables with a frozen, bold header row,
    numbers stored as numbers with their formats, text neutralised, widths from the content."""

    HEADER_FILL = "1F4E5A"

    def __init__(self, currency: str | None = None):
        from openpyxl import Workbook as _WB

        self.wb = _WB()
        self.wb.remove(self.wb.active)
        self.formats = number_formats(currency)

    # one cell, the only way a value gets into a sheet
    def put(self, ws, row: int, col: int, value, kind: str = "text", bold: bool = False):
        from openpyxl.styles import Font

        value = xlsx_value(value)
        if kind == "percent" and isinstance(value, int | float) and not isinstance(value, bool):
            value = value / 100.0  # columns of kind "percent" carry ×100; the sheet stores the fraction
        cell = ws.cell(row=row, column=col)
        if isinstance(value, str):
            cell.value = value
            cell.data_type = "s"  # never a formula, whatever the first character
            if is_formula_like(value):
                cell.quotePrefix = True
        elif isinstance(value, bool):
            cell.value = "yes" if value else "no"
        else:
            cell.value = value
            fmt = self.formats.get(kind)
            if fmt and value is not None:
                cell.number_format = fmt
        if bold:
            cell.font = Font(bold=True)
        return cell

    def _header(self, ws, row: int, headers: Sequence[str]):
        from openpyxl.styles import Alignment, Font, PatternFill

        for j, h in enumerate(headers, start=1):
            cell = self.put(ws, row, j, h)
            cell.font = Font(bold=True, color="FFFFFF")
            cell.fill = PatternFill("solid", fgColor=self.HEADER_FILL)
            cell.alignment = Alignment(wrap_text=True, vertical="top")

    def table(self, title: str, columns: Sequence[Column], items: Iterable, *, note: str | None = None):
        """A sheet holding one table; header frozen (and the first column when it is text)."""
        ws = self.wb.create_sheet(_sheet_title(title))
        top = 1
        if note:
            self.put(ws, 1, 1, note)
            top = 3
        self._header(ws, top, [c.header for c in columns])
        r = top
        for r, item in enumerate(items, start=top + 1):
            for j, c in enumerate(columns, start=1):
                self.put(ws, r, j, c.get(item), c.kind)
        self.fit(ws, [c.header for c in columns], numeric=[c.numeric for c in columns])
        first_text = bool(columns) and not columns[0].numeric and len(columns) > 4
        ws.freeze_panes = ws.cell(row=top + 1, column=2 if first_text else 1).coordinate
        return ws

    def fit(self, ws, headers: Sequence[str] | None = None, numeric: Sequence[bool] | None = None,
            max_width: int = 60):
        """Column widths from the longest value shown (numbers by their formatted length)."""
        from openpyxl.utils import get_column_letter

        widths: dict[int, int] = {}
        for row in ws.iter_rows():
            for cell in row:
                v = cell.value
                if v is None:
                    continue
                if isinstance(v, int | float):
                    n = len(f"{v:,.2f}") + 2
                else:
                    n = max(len(line) for line in str(v).split("\n")) + 1
                widths[cell.column] = max(widths.get(cell.column, 0), n)
        for col, n in widths.items():
            header_len = len(headers[col - 1]) + 2 if headers and col <= len(headers) else 0
            # a header wraps: it needs only its longest word, a value needs all of it
            head_word = max((len(w) for w in headers[col - 1].split()), default=0) + 2 if header_len else 0
            ws.column_dimensions[get_column_letter(col)].width = max(8, min(max_width, max(n, head_word)))

    def sections(self, title: str, blocks: Sequence[tuple[str, Sequence[str], list[list[tuple[object, str]]]]],
                 *, heading: str | None = None, freeze: str = "A3"):
        """A sheet of titled blocks (the Summary): each block a bold title, a header row and rows
        of (value, kind) cells."""
        from openpyxl.styles import Font

        ws = self.wb.create_sheet(_sheet_title(title), 0 if title == "Summary" else None)
        r = 1
        if heading:
            cell = self.put(ws, 1, 1, heading)
            cell.font = Font(bold=True, size=14)
            r = 3
        all_headers: list[str] = []
        for name, headers, rows in blocks:
            cell = self.put(ws, r, 1, name)
            cell.font = Font(bold=True, size=12, color=self.HEADER_FILL)
            r += 1
            if headers:
                self._header(ws, r, headers)
                all_headers = list(headers) if len(headers) > len(all_headers) else all_headers
                r += 1
            for row in rows:
                for j, (value, kind) in enumerate(row, start=1):
                    self.put(ws, r, j, value, kind)
                r += 1
            r += 1
        self.fit(ws, all_headers, max_width=70)
        from openpyxl.styles import Alignment

        for row in ws.iter_rows():
            for cell in row:
                if isinstance(cell.value, str) and len(cell.value) > 70:
                    cell.alignment = Alignment(wrap_text=True, vertical="top")
        ws.freeze_panes = freeze
        return ws

    def save(self) -> bytes:
        buf = io.BytesIO()
        self.wb.save(buf)
        return buf.getvalue()


def _sheet_title(title: str) -> str:
    """A valid sheet title: at most 31 characters, none of ``[]:*?/\\``."""
    for ch in "[]:*?/\\":
        title = title.replace(ch, " ")
    return title[:31]
