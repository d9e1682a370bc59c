"""Audit a list of geometry files and write one report per frame.

Shared by ``auditor check`` and ``auditor demo``: one bad file never stops the others.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from .api import audit_prepared, load_molecules, prepare
from .basis import BasisSpec
from .errors import EXIT_FAIL, EXIT_OK, AuditorError, failure
from .policy import Policy
from .report import protect, report_stem, unique_name
from .report.json import write_json
from .report.markdown import write_markdown

FORMATS = ("json", "md", "html", "all")


@dataclass
class RunOutcome:
    results: list = field(default_factory=list)
    errors: list = field(default_factory=list)      # (path, message, exit code)
    written: list = field(default_factory=list)

    @property
    def exit_code(self) -> int:
        if self.errors:
            return max(code for _, _, code in self.errors)
        return EXIT_FAIL if any(r.verdict == "fail" for r in self.results) else EXIT_OK


def write_reports(result, out: Path, formats: str, stem: str) -> list[Path]:
    """Write the requested formats of ``result`` under ``out`` with file stem ``stem``."""
    written = []
    images = None
    if formats in ("md", "html", "all"):
        from .report.plots import report_plots

        images = report_plots(result)
    if formats in ("json", "all"):
        written.append(write_json(result, out / f"{stem}.json"))
    if formats in ("md", "all"):
        from .report.plots import markdown_figures, write_figures

        pngs = write_figures(images, out, stem)
        written += pngs
        written.append(write_markdown(result, out / f"{stem}.md", markdown_figures(pngs, stem)))
    if formats in ("html", "all"):
        from .report.html import write_html

        written.append(write_html(result, out / f"{stem}.html", images))
    return written


def audit_paths(
    paths: list[Path],
    spec: BasisSpec,
    policy: Policy,
    out: Path | None,
    formats: str = "all",
    unit: str = "angstrom",
    ghost: str | None = None,
    spectrum_method: str = "auto",
    on_result=None,
    remedies=True,
) -> RunOutcome:
    """Audit every frame of every file; collect errors per file instead of stopping."""
    with protect([*paths, *spec.files()]):
        return _audit_each(paths, spec, policy, out, formats, unit, ghost, spectrum_method, on_result, remedies)


def _audit_each(paths, spec, policy, out, formats, unit, ghost, spectrum_method, on_result, remedies) -> RunOutcome:
    outcome = RunOutcome()
    used: set[str] = set()
    for path in paths:
        try:
            frames = load_molecules(path, unit=unit, ghost=ghost)
            for mol in frames:
                result = audit_prepared(prepare(mol, spec, spectrum_method), policy, spectrum_method, remedies)
                if out is not None:
                    stem = unique_name(report_stem(str(path), mol.frame + 1, mol.n_frames), used)
                    outcome.written += write_reports(result, out, formats, stem)
                outcome.results.append(result)
                if on_result:
                    on_result(result)
        except Exception as exc:  # one broken file must not stop the others
            message, code = failure(exc)
            outcome.errors.append((str(path), message if isinstance(exc, AuditorError) else f"{path}: {message}", code))
    return outcome
