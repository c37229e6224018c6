"""Card detail markdown to HTML for the workbench, with raw HTML switched off.

markdown-it-py in CommonMark mode with ``html=False`` escapes any tag a card carries, and its
link validation refuses ``javascript:``, ``vbscript:``, ``file:`` and ``data:`` URLs, so what
the browser receives is inert markup.
"""

from __future__ import annotations

from functools import lru_cache

from markdown_it import MarkdownIt


@lru_cache(maxsize=1)
def _md() -> MarkdownIt:
    return MarkdownIt("commonmark", {"html": False, "linkify": False}).enable("table")


def render_markdown(text: str) -> str:
    return _md().render(text)
