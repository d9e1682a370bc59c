"""A gate run: audit the items (cache first), write one report and one summary row per item,
judge them against the policy and the baseline, and write the summaries."""

from __future__ import annotations

import hashlib
import json
import os
import time
from collections.abc import Callable, Iterable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

from .. import __version__
from ..base.errors import EXIT_FAIL, EXIT_OK, UsageError
from ..base.files import TEMP_NAME, atomic_write, check_not_input, protect
from ..inputs.geometry import Molecule
from ..report.json_report import dumps_result
from ..report.junit import write_junit
from ..report.rows import BLOCKING, error_row, result_row
from ..report.summary_files import prefetch_libraries, write_summary
from .baseline import improvements, judge
from .cache import ResultCache, file_digest
from .engines import Engine
from .items import GEOMETRY_PATTERNS, GateOptions, Item, collect_items
from .periodic import Crystal
from .policy_file import GatePolicy
from .tasks import _geometry, item_key, item_payload, run_context

ITEMS_DIR = "items"

#: called after every item as progress(items done, items in all)
Progress = Callable[[int, int], None]


@dataclass
class BatchRun:
    rows: list[dict]
    seconds: dict = field(default_factory=dict)  # item -> seconds spent on it in this run
    computed: int = 0
    cached: int = 0
    errors: int = 0
    inputs: list[str] = field(default_factory=list)  # the input files (never overwritten)
    files: list[str] = field(default_factory=list)  # the item files written, relative to items/


def _same_text(path: Path, text: str) -> bool:
    try:
        return path.read_text(encoding="utf-8") == text
    except (OSError, UnicodeDecodeError):
        return False


def _with_path(message: str, path: str) -> str:
    return message if path in message else f"{path}: {message}"


def run_batch(
    args: list[str],
    options: GateOptions,
    out: Path,
    engine: Engine,
    cache: ResultCache | None = None,
    patterns: Sequence[str] = GEOMETRY_PATTERNS,
    progress: Progress | None = None,
) -> BatchRun:
    """Audit every item named by ``args``; write out/items/<item>.json as each finishes.

    Cached results are used as they are; fresh ones are stored. ``progress(done, total)``
    is called after every item. Rows come back in item order.
    """
    items_dir = Path(out) / ITEMS_DIR
    try:
        items_dir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise UsageError(f"{out}: cannot create the output folder ({exc.strerror})") from None
    if hasattr(engine, "warm_up") and (cache is None or not cache.path.exists()):
        engine.warm_up()  # nothing can come from the cache: start the workers' imports at once
    items = collect_items(args, options, patterns)
    with protect([it.path for it in items] + options.spec.files()):
        return _audit_items(items, options, items_dir, engine, cache, progress)


def _audit_items(
    items: list[Item],
    options: GateOptions,
    items_dir: Path,
    engine: Engine,
    cache: ResultCache | None,
    progress: Progress | None,
) -> BatchRun:
    state = _ItemsRun(items, options, items_dir, cache, progress)
    todo = state.plan(items)
    check = (options.spec, tuple(sorted({s for _, mol, _ in todo for s in mol.symbols})))
    if todo:
        prefetch_libraries()  # the summary writer needs them; meanwhile this process mostly waits
    tasks = [(it.name, item_payload(it.path, mol, g, state.context)) for it, mol, g in todo]
    engine.run(tasks, state.on_done, check=check)
    state.run.rows = [state.rows[it.name] for it in items]
    state.run.files = [f"{it.name}.json" for it in items]
    return state.run


def _frame(it: Item) -> int:
    """The 1-based frame of an item that was read (only unreadable files make items without one)."""
    if it.frame is None:
        raise ValueError(f"{it.path}: an item that was not read has no result")
    return it.frame


class _ItemsRun:
    """One run over the items: what is written as each item ends, the counts, and the items
    that wait for the audit of another one with the same geometry (``twins``)."""

    def __init__(
        self,
        items: list[Item],
        options: GateOptions,
        items_dir: Path,
        cache: ResultCache | None,
        progress: Progress | None,
    ):
        self.options = options
        self.items_dir = items_dir
        self.cache = cache
        self.progress = progress
        self.by_name = {it.name: it for it in items}
        self.rows: dict[str, dict] = {}
        self.run = BatchRun(rows=[], inputs=[it.path for it in items])
        self.basis = options.spec.describe()
        self.total = len(items)
        self.twins: dict[str, list[Item]] = {}  # items with the geometry of one being audited
        self.context: dict = run_context(options) if any(it.molecule is not None for it in items) else {}

    def plan(self, items: list[Item]) -> list[tuple[Item, Molecule | Crystal, dict]]:
        """Write what needs no audit (unreadable items, cache hits); the rest as (item,
        molecule, geometry) with one item per geometry (the others wait as its twins)."""
        todo: list[tuple[Item, Molecule | Crystal, dict]] = []
        for it in items:
            mol = it.molecule
            if it.error or mol is None:
                self.fail(it, it.error or "no geometry was read")
                continue
            geometry = _geometry(mol)
            it.key = item_key(geometry, self.context)
            hit = self.cache.get(it.key) if self.cache is not None else None
            if hit is not None:
                self.run.cached += 1
                self.finish(it, hit["text"], hit["data"])
            elif it.key in self.twins:
                self.twins[it.key].append(it)
            else:
                self.twins[it.key] = []
                todo.append((it, mol, geometry))
        return todo

    def write(self, it: Item, row: dict, report: str) -> None:
        """Write the item's report file (unless it holds this text already) and keep its row."""
        target = self.items_dir / f"{it.name}.json"
        if not _same_text(target, report):  # a rename costs more than a read on some file systems
            atomic_write(target, report)
        self.rows[it.name] = row
        if self.progress:
            self.progress(len(self.rows), self.total)

    def fail(self, it: Item, message: str) -> None:
        message = _with_path(message, it.path)
        self.run.errors += 1
        report = (
            json.dumps(
                {"schema": "auditor-item-error/1", "path": it.path, "frame": it.frame, "error": message}, indent=2
            )
            + "\n"
        )
        self.write(it, error_row(it.path, it.frame, it.name, self.basis, message), report)

    def finish(self, it: Item, text: str, short: dict) -> None:
        """``short``: the result's ``brief``; the whole report is parsed only when it
        has to be rewritten for this item (a hit filled from another file)."""
        frame = _frame(it)
        own = {"path": it.path, "frame": frame, "n_frames": it.n_frames}
        if any(short["input"].get(k) != v for k, v in own.items()):
            result = json.loads(text)
            result["input"].update(own)
            text = dumps_result(result, compact=True)
        self.write(it, result_row(it.path, frame, it.name, short), text)

    def on_done(self, name: str, reply: dict, seconds: float) -> None:
        """An engine's reply for one item: write it for the item and for its twins."""
        it = self.by_name[name]
        self.run.seconds[name] = reply.get("seconds", seconds)
        twins = self.twins.get(it.key, [])
        if "report" in reply:
            self.run.computed += 1
            # a Dask worker may run other versions than the key says: do not store its result
            if self.cache is not None and reply.get("versions") == self.context["versions"]:
                self.cache.put(it.key, reply["report"], reply["brief"])
            for each in [it, *twins]:
                self.finish(each, reply["report"], reply["brief"])
        else:
            for each in [it, *twins]:
                self.fail(each, reply.get("error", "no result"))
        self.run.cached += len(twins)  # served by the same computation


def _rows_digest(rows: list[dict]) -> str:
    text = json.dumps(rows, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _summary_stamps(rows_digest: str, files: Iterable[Path]) -> dict:
    """What run.json records to recognise the summary files on the next run."""
    return {"rows": rows_digest, **{Path(f).name: file_digest(f) for f in files}}


def _summaries_if_unchanged(out: Path, rows_digest: str) -> tuple[tuple[Path, Path], dict] | None:
    """(summary paths, stamps) when the summary files in ``out`` were written by an earlier
    run from exactly these rows and are untouched since (their SHA-256 recorded in
    run.json); else None. Spares a rerun of an unchanged set from rewriting them
    (and from importing pandas)."""
    try:
        stamps = json.loads((Path(out) / "run.json").read_text(encoding="utf-8")).get("summary_stamps") or {}
        files = (Path(out) / "summary.csv", Path(out) / "summary.parquet")
        if stamps.get("rows") != rows_digest or any(stamps.get(f.name) != file_digest(f) for f in files):
            return None
    except (OSError, ValueError, AttributeError):
        return None
    return files, stamps


LOCK_NAME = ".auditor-gate.lock"


@contextmanager
def output_lock(out: Path) -> Iterator[None]:
    """Hold an exclusive lock on ``out`` for one gate run: a second run into the same folder
    is refused at once with a clear line instead of mixing its files with the first's.
    The kernel releases the lock when the process ends, however it ends."""
    try:
        Path(out).mkdir(parents=True, exist_ok=True)
        fd = os.open(Path(out) / LOCK_NAME, os.O_RDWR | os.O_CREAT | getattr(os, "O_CLOEXEC", 0), 0o666)
    except OSError as exc:
        raise UsageError(f"{out}: cannot use the output folder ({exc.strerror})") from None
    try:
        try:
            import fcntl  # here: POSIX only

            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except ImportError:  # pragma: no cover - not POSIX: no lock
            pass
        except OSError:
            raise UsageError(
                f"{out}: another auditor gate run is writing to this folder; wait for it to end or choose another --out"
            ) from None
        yield
    finally:
        os.close(fd)


def _recorded_item_files(out: Path) -> set[str]:
    """Item files that earlier runs into ``out`` wrote, as recorded in their run.json."""
    try:
        stats = json.loads((Path(out) / "run.json").read_text(encoding="utf-8"))
        names = stats.get("item_files") or []
    except (OSError, ValueError, AttributeError):
        return set()
    return {n for n in names if isinstance(n, str) and n and "/" not in n and "\\" not in n and n not in (".", "..")}


def _remove_stale(items_dir: Path, previous: set[str], current: set[str]) -> None:
    """Delete what the tool itself wrote and no longer needs: reports of items that earlier
    runs recorded and this run did not produce, and temporary files of killed runs (named
    after one of those reports). Nothing else in the folder is touched."""
    ours = previous | current
    stale = [items_dir / n for n in sorted(previous - current)]
    try:
        stale += [p for p in items_dir.iterdir() if (m := TEMP_NAME.match(p.name)) and m.group("target") in ours]
    except OSError:
        pass
    for path in stale:
        try:
            if path.is_file() and not path.is_symlink():
                check_not_input(path)
                path.unlink()
        except (OSError, UsageError):
            pass


@dataclass
class GateOutcome:
    run: BatchRun
    improvements: list
    exit_code: int
    written: list


def run_gate(
    args: list[str],
    options: GateOptions,
    out: Path,
    engine: Engine,
    cache: ResultCache | None,
    gate_policy: GatePolicy | None = None,
    baseline: dict | None = None,
    drop_decades: float | None = None,
    patterns: Sequence[str] = GEOMETRY_PATTERNS,
    progress: Progress | None = None,
    html: bool = False,
) -> GateOutcome:
    """Audit the set, judge every item against the policy (and baseline), write
    summary.csv, summary.parquet, junit.xml and run.json under ``out``; with ``html``
    also items/<item>.html and the set overview index.html. Only files this run or an
    earlier one wrote (recorded in run.json) are ever replaced or deleted."""
    t0 = time.monotonic()
    with output_lock(out):
        previous = _recorded_item_files(out)
        run = run_batch(args, options, out, engine, cache, patterns, progress)
        with protect(run.inputs + options.spec.files()):
            return _finish_gate(run, options, out, cache, gate_policy, baseline, drop_decades, html, previous, t0)


def _finish_gate(
    run: BatchRun,
    options: GateOptions,
    out: Path,
    cache: ResultCache | None,
    gate_policy: GatePolicy | None,
    baseline: dict | None,
    drop_decades: float | None,
    html: bool,
    previous: set[str],
    t0: float,
) -> GateOutcome:
    judge(run.rows, gate_policy or GatePolicy(), baseline, drop_decades)
    digest = _rows_digest(run.rows)
    kept = _summaries_if_unchanged(out, digest)
    if kept is None:
        summaries = write_summary(run.rows, out)
        kept = summaries, _summary_stamps(digest, summaries)
    summaries, stamps = kept
    written = [*summaries, write_junit(run.rows, Path(out) / "junit.xml", run.seconds)]
    if html:
        # matplotlib loads only for HTML output: a warm run stays fast
        from ..report.overview import link_reports, write_item_pages, write_set_index

        pages = write_item_pages(out, run.rows)
        written += pages
        run.files += [p.name for p in pages]
        written.append(
            write_set_index(
                out,
                link_reports(out, run.rows),
                title=f"Gate: {options.spec.describe()}",
                policy=options.policy.as_dict(),
            )
        )
    code = EXIT_FAIL if any(r["outcome"] in BLOCKING for r in run.rows) else EXIT_OK
    outcomes: dict[str, int] = {}
    for r in run.rows:
        outcomes[r["outcome"]] = outcomes.get(r["outcome"], 0) + 1
    stats = {
        "items": len(run.rows),
        "computed": run.computed,
        "cached": run.cached,
        "errors": run.errors,
        "outcomes": outcomes,
        "exit_code": code,
        "seconds": round(time.monotonic() - t0, 3),
        "basis": options.spec.describe(),
        "policy": options.policy.as_dict(),
        "cache": str(cache.root) if cache is not None else None,
        "cache_write_errors": cache.failed_writes if cache is not None else 0,
        "version": __version__,
        "summary_stamps": stamps,
        "item_files": sorted(run.files),
    }
    _remove_stale(Path(out) / ITEMS_DIR, previous, set(run.files))
    written.append(Path(out) / "run.json")
    atomic_write(written[-1], json.dumps(stats, indent=2) + "\n")
    return GateOutcome(run, improvements(run.rows), code, written)
