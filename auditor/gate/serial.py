"""Audit a list of geometry files one after another and write one report per frame.

Shared by ``auditor check`` and ``auditor demo``: one bad file never stops the others."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

from ..base.errors import EXIT_FAIL, EXIT_OK, AuditorError, failure
from ..base.files import protect
from ..diagnosis.verdict import Policy
from ..inputs.basis import BasisSpec
from ..inputs.geometry import load_molecules
from ..pipeline.result import AuditResult
from ..pipeline.run import audit_prepared, prepare
from ..remedies.plan import RemedyOptions
from ..report.naming import report_stem, unique_name
from ..report.writers import write_reports
from .periodic import PeriodicOptions, is_periodic, not_periodic, periodic_results


@dataclass
class RunOutcome:
    results: list = field(default_factory=list)
    errors: list = field(default_factory=list)  # (path, message, exit code)
    written: list = field(default_factory=list)

    @property
    def exit_code(self) -> int:
        if self.errors:
            return max(code for _, _, code in self.errors)
        return EXIT_FAIL if any(r.verdict == "fail" for r in self.results) else EXIT_OK


def audit_paths(
    paths: list[Path],
    spec: BasisSpec,
    policy: Policy,
    out: Path | None,
    formats: str = "all",
    unit: str = "angstrom",
    ghost: str | None = None,
    spectrum_method: str = "auto",
    on_result: Callable[[AuditResult], None] | None = None,
    remedies: bool | RemedyOptions = True,
    periodic: PeriodicOptions | None = None,
) -> RunOutcome:
    """Audit every frame of every file; collect errors per file instead of stopping.
    Periodic files (auditor.gate.periodic) take the periodic path with ``periodic``'s mesh."""
    with protect([*paths, *spec.files()]):
        return _audit_each(
            paths, spec, policy, out, formats, unit, ghost, spectrum_method, on_result, remedies, periodic
        )


def _results(path, spec, policy, unit, ghost, spectrum_method, remedies, periodic):
    """The audit of every frame of one file, one at a time."""
    if is_periodic(path):
        return periodic_results(path, spec, policy, unit, ghost, periodic or PeriodicOptions(), remedies)
    if periodic is not None and periodic.asked:
        raise not_periodic(path)
    frames = load_molecules(path, unit=unit, ghost=ghost)
    return (audit_prepared(prepare(mol, spec, spectrum_method), policy, spectrum_method, remedies) for mol in frames)


def _audit_each(
    paths, spec, policy, out, formats, unit, ghost, spectrum_method, on_result, remedies, periodic=None
) -> RunOutcome:
    outcome = RunOutcome()
    used: set[str] = set()
    for path in paths:
        try:
            for result in _results(path, spec, policy, unit, ghost, spectrum_method, remedies, periodic):
                if out is not None:
                    stem = unique_name(report_stem(str(path), result.input.frame, result.input.n_frames), used)
                    outcome.written += write_reports(result, out, formats, stem)
                outcome.results.append(result)
                if on_result:
                    on_result(result)
        except Exception as exc:  # one broken file must not stop the others
            message, code = failure(exc)
            outcome.errors.append((str(path), message if isinstance(exc, AuditorError) else f"{path}: {message}", code))
    return outcome
