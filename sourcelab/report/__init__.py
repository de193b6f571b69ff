"""The reports of an analysis: one self-contained HTML file (figures inline as base64 PNG, no
external resources) and a PDF of at most 12 A4 pages drawn with matplotlib; both open with the
same one-page summary."""

from .._lazy import lazy_exports

#: Public name -> the submodule defining it, imported on first use (the HTML report does not
#: load matplotlib, which only the PDF needs).
_HOMES = {
    "MAX_BYTES": "build",
    "build_html": "build",
    "write_report": "build",
    "CAUTIONS": "html",
    "SECTIONS": "html",
    "deviations": "html",
    "MAX_PAGES": "pdf",
    "pdf_pages": "pdf",
    "write_pdf": "pdf",
    "Summary": "summary",
    "report_summary": "summary",
}
_SUBMODULES = ("build", "html", "labels", "pdf", "summary")

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

__getattr__, __dir__ = lazy_exports(__name__, _HOMES, _SUBMODULES)
