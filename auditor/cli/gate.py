"""`auditor gate`: audit a set of geometries in parallel and gate it."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path
from typing import TYPE_CHECKING, Annotated

import typer

from ..base.errors import EXIT_USAGE, AuditorError, UsageError
from . import options as o
from .console import err, fail, out

if TYPE_CHECKING:
    from ..gate.cache import ResultCache
    from ..gate.engines import DaskEngine, LocalEngine
    from ..gate.items import GateOptions
    from ..gate.policy_file import GatePolicy
    from ..gate.run import GateOutcome
    from ..inputs.basis import BasisSpec

    Engine = LocalEngine | DaskEngine


# size: the signature declares one parameter per command-line option
def gate(
    paths: Annotated[
        list[str],
        typer.Argument(
            help="Geometry files, folders (searched recursively), glob patterns, "
            "or @LIST: a text file with one of these a line."
        ),
    ],
    out_dir: Annotated[
        Path, typer.Option("--out", "-o", help="Folder for summary.csv/.parquet, junit.xml, run.json and items/.")
    ],
    basis: o.Basis = None,
    basis_for: o.BasisFor = None,
    cartesian: o.Cartesian = False,
    basis_source: o.BasisSource = "pyscf",
    unit: o.Unit = "angstrom",
    ghost: Annotated[
        str | None, typer.Option("--ghost", help="Atoms (1-based) that carry functions only, in every item.")
    ] = None,
    input_format: o.InputFormat = None,
    jobs: Annotated[
        int | None, typer.Option("--jobs", "-j", help="Worker processes (default: the machine's cores).")
    ] = None,
    item_timeout: Annotated[
        float | None,
        typer.Option(
            "--item-timeout",
            help="Seconds one item may take (local engine); its worker is then stopped and the item is an error.",
        ),
    ] = None,
    engine: Annotated[
        str, typer.Option("--engine", help="local (worker processes) or dask (a running Dask cluster).")
    ] = "local",
    scheduler: Annotated[
        str | None, typer.Option("--scheduler", help="Dask scheduler address, e.g. tcp://10.0.0.5:8786.")
    ] = None,
    policy_file: Annotated[
        Path | None, typer.Option("--policy", help="TOML policy: levels, per-basis levels, allowed failures.")
    ] = None,
    caution: Annotated[
        float | None, typer.Option("--caution", help="Caution level (overrides the policy file).")
    ] = None,
    fail_level: Annotated[float | None, typer.Option("--fail", help="Fail level (overrides the policy file).")] = None,
    baseline: Annotated[
        Path | None, typer.Option("--baseline", help="An earlier summary.csv/.parquet: fail only on regressions.")
    ] = None,
    drop_decades: Annotated[
        float | None,
        typer.Option(
            "--drop-decades",
            help="Baseline mode: a drop of the smallest eigenvalue by more decades than this regresses (default 1).",
        ),
    ] = None,
    cache_dir: Annotated[
        Path | None, typer.Option("--cache-dir", help="Result cache folder (default $XDG_CACHE_HOME/auditor).")
    ] = None,
    no_cache: Annotated[bool, typer.Option("--no-cache", help="Neither read nor write the result cache.")] = False,
    worst: Annotated[int, typer.Option("--worst", help="Rows in the final table of the worst items.")] = 10,
    spectrum: o.Spectrum = "auto",
    with_remedies: Annotated[
        bool,
        typer.Option(
            "--remedies",
            help="Also work out the remedies of every item that "
            "needs them (slower; `check` and `prune` do it "
            "per file).",
        ),
    ] = False,
    fmt: Annotated[
        str,
        typer.Option(
            "--format",
            "-f",
            help="json (summaries + items/*.json) or html (also items/*.html and an index.html overview).",
        ),
    ] = "json",
    kmesh: o.KMesh = None,
    precision: o.Precision = None,
    quiet: o.Quiet = False,
    max_input_mb: o.MaxInputMb = o.MAX_INPUT_MB,
) -> None:
    """Audit a set of geometries in parallel and gate it: summary table, JUnit XML, per-item JSON.

    Exit codes: 0 every item passes the policy, 1 an item fails, regressed or could not be read, 2 usage error.
    """
    try:
        _check_options(unit, jobs, engine, scheduler, drop_decades, fmt, spectrum, ghost)
        spec = _spec(basis, basis_for, cartesian, basis_source)
        o.start_run(out_dir, max_input_mb)
        gate_policy, options = _gate_options(
            spec, unit, ghost, policy_file, caution, fail_level, spectrum, with_remedies
        )
        o.check_input_format(input_format)
        options = replace(options, periodic=o.periodic_options(kmesh, precision), input_format=input_format)
        old = _baseline_rows(baseline)
        runner = _engine(scheduler, jobs, item_timeout)
        cache = _cache(cache_dir, no_cache)
    except AuditorError as exc:
        fail(exc.message, EXIT_USAGE)
    try:
        result = _run(paths, options, out_dir, runner, cache, gate_policy, old, drop_decades, fmt == "html", quiet)
    except AuditorError as exc:
        fail(exc.message, exc.exit_code)
    finally:
        if cache is not None:
            cache.close()
    _report(result, cache, out_dir, worst, quiet)
    raise typer.Exit(result.exit_code)


# The package modules below are imported inside the functions that use them: `auditor gate`
# starts its worker processes before numpy and pyscf load in this process.


def _check_options(
    unit: str,
    jobs: int | None,
    engine: str,
    scheduler: str | None,
    drop_decades: float | None,
    fmt: str,
    spectrum: str,
    ghost: str | None,
) -> None:
    """Raise a UsageError for the first option value that cannot work."""
    o.check_unit(unit)
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
    o.check_spectrum_method(spectrum)
    o.check_ghost(ghost)


def _spec(basis: str | None, basis_for: list[str] | None, cartesian: bool, source: str) -> BasisSpec:
    from ..pipeline.run import make_spec

    return make_spec(basis, basis_for, cartesian, source)


def _gate_options(
    spec: BasisSpec,
    unit: str,
    ghost: str | None,
    policy_file: Path | None,
    caution: float | None,
    fail_level: float | None,
    spectrum: str,
    with_remedies: bool,
) -> tuple[GatePolicy, GateOptions]:
    """The gate policy (from the policy file, if any) and what every item is audited with."""
    from ..gate.items import GateOptions
    from ..gate.policy_file import GatePolicy, load_gate_policy

    gate_policy = load_gate_policy(policy_file) if policy_file else GatePolicy()
    options = GateOptions(
        spec,
        gate_policy.levels_for(spec.default, caution, fail_level),
        unit,
        ghost,
        spectrum,
        with_remedies,
    )
    return gate_policy, options


def _baseline_rows(baseline: Path | None) -> dict | None:
    from ..gate.baseline import load_baseline

    return load_baseline(baseline) if baseline else None


def _engine(scheduler: str | None, jobs: int | None, item_timeout: float | None) -> Engine:
    """The Dask engine when a scheduler is given (_check_options makes --engine dask and
    --scheduler go together), else local worker processes."""
    from ..gate.engines import DaskEngine, LocalEngine

    if scheduler:
        if item_timeout:
            err.print("note: --item-timeout is not enforced on the Dask engine")
        return DaskEngine(scheduler)
    return LocalEngine(jobs, item_timeout)


def _cache(cache_dir: Path | None, no_cache: bool) -> ResultCache | None:
    from ..gate.cache import ResultCache, default_cache_dir

    return None if no_cache else ResultCache(cache_dir or default_cache_dir())


def _run(
    paths: list[str],
    options: GateOptions,
    out_dir: Path,
    runner: Engine,
    cache: ResultCache | None,
    gate_policy: GatePolicy,
    old: dict | None,
    drop_decades: float | None,
    html: bool,
    quiet: bool,
) -> GateOutcome:
    """run_gate with a progress bar on a terminal."""
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn

    from ..gate.run import run_gate

    show = not quiet and err.is_terminal
    with Progress(
        TextColumn("auditing"),
        BarColumn(),
        MofNCompleteColumn(),
        TimeRemainingColumn(),
        console=err,
        transient=True,
        disable=not show,
    ) as bar:
        task = bar.add_task("items", total=None)

        def progress(done: int, total: int) -> None:
            bar.update(task, completed=done, total=total)

        return run_gate(
            paths, options, out_dir, runner, cache, gate_policy, old, drop_decades, progress=progress, html=html
        )


def _report(result: GateOutcome, cache: ResultCache | None, out_dir: Path, worst: int, quiet: bool) -> None:
    """Errors on standard error; the worst items, improvements and counts on standard output."""
    from ..report.rows import item_label
    from ..report.terminal import worst_table

    rows = result.run.rows
    for note in cache.notes if cache is not None else []:
        err.print(f"note: {note}", markup=False)
    if cache is not None and cache.failed_writes:
        why = f" ({cache.problem})" if cache.problem else ""
        err.print(
            f"note: {cache.failed_writes} result(s) could not be stored in the cache {cache.root}{why}", markup=False
        )
    for r in rows:
        if r["verdict"] == "error":
            err.print(f"error: {r['error']}", highlight=False, markup=False)
    if quiet:
        return
    out.print(worst_table(rows, worst))
    for r in result.improvements:
        out.print(f"improved: {item_label(r)} ({r['change']})", markup=False)
    counts = ", ".join(
        f"{sum(r['outcome'] == k for r in rows)} {k}"
        for k in ("ok", "blocked", "regressed", "allowed", "known")
        if any(r["outcome"] == k for r in rows)
    )
    if cache is not None:
        served = f", {result.run.cached} from the cache"
    else:  # --no-cache: only items with the geometry of another item are served without an audit
        served = f", {result.run.cached} the same as another item" if result.run.cached else ""
    out.print(f"{len(rows)} item(s): {counts}; {result.run.computed} audited{served}", markup=False)
    top = ", ".join(Path(w).name for w in result.written if Path(w).parent == Path(out_dir))
    out.print(f"wrote {top} in {out_dir}/ and {len(rows)} report(s) in {out_dir}/items/", markup=False)
