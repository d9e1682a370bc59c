"""Audit a list of geometry files one after another and write one report per frame.

Shared by ``auditor check`` and ``auditor demo``: one bad file never stops the others."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

from ..base.errors import EXIT_FAIL, EXIT_INPUT, EXIT_OK, AuditorError, failure
from ..base.files import protect
from ..diagnosis.verdict import Policy
from ..inputs.basis import BasisSpec
from ..inputs.geometry import load_molecules
from ..pipeline.frames import audit_frames
from ..pipeline.result import AuditResult
from ..pipeline.run import prepare
from ..remedies.plan import RemedyOptions
from ..report.naming import distinct_labels, report_stem, unique_name
from ..report.pruned_files import write_transform
from ..report.writers import write_reports
from .items import expand_inputs


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
    paths: Sequence[str | Path],
    spec: BasisSpec,
    policy: Policy,
    out: Path | None,
    formats: str = "all",
    unit: str = "angstrom",
    ghost: str | None = None,
    spectrum_method: str = "auto",
    on_result: Callable[[AuditResult], None] | None = None,
    remedies: bool | RemedyOptions = True,
    write_x: bool = False,
) -> RunOutcome:
    """Audit every frame of every file named by ``paths`` (files, folders searched
    recursively, glob patterns and @lists, as for the gate), the frames of one file as one
    job (`audit_frames`); collect errors per input instead of stopping. Reports of inputs
    that share a file name get enough of their path in the stem to tell them apart. With
    ``write_x`` each frame that has an advised threshold also gets <stem>.X.npy."""
    files, missing = expand_inputs([str(p) for p in paths])
    with protect([*files, *spec.files()]):
        outcome = _audit_each(
            files, spec, policy, out, formats, unit, ghost, spectrum_method, on_result, remedies, write_x
        )
    outcome.errors = [(arg, message, EXIT_INPUT) for arg, message in missing] + outcome.errors
    return outcome


def _audit_each(
    paths, spec, policy, out, formats, unit, ghost, spectrum_method, on_result, remedies, write_x=False
) -> RunOutcome:
    outcome = RunOutcome()
    used: set[str] = set()
    labels = distinct_labels([str(p) for p in paths])
    for path, label in zip(paths, labels):
        try:
            frames = load_molecules(path, unit=unit, ghost=ghost)
            # every frame of one file is one job: one threshold and one set of remedies for all
            for mol, result in zip(frames, audit_frames(frames, spec, policy, spectrum_method, remedies)):
                if out is not None:
                    stem = unique_name(report_stem(label.replace("/", "__"), mol.frame + 1, mol.n_frames), used)
                    outcome.written += write_reports(result, out, formats, stem)
                    if write_x and result.recommendation.threshold is not None:
                        prep = prepare(mol, spec, spectrum_method)
                        outcome.written.append(write_transform(result, prep, out / f"{stem}.X.npy", 0.0))
                outcome.results.append(result)
                if on_result:
                    on_result(result)
        except Exception as exc:  # one broken file must not stop the others
            message, code = failure(exc)
            outcome.errors.append((str(path), message if isinstance(exc, AuditorError) else f"{path}: {message}", code))
    return outcome
