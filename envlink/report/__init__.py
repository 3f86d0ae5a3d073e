"""The HTML report: figures (:mod:`envlink.report.plots`) and the page (:mod:`envlink.report.html`)."""

from __future__ import annotations

from envlink.report.html import render_report, write_report

__all__ = ["write_report", "render_report"]
