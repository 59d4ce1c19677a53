"""Plots, summary tables and the self-contained HTML page of a settings comparison."""
from __future__ import annotations

from .page import CAUTION_TEXT, render_page, write_report
from .summary import ranking_text, write_summary

__all__ = ["write_report", "render_page", "write_summary", "ranking_text", "CAUTION_TEXT"]
