"""The report formats and their writers: one entry per format."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

from .figures import markdown_figures, report_figures, write_figures
from .json_report import write_json

if TYPE_CHECKING:
    from ..pipeline.result import AuditResult

FORMATS = ("json", "md", "html", "all")


def write_reports(result: AuditResult, out: Path, formats: str, stem: str) -> list[Path]:
    """Write the requested formats of ``result`` under ``out`` with file stem ``stem``."""
    written: list[Path] = []
    images: dict[str, bytes] = {}
    if formats in ("md", "html", "all"):
        images = report_figures(result)  # matplotlib loads only then (JSON-only runs stay fast)
    if formats in ("json", "all"):
        written.append(write_json(result, out / f"{stem}.json"))
    if formats in ("md", "all"):
        from .markdown import write_markdown

        pngs = write_figures(images, out, stem)
        written += pngs
        written.append(write_markdown(result, out / f"{stem}.md", markdown_figures(pngs, stem)))
    if formats in ("html", "all"):
        from .html import write_html

        written.append(write_html(result, out / f"{stem}.html", images))
    return written
