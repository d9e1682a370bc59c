"""Audit a list of geometry files one after another and write one report per frame.

Shared by ``auditor check`` and ``auditor demo``: one bad file never stops the others."""

from __future__ import annotations

from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path

from ..base.errors import EXIT_FAIL, EXIT_INPUT, EXIT_OK, AuditorError, failure
from ..base.files import protect
from ..diagnosis.verdict import Policy
from ..inputs.basis import BasisSpec
from ..inputs.fragments import fragments_for
from ..inputs.geometry import Molecule
from ..inputs.readers import load_molecules
from ..pipeline.counterpoise import audit_counterpoise
from ..pipeline.frames import audit_frames
from ..pipeline.result import AuditResult
from ..pipeline.run import prepare
from ..remedies.plan import RemedyOptions
from ..report.naming import distinct_labels, report_stem, unique_name
from ..report.pruned_files import write_transform
from ..report.scan import write_scan
from ..report.writers import write_reports
from .items import expand_inputs
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


@dataclass(frozen=True)
class _Settings:
    """What every input of one check run is audited and written with."""

    spec: BasisSpec
    policy: Policy
    out: Path | None
    formats: str
    unit: str
    ghost: str | None
    spectrum_method: str
    remedies: bool | RemedyOptions
    periodic: PeriodicOptions | None
    on_result: Callable[[AuditResult], None] | None
    on_stage: Callable[[str, str], None] | None
    input_format: str | None = None
    fragments: tuple[str, ...] | None = None  # --fragments: a counterpoise audit of every frame
    write_x: bool = False  # also <stem>.X.npy for every frame that has an advised threshold


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
    on_stage: Callable[[str, str], None] | None = None,
    periodic: PeriodicOptions | None = None,
    input_format: str | None = None,
    fragments: Sequence[str] | None = None,
    write_x: bool = False,
) -> RunOutcome:
    """Audit every frame of every file named by ``paths`` (files, folders searched
    recursively, glob patterns and @lists, as for the gate), the frames of one file as one
    job (`audit_frames`); collect errors per input instead of stopping. Reports of inputs
    that share a file name get enough of their path in the stem to tell them apart.
    ``on_stage(label, step)`` is told each step of each audit as it starts (for a progress
    display). Periodic files (auditor.gate.periodic) take the periodic path with
    ``periodic``'s mesh. ``input_format`` forces a reader; ``fragments`` (--fragments
    values), or fragments in a file, make each frame a counterpoise audit. Multi-frame files
    also get a scan report (auditor.report.scan). With ``write_x`` each frame that has an
    advised threshold also gets <stem>.X.npy."""
    files, missing = expand_inputs([str(p) for p in paths])
    settings = _Settings(
        spec,
        policy,
        out,
        formats,
        unit,
        ghost,
        spectrum_method,
        remedies,
        periodic,
        on_result,
        on_stage,
        input_format,
        tuple(fragments) if fragments else None,
        write_x,
    )
    with protect([*files, *spec.files()]):
        outcome = _audit_each(files, settings)
    outcome.errors = [(arg, message, EXIT_INPUT) for arg, message in missing] + outcome.errors
    return outcome


def _audit_each(paths: list[Path], s: _Settings) -> RunOutcome:
    outcome = RunOutcome()
    used: set[str] = set()
    for path, label in zip(paths, distinct_labels([str(p) for p in paths])):
        try:
            frames: list[AuditResult] = []
            comments: list[str] = []
            for mol, result in _results(path, label, s, comments):
                if s.out is not None:
                    base = report_stem(label.replace("/", "__"), result.input.frame, result.input.n_frames)
                    stem = unique_name(base, used)
                    outcome.written += write_reports(result, s.out, s.formats, stem)
                    if s.write_x and mol is not None and result.recommendation.threshold is not None:
                        prep = prepare(mol, s.spec, s.spectrum_method)
                        outcome.written.append(write_transform(result, prep, s.out / f"{stem}.X.npy", 0.0))
                outcome.results.append(result)
                frames.append(result)
                if s.on_result:
                    s.on_result(result)
            if s.out is not None and len(frames) > 1:  # a scan: the curve over the frames
                stem = unique_name(report_stem(label.replace("/", "__"), 1, 1) + ".scan", used)
                outcome.written += write_scan(frames, s.out, s.formats, stem, comments)
        except Exception as exc:  # one broken file must not stop the others
            message, code = failure(exc)
            named = str(path) in message and isinstance(exc, AuditorError)
            outcome.errors.append((str(path), message if named else f"{path}: {message}", code))
    return outcome


def _results(
    path: Path, label: str, s: _Settings, comments: list[str]
) -> Iterator[tuple[Molecule | None, AuditResult]]:
    """(molecule, audit) of every frame of one file; each frame's comment line appended to
    ``comments``. The frames of one file are one job (one threshold, one set of remedies);
    a frame with fragments is a counterpoise audit of its own; a cell has no molecule."""
    if is_periodic(path):
        for result in periodic_results(
            path, s.spec, s.policy, s.unit, s.ghost, s.periodic or PeriodicOptions(), s.remedies
        ):
            yield None, result
        return
    if s.periodic is not None and s.periodic.asked:
        raise not_periodic(path)
    frames = load_molecules(path, unit=s.unit, ghost=s.ghost, input_format=s.input_format)
    comments += [mol.comment for mol in frames]
    if any(fragments_for(mol, s.fragments) for mol in frames):
        for mol in frames:
            stage = _stage_of(s.on_stage, label + (f" [{mol.frame + 1}]" if mol.n_frames > 1 else ""))
            yield (
                mol,
                audit_counterpoise(
                    mol, fragments_for(mol, s.fragments), s.spec, s.policy, s.spectrum_method, s.remedies, stage
                )[0],
            )
        return
    stage = _stage_of(s.on_stage, label + (f" ({len(frames)} frames)" if len(frames) > 1 else ""))
    yield from zip(frames, audit_frames(frames, s.spec, s.policy, s.spectrum_method, s.remedies, stage))


def _stage_of(on_stage: Callable[[str, str], None] | None, name: str) -> Callable[[str], None] | None:
    """The per-audit stage callback that tells ``on_stage`` which audit it is."""
    if on_stage is None:
        return None
    return lambda step: on_stage(name, step)
