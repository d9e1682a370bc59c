"""Command line: parsing and printing only; the work is done by the Python API."""
from __future__ import annotations

import sys
from pathlib import Path
from typing import List, Optional

import typer
from rich.console import Console

from .errors import EXIT_INTERNAL, EXIT_USAGE, AuditorError, UsageError

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    help="Audit Gaussian basis sets for near-linear dependence: overlap spectrum, causes, remedies.",
    pretty_exceptions_enable=False,
)
err = Console(stderr=True, highlight=False, width=None if sys.stderr.isatty() else 160)
out = Console(highlight=False, width=None if sys.stdout.isatty() else 160)


def _fail(message: str, code: int) -> None:
    err.print(f"[bold red]error:[/] {message}")
    raise typer.Exit(code)


@app.command()
def check(
    geometry: List[Path] = typer.Argument(..., help="XYZ / extended XYZ files (every frame is audited)."),
    basis: str = typer.Option(..., "--basis", "-b", help="Basis name pyscf knows, or a basis file (NWChem format)."),
    basis_for: Optional[List[str]] = typer.Option(None, "--basis-for", help="Per-element basis, ELEMENT=BASIS; repeatable."),
    cartesian: bool = typer.Option(False, "--cartesian", help="Cartesian instead of spherical d, f, ... shells."),
    unit: str = typer.Option("angstrom", "--unit", help="Unit of the coordinates in the files: angstrom or bohr."),
    ghost: Optional[str] = typer.Option(None, "--ghost", help="Atoms (1-based) that carry functions only, e.g. 4-6,9."),
    out_dir: Path = typer.Option(Path("audit_reports"), "--out", "-o", help="Folder for the reports."),
    fmt: str = typer.Option("all", "--format", "-f", help="json, md (with PNG figures beside it), html (self-contained page) or all."),
    caution: float = typer.Option(1e-5, "--caution", help="Smallest eigenvalue below which the verdict is caution."),
    fail: float = typer.Option(1e-7, "--fail", help="Smallest eigenvalue below which the verdict is fail."),
    spectrum: str = typer.Option("auto", "--spectrum", help="Eigen step: full (dense), large (factorizations and "
                                                          "Lanczos, no second copy of S) or auto (large from about 3000 functions)."),
    target: Optional[float] = typer.Option(None, "--target", help="Smallest eigenvalue the remedies aim for (default: the caution level)."),
    trial_scf: Optional[str] = typer.Option(None, "--trial-scf", help="Opt-in trial SCF of the remedies: hf or a functional name pyscf knows."),
    trial_max_functions: int = typer.Option(400, "--trial-max-functions", help="Skip the trial SCF above this many basis functions."),
    trial_seconds: float = typer.Option(120.0, "--trial-seconds", help="Stop each trial SCF run after this many seconds."),
    quiet: bool = typer.Option(False, "--quiet", "-q", help="Print nothing but errors."),
):
    """Audit each geometry in one basis; write DIR/<stem>.json, .md and .html per frame.

    Exit codes: 0 pass or caution, 1 fail, 2 usage error, 3 unreadable input, 4 too large,
    5 internal error.
    """
    from .api import make_spec
    from .policy import Policy
    from .report.terminal import print_summary
    from .runner import FORMATS, audit_paths

    if fmt not in FORMATS:
        _fail(f"--format must be one of {', '.join(FORMATS)}, got {fmt!r}", EXIT_USAGE)
    try:
        spec = make_spec(basis, basis_for, cartesian)
        policy = Policy(caution=caution, fail=fail)
        if unit.lower() not in ("angstrom", "bohr"):
            _fail(f"--unit must be angstrom or bohr, got {unit!r}", EXIT_USAGE)
        if ghost:
            from .geometry import parse_atom_numbers
            parse_atom_numbers(ghost)
        remedies = _remedy_options(target, trial_scf, trial_max_functions, trial_seconds)
        _check_spectrum_method(spectrum)
    except AuditorError as exc:
        _fail(exc.message, exc.exit_code)
    outcome = audit_paths(geometry, spec, policy, out_dir, fmt, unit=unit, ghost=ghost, remedies=remedies,
                          spectrum_method=spectrum)
    for _, message, _ in outcome.errors:
        err.print(f"[bold red]error:[/] {message}")
    if not quiet:
        from .report.terminal import print_remedies

        print_summary(outcome.results, [(p, m) for p, m, _ in outcome.errors], out)
        print_remedies(outcome.results, out)
        if outcome.written:
            out.print(f"wrote {len(outcome.written)} report file(s) to {out_dir}/")
    raise typer.Exit(outcome.exit_code)


def _check_spectrum_method(method: str) -> None:
    if method not in ("auto", "full", "large"):
        raise UsageError(f"--spectrum must be auto, full or large, got {method!r}")


def _remedy_options(target, trial_scf, trial_max_functions, trial_seconds):
    from .cholesky import check_target
    from .prune import RemedyOptions

    if target is not None:
        check_target(target)
    if trial_scf:
        from .trial_scf import check_method
        check_method(trial_scf)
    if trial_max_functions < 1 or not trial_seconds > 0:
        raise UsageError("--trial-max-functions and --trial-seconds must be positive")
    return RemedyOptions(target=target, trial_scf=trial_scf, trial_max_functions=trial_max_functions,
                         trial_time_limit=trial_seconds)


@app.command()
def prune(
    geometry: Path = typer.Argument(..., help="XYZ / extended XYZ file."),
    basis: str = typer.Option(..., "--basis", "-b", help="Basis name pyscf knows, or a basis file (NWChem format)."),
    out_dir: Path = typer.Option(..., "--out", "-o", help="Folder for <stem>.pruned.json, <stem>.X.npy and <stem>.prune.md."),
    target: Optional[float] = typer.Option(None, "--target", help="Smallest eigenvalue the pruned basis must reach (default: the caution level)."),
    basis_for: Optional[List[str]] = typer.Option(None, "--basis-for", help="Per-element basis, ELEMENT=BASIS; repeatable."),
    cartesian: bool = typer.Option(False, "--cartesian", help="Cartesian instead of spherical d, f, ... shells."),
    unit: str = typer.Option("angstrom", "--unit", help="Unit of the coordinates in the file: angstrom or bohr."),
    ghost: Optional[str] = typer.Option(None, "--ghost", help="Atoms (1-based) that carry functions only, e.g. 4-6,9."),
    frame: int = typer.Option(1, "--frame", help="Frame of a multi-frame file (1-based)."),
    caution: float = typer.Option(1e-5, "--caution", help="Caution level (the default target)."),
    fail: float = typer.Option(1e-7, "--fail", help="Fail level (bounds the advised threshold)."),
    trial_scf: Optional[str] = typer.Option(None, "--trial-scf", help="Opt-in trial SCF: hf or a functional name pyscf knows."),
    trial_max_functions: int = typer.Option(400, "--trial-max-functions", help="Skip the trial SCF above this many basis functions."),
    trial_seconds: float = typer.Option(120.0, "--trial-seconds", help="Stop each trial SCF run after this many seconds."),
    quiet: bool = typer.Option(False, "--quiet", "-q", help="Print nothing but errors."),
):
    """Write a shell-pruned basis that reaches a target smallest eigenvalue, the canonical
    orthogonalization matrix X, and a Markdown explanation.

    Exit codes: 0 written, 2 usage error (bad target, a pruning that empties an atom),
    3 unreadable input, 5 internal error.
    """
    from .api import load_molecules, make_spec, prepare
    from .policy import Policy
    from .prune import prune_prepared, write_prune_outputs
    from .report import protect, report_stem

    try:
        if unit.lower() not in ("angstrom", "bohr"):
            raise UsageError(f"--unit must be angstrom or bohr, got {unit!r}")
        options = _remedy_options(target, trial_scf, trial_max_functions, trial_seconds)
        spec = make_spec(basis, basis_for, cartesian)
        policy = Policy(caution=caution, fail=fail)
        frames = load_molecules(geometry, unit=unit, ghost=ghost)
        if not 1 <= frame <= len(frames):
            raise UsageError(f"{geometry}: frame {frame} requested, file has {len(frames)} frame(s)")
        prep = prepare(frames[frame - 1], spec)
        result, plan = prune_prepared(prep, policy, options)
        stem = report_stem(str(geometry), frame, len(frames))
        with protect([geometry, *spec.files()]):
            paths = write_prune_outputs(result, plan, prep, out_dir, stem)
    except AuditorError as exc:
        _fail(exc.message, exc.exit_code)
    if not quiet:
        doc = plan.pruned
        out.print(f"{geometry.name}: kept {doc['n_functions']} of {doc['n_functions_full']} functions, "
                  f"dropped {len(doc['dropped_shells'])} shell(s); smallest eigenvalue "
                  f"{doc['smallest_eigenvalue']:.3e} (target {plan.target:.1e}, full basis "
                  f"{result.spectrum.smallest:.3e})", markup=False)
        from .report.terminal import print_remedies
        print_remedies([result], out, always=True)
        out.print("wrote " + ", ".join(str(p) for p in paths), markup=False)
    raise typer.Exit(0)


@app.command()
def demo(
    out_dir: Path = typer.Option(Path("reports"), "--out", "-o", help="Folder for the sample reports."),
    examples: Optional[Path] = typer.Option(None, "--examples", help="Folder with examples.toml and the geometries."),
):
    """Audit the bundled example geometries and write their reports (and an index)."""
    from .demo import find_examples, run_demo
    from .report.terminal import print_summary

    try:
        folder = examples or find_examples()
        outcome, index = run_demo(folder, out_dir)
    except AuditorError as exc:
        _fail(exc.message, exc.exit_code)
    print_summary(outcome.results, [(p, m) for p, m, _ in outcome.errors], out)
    out.print(f"wrote {len(outcome.written)} report file(s) and {index}")
    raise typer.Exit(0 if not outcome.errors else outcome.exit_code)


@app.command()
def gate(
    paths: List[str] = typer.Argument(..., help="Geometry files, folders (searched recursively), glob patterns, "
                                                "or @LIST: a text file with one of these a line."),
    basis: str = typer.Option(..., "--basis", "-b", help="Basis name pyscf knows, or a basis file (NWChem format)."),
    out_dir: Path = typer.Option(..., "--out", "-o", help="Folder for summary.csv/.parquet, junit.xml, run.json and items/."),
    basis_for: Optional[List[str]] = typer.Option(None, "--basis-for", help="Per-element basis, ELEMENT=BASIS; repeatable."),
    cartesian: bool = typer.Option(False, "--cartesian", help="Cartesian instead of spherical d, f, ... shells."),
    unit: str = typer.Option("angstrom", "--unit", help="Unit of the coordinates in the files: angstrom or bohr."),
    ghost: Optional[str] = typer.Option(None, "--ghost", help="Atoms (1-based) that carry functions only, in every item."),
    jobs: Optional[int] = typer.Option(None, "--jobs", "-j", help="Worker processes (default: the machine's cores)."),
    item_timeout: Optional[float] = typer.Option(None, "--item-timeout", help="Seconds one item may take (local engine); "
                                                                              "its worker is then stopped and the item is an error."),
    engine: str = typer.Option("local", "--engine", help="local (worker processes) or dask (a running Dask cluster)."),
    scheduler: Optional[str] = typer.Option(None, "--scheduler", help="Dask scheduler address, e.g. tcp://10.0.0.5:8786."),
    policy_file: Optional[Path] = typer.Option(None, "--policy", help="TOML policy: levels, per-basis levels, allowed failures."),
    caution: Optional[float] = typer.Option(None, "--caution", help="Caution level (overrides the policy file)."),
    fail: Optional[float] = typer.Option(None, "--fail", help="Fail level (overrides the policy file)."),
    baseline: Optional[Path] = typer.Option(None, "--baseline", help="An earlier summary.csv/.parquet: fail only on regressions."),
    drop_decades: Optional[float] = typer.Option(None, "--drop-decades", help="Baseline mode: a drop of the smallest "
                                                                              "eigenvalue by more decades than this regresses (default 1)."),
    cache_dir: Optional[Path] = typer.Option(None, "--cache-dir", help="Result cache folder (default $XDG_CACHE_HOME/auditor)."),
    no_cache: bool = typer.Option(False, "--no-cache", help="Neither read nor write the result cache."),
    worst: int = typer.Option(10, "--worst", help="Rows in the final table of the worst items."),
    spectrum: str = typer.Option("auto", "--spectrum", help="Eigen step: full (dense), large (factorizations and "
                                                          "Lanczos, no second copy of S) or auto (large from about 3000 functions)."),
    with_remedies: bool = typer.Option(False, "--remedies", help="Also work out the remedies of every item "
                                                                 "that needs them (slower; `check` and `prune` do it per file)."),
    fmt: str = typer.Option("json", "--format", "-f", help="json (summaries + items/*.json) or html "
                                                         "(also items/*.html and an index.html overview)."),
    quiet: bool = typer.Option(False, "--quiet", "-q", help="Print nothing but errors."),
):
    """Audit a set of geometries in parallel and gate it: summary table, JUnit XML, per-item JSON.

    Exit codes: 0 every item passes the policy, 1 an item fails, regressed or could not be read, 2 usage error.
    """
    from .api import make_spec
    from .batch import DaskEngine, GateOptions, LocalEngine, run_gate
    from .cache import ResultCache, default_cache_dir
    from .gate_policy import GatePolicy, load_baseline, load_gate_policy
    from .report.summary import item_label, worst_table

    try:
        if unit.lower() not in ("angstrom", "bohr"):
            raise UsageError(f"--unit must be angstrom or bohr, got {unit!r}")
        if jobs is not None and jobs < 1:
            raise UsageError(f"--jobs must be at least 1, got {jobs}")
        if engine not in ("local", "dask"):
            raise UsageError(f"--engine must be local or dask, got {engine!r}")
        if (engine == "dask") != bool(scheduler):
            raise UsageError("--engine dask and --scheduler ADDRESS go together")
        if drop_decades is not None and drop_decades < 0:
            raise UsageError("--drop-decades must not be negative")
        if fmt not in ("json", "html"):
            raise UsageError(f"--format must be json or html, got {fmt!r}")
        _check_spectrum_method(spectrum)
        if ghost:
            from .geometry import parse_atom_numbers
            parse_atom_numbers(ghost)
        gp = load_gate_policy(policy_file) if policy_file else GatePolicy()
        options = GateOptions(make_spec(basis, basis_for, cartesian), gp.levels_for(basis, caution, fail), unit, ghost,
                              spectrum, with_remedies)
        old = load_baseline(baseline) if baseline else None
        if engine == "dask":
            if item_timeout:
                err.print("note: --item-timeout is not enforced on the Dask engine")
            runner = DaskEngine(scheduler)
        else:
            runner = LocalEngine(jobs, item_timeout)
        cache = None if no_cache else ResultCache(cache_dir or default_cache_dir())
    except AuditorError as exc:
        _fail(exc.message, EXIT_USAGE)

    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn

    show = not quiet and err.is_terminal
    with Progress(TextColumn("auditing"), BarColumn(), MofNCompleteColumn(), TimeRemainingColumn(),
                  console=err, transient=True, disable=not show) as bar:
        task = bar.add_task("items", total=None)

        def progress(done: int, total: int) -> None:
            bar.update(task, completed=done, total=total)

        try:
            result = run_gate(paths, options, out_dir, runner, cache, gp, old, drop_decades, progress=progress,
                              html=fmt == "html")
        except AuditorError as exc:
            _fail(exc.message, exc.exit_code)
        finally:
            if cache is not None:
                cache.close()
    rows = result.run.rows
    if cache is not None and cache.failed_writes:
        why = f" ({cache.problem})" if cache.problem else ""
        err.print(f"note: {cache.failed_writes} result(s) could not be stored in the cache {cache.root}{why}",
                  markup=False)
    for r in rows:
        if r["verdict"] == "error":
            err.print(f"error: {r['error']}", highlight=False, markup=False)
    if not quiet:
        out.print(worst_table(rows, worst))
        for r in result.improvements:
            out.print(f"improved: {item_label(r)} ({r['change']})", markup=False)
        counts = ", ".join(f"{sum(r['outcome'] == k for r in rows)} {k}"
                           for k in ("ok", "blocked", "regressed", "allowed", "known")
                           if any(r["outcome"] == k for r in rows))
        out.print(f"{len(rows)} item(s): {counts}; {result.run.computed} audited, {result.run.cached} from the cache")
        top = ", ".join(Path(w).name for w in result.written if Path(w).parent == Path(out_dir))
        out.print(f"wrote {top} in {out_dir}/ and {len(rows)} report(s) in {out_dir}/items/", markup=False)
    raise typer.Exit(result.exit_code)


def main() -> None:
    """Console entry point: never a traceback unless AUDITOR_DEBUG is set."""
    import os

    try:
        if sys.argv[1:2] == ["gate"]:
            from .workers import start_early

            start_early(sys.argv[1:])
        app()
    except KeyboardInterrupt:
        err.print("interrupted")
        sys.exit(130)
    except Exception as exc:
        if os.environ.get("AUDITOR_DEBUG"):
            raise
        err.print(f"[bold red]error:[/] internal error ({type(exc).__name__}: {exc}); "
                  "set AUDITOR_DEBUG=1 to see the traceback".splitlines()[0])
        sys.exit(EXIT_INTERNAL)


if __name__ == "__main__":
    main()
