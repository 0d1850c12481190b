"""One Report object and its renderers (JSON, text, Markdown, HTML, JUnit)."""

from preflight.report.model import Report

__all__ = ["Report"]
