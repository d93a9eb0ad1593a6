"""Emitters over the report: the self-contained review page, the static tree, the ticket text.

None of them re-derives a number: each reads `Plan.report()` and only formats it.
"""

from __future__ import annotations

from .html import render_html, render_static_tree
from .markdown import render_markdown

__all__ = ["render_html", "render_markdown", "render_static_tree"]
