"""The self-contained HTML report (figures inline as base64 PNG, no external resources)."""

from .build import MAX_BYTES, build_html, write_report
from .html import CAUTIONS, SECTIONS, deviations

__all__ = ["CAUTIONS", "MAX_BYTES", "SECTIONS", "build_html", "deviations", "write_report"]
