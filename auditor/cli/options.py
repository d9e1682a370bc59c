"""Options that several commands share, declared once."""

from __future__ import annotations

import math
from pathlib import Path
from typing import IO, TYPE_CHECKING, Annotated

import typer

from ..base.errors import UsageError

if TYPE_CHECKING:
    from ..gate.periodic import PeriodicOptions
    from ..remedies.plan import RemedyOptions

Basis = Annotated[
    str | None,
    typer.Option(
        "--basis",
        "-b",
        help="Basis name pyscf knows, or a basis file (NWChem format); optional for inputs that carry "
        "their basis (pyscf checkpoints, QCSchema inputs).",
    ),
]
InputFormat = Annotated[
    str | None,
    typer.Option(
        "--input-format",
        help="Read every input as xyz, extxyz, pdb, sdf, qcschema, chk (pyscf checkpoint) or ase-json "
        "(default: from the file name suffix).",
    ),
]
Fragments = Annotated[
    list[str] | None,
    typer.Option(
        "--fragments",
        help="Atoms (1-based) of one fragment, e.g. 1-6; repeat for each fragment: counterpoise audit "
        "(the complex, each fragment in the complex basis and in its own).",
    ),
]
BasisFor = Annotated[
    list[str] | None, typer.Option("--basis-for", help="Per-element basis, ELEMENT=BASIS; repeatable.")
]
Cartesian = Annotated[bool, typer.Option("--cartesian", help="Cartesian instead of spherical d, f, ... shells.")]
BasisSource = Annotated[
    str,
    typer.Option(
        "--basis-source",
        help="Copy of a named basis set: pyscf (pyscf's library) or bse (basis_set_exchange); copies can differ.",
    ),
]
Unit = Annotated[str, typer.Option("--unit", help="Unit of the coordinates in the files: angstrom or bohr.")]
Ghost = Annotated[str | None, typer.Option("--ghost", help="Atoms (1-based) that carry functions only, e.g. 4-6,9.")]
Caution = Annotated[float, typer.Option("--caution", help="Smallest eigenvalue below which the verdict is caution.")]
Fail = Annotated[float, typer.Option("--fail", help="Smallest eigenvalue below which the verdict is fail.")]
Spectrum = Annotated[
    str,
    typer.Option(
        "--spectrum",
        help="Eigen step: full (dense), large (factorizations and Lanczos, "
        "no second copy of S) or auto (large from about 3000 functions).",
    ),
]
Target = Annotated[
    float | None,
    typer.Option("--target", help="Smallest eigenvalue the remedies aim for (default: the caution level)."),
]
TrialScf = Annotated[
    str | None,
    typer.Option("--trial-scf", help="Opt-in trial SCF of the remedies: hf or a functional name pyscf knows."),
]
TrialMaxFunctions = Annotated[
    int, typer.Option("--trial-max-functions", help="Skip the trial SCF above this many basis functions.")
]
TrialSeconds = Annotated[
    float, typer.Option("--trial-seconds", help="Stop each trial SCF run after this many seconds.")
]
Quiet = Annotated[bool, typer.Option("--quiet", "-q", help="Print nothing but errors.")]
KMesh = Annotated[
    str | None,
    typer.Option(
        "--kmesh",
        help="Periodic inputs: Monkhorst-Pack k-points along the file's lattice vectors, e.g. 4,4,4 "
        "(default: N_i = ceil(12 Å / |a_i|), 1 along vacuum).",
    ),
]
Precision = Annotated[
    float | None,
    typer.Option("--precision", help="Periodic inputs: pyscf cell.precision of the lattice sums (default 1e-12)."),
]


def periodic_options(kmesh: str | None, precision: float | None) -> PeriodicOptions:
    """PeriodicOptions from the command line, every value checked."""
    from ..gate.periodic import PeriodicOptions
    from ..inputs.cell import parse_kmesh

    if precision is not None and not (0.0 < precision < 1.0):
        raise UsageError(f"--precision must lie between 0 and 1, got {precision:g}")
    return PeriodicOptions(parse_kmesh(kmesh), precision)


MaxInputMb = Annotated[
    float,
    typer.Option("--max-input-mb", help="Largest input file (geometry, list of paths) that is read, in MiB."),
]
#: default of --max-input-mb (auditor.base.textio.MAX_INPUT_BYTES in MiB)
MAX_INPUT_MB = 64.0


# Checks of option values that several commands share. The heavy modules are imported
# inside: the command line starts worker processes before numpy and pyscf load.


def check_unit(unit: str) -> None:
    if unit.lower() not in ("angstrom", "bohr"):
        raise UsageError(f"--unit must be angstrom or bohr, got {unit!r}")


def check_spectrum_method(method: str) -> None:
    if method not in ("auto", "full", "large"):
        raise UsageError(f"--spectrum must be auto, full or large, got {method!r}")


def check_input_format(fmt: str | None) -> None:
    if fmt is not None:
        from ..inputs.readers import check_input_format as check

        check(fmt)


def check_fragments(fragments: list[str] | None) -> None:
    """The syntax of each --fragments (the atoms are checked against each file later)."""
    if fragments:
        from ..inputs.fragments import parse_fragment_option

        parse_fragment_option(fragments)


def check_ghost(ghost: str | None) -> None:
    """The syntax of --ghost (the numbers are checked against each file's atoms later)."""
    if ghost:
        from ..inputs.geometry import parse_atom_ranges

        parse_atom_ranges(ghost)


def start_run(out_dir: Path | None, max_input_mb: float) -> None:
    """Checks every command makes before any work: the input size limit (--max-input-mb)
    and an output folder that can be written (not a file, /dev/null or read-only)."""
    from ..base.files import check_output_dir
    from ..base.textio import set_input_limit

    if not (math.isfinite(max_input_mb) and 0 < max_input_mb <= 2**20):
        raise UsageError(f"--max-input-mb must be a positive number of MiB, got {max_input_mb:g}")
    set_input_limit(max_input_mb)
    if out_dir is not None:
        check_output_dir(out_dir)


class ScfProgress:
    """Trial-SCF progress on a terminal: one line per run (cycle, energy, elapsed time),
    rewritten after every cycle; ``close`` ends the last line."""

    def __init__(self, stream: IO[str]) -> None:
        self.stream = stream
        self.label: str | None = None

    def __call__(self, p: dict) -> None:
        if self.label is not None and p["basis"] != self.label:
            self.stream.write("\n")
        self.label = p["basis"]
        energy = "" if p.get("energy") is None else f", energy {p['energy']:.8f} hartree"
        self.stream.write(f"\r  trial SCF, {p['basis']}: cycle {p['cycle']}{energy}, {p['seconds']:.1f} s\x1b[K")
        self.stream.flush()

    def close(self) -> None:
        if self.label is not None:
            self.stream.write("\n")
            self.stream.flush()
            self.label = None


def progress_for(trial_scf: str | None, quiet: bool) -> ScfProgress | None:
    """A progress printer when a trial SCF is asked for, output is a terminal and not --quiet."""
    from .console import out

    if not trial_scf or quiet or not out.is_terminal:
        return None
    return ScfProgress(out.file)


def end_progress(options: RemedyOptions | bool) -> None:
    """End the progress line of a trial SCF, if one was printed."""
    progress = getattr(options, "progress", None)
    if isinstance(progress, ScfProgress):
        progress.close()


def remedy_options(
    target: float | None,
    trial_scf: str | None,
    trial_max_functions: int,
    trial_seconds: float,
    quiet: bool = True,
) -> RemedyOptions:
    """RemedyOptions from the command line, every value checked; with a trial SCF on a
    terminal (and not ``quiet``) its progress is printed."""
    from ..remedies.plan import RemedyOptions
    from ..remedies.subset import check_target
    from ..remedies.trial_scf import check_method

    if target is not None:
        check_target(target)
    if trial_scf:
        check_method(trial_scf)
    if trial_max_functions < 1 or not trial_seconds > 0:
        raise UsageError("--trial-max-functions and --trial-seconds must be positive")
    return RemedyOptions(
        target=target,
        trial_scf=trial_scf,
        trial_max_functions=trial_max_functions,
        trial_time_limit=trial_seconds,
        progress=progress_for(trial_scf, quiet),
    )
