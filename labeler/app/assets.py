"""The page's files that are not Python: ``templates/`` (the page around the document) and
``static/`` (style sheet, page-side scripts), read once per process."""

from __future__ import annotations

from functools import lru_cache
from pathlib import Path

HERE = Path(__file__).resolve().parent


@lru_cache(maxsize=None)
def static(name: str) -> str:
    """Text of ``static/<name>``."""
    return (HERE / "static" / name).read_text(encoding="utf-8")


@lru_cache(maxsize=None)
def template(name: str) -> str:
    """Text of ``templates/<name>`` (a Jinja block Bokeh's page template extends)."""
    return (HERE / "templates" / name).read_text(encoding="utf-8")
