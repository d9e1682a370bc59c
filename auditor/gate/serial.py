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
            named = str(path) in message and isinstance(exc, AuditorError)
            outcome.errors.append((str(path), message if named else f"{path}: {message}", code))
    return outcome
