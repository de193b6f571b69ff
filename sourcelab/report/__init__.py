"""The reports of an analysis: one self-contained HTML file (figures inline as base64 PNG, no
external resources) and a PDF of at most 12 A4 pages drawn with matplotlib; both open with the
same one-page summary."""

from .build import MAX_BYTES, build_html, write_report
from .html import CAUTIONS, SECTIONS, deviations
from .pdf import MAX_PAGES, pdf_pages, write_pdf
from .summary import Summary, report_summary

__all__ = [
    "CAUTIONS",
    "MAX_BYTES",
    "MAX_PAGES",
    "SECTIONS",
    "Summary",
    "build_html",
    "deviations",
    "pdf_pages",
    "report_summary",
    "write_pdf",
    "write_report",
]
