"""The report formats and their writers: one entry per format."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

from .html import write_html
from .json_report import write_json
from .markdown import write_markdown
from .periodic import periodic_figures
from .plots import markdown_figures, report_plots, write_figures

if TYPE_CHECKING:
    from ..pipeline.result import AuditResult

FORMATS = ("json", "md", "html", "all")


def write_reports(result: AuditResult, out: Path, formats: str, stem: str) -> list[Path]:
    """Write the requested formats of ``result`` under ``out`` with file stem ``stem``."""
    written = []
    images = report_plots(result) if formats in ("md", "html", "all") else {}
    if images:
        images.update(periodic_figures(result))
    if formats in ("json", "all"):
        written.append(write_json(result, out / f"{stem}.json"))
    if formats in ("md", "all"):
        pngs = write_figures(images, out, stem)
        written += pngs
        written.append(write_markdown(result, out / f"{stem}.md", markdown_figures(pngs, stem)))
    if formats in ("html", "all"):
        written.append(write_html(result, out / f"{stem}.html", images))
    return written
