"""Sets of geometries: collect the items, audit them in worker processes or on a Dask
cluster, reuse cached results, and write one JSON report and one summary row per item.

Workers and the cache only ever exchange JSON text; the audit itself is
``api.prepare`` + ``api.audit_prepared``, run inside the worker.
"""
from __future__ import annotations

import glob
import hashlib
import json
import multiprocessing as mp
import os
import signal
import time
from collections import deque
from contextlib import contextmanager
from dataclasses import dataclass, field
from multiprocessing.connection import wait as wait_any
from pathlib import Path

from . import __version__
from .basis import BasisSpec
from .cache import ResultCache, content_key, file_digest
from .errors import AuditorError, UsageError, failure
from .geometry import Molecule
from .policy import Policy
from .report import TEMP_NAME, atomic_write, check_not_input, protect, report_stem, unique_name
from .report.summary import brief, error_row, result_row
from .workers import start_server, worker_context, worker_env

#: file names a directory argument contributes (recursively)
GEOMETRY_PATTERNS = ("*.xyz", "*.extxyz")
ITEMS_DIR = "items"


@dataclass(frozen=True)
class GateOptions:
    """What every item of a run is audited with."""

    spec: BasisSpec
    policy: Policy
    unit: str = "angstrom"
    ghost: str | None = None
    spectrum_method: str = "auto"
    remedies: bool = False    # remedies cost several times the audit on small molecules; opt in


@dataclass
class Item:
    """One frame of one file. ``name`` is unique in the run: DIR/items/<name>.json."""

    path: str
    frame: int | None            # 1-based; None when the file could not be read
    n_frames: int = 1
    molecule: Molecule | None = None
    error: str = ""
    name: str = ""
    key: str = ""


# ---------------------------------------------------------------- collecting items

def display_path(p: str | Path) -> str:
    """The path relative to the working folder when it lies below it, else absolute (posix)."""
    absolute = os.path.abspath(p)
    rel = os.path.relpath(absolute)
    return Path(rel if not rel.startswith("..") else absolute).as_posix()


def _has_magic(s: str) -> bool:
    return any(c in s for c in "*?[")


def expand_inputs(args: list[str], patterns=GEOMETRY_PATTERNS, _depth: int = 0) -> tuple[list[Path], list[tuple[str, str]]]:
    """Files named by ``args`` (files, folders searched recursively, glob patterns, and
    ``@LIST`` text files with one such argument a line, relative to the list file),
    plus (argument, message) for arguments that name nothing."""
    files: list[Path] = []
    missing: list[tuple[str, str]] = []
    for arg in args:
        arg = str(arg)
        if arg.startswith("@") and not os.path.exists(arg):
            listing = Path(arg[1:])
            try:
                lines = listing.read_text(encoding="utf-8").splitlines()
            except (OSError, UnicodeDecodeError):
                missing.append((arg[1:], f"{arg[1:]}: cannot read the list of paths"))
                continue
            if _depth > 8:
                raise UsageError(f"{listing}: lists of paths nest too deeply")
            entries = [ln.strip() for ln in lines if ln.strip() and not ln.lstrip().startswith("#")]
            base = listing.parent
            entries = [e if os.path.isabs(e) or e.startswith("@") else str(base / e) for e in entries]
            f, m = expand_inputs(entries, patterns, _depth + 1)
            files += f
            missing += m
            continue
        p = Path(arg)
        if p.is_dir():
            found = {q for pat in patterns for q in p.rglob(pat)
                     if q.is_file() and not any(part.startswith(".") for part in q.relative_to(p).parts)}
            if not found:
                missing.append((arg, f"{arg}: folder holds no geometry file ({', '.join(patterns)})"))
            files += sorted(found)
        elif p.exists():
            files.append(p)
        elif _has_magic(arg):
            hits = sorted(glob.glob(arg, recursive=True))
            if not hits:
                missing.append((arg, f"{arg}: pattern matches no file"))
            for h in hits:
                f, m = expand_inputs([h], patterns, _depth + 1) if os.path.isdir(h) else ([Path(h)], [])
                files += f
                missing += m
        else:
            missing.append((arg, f"{arg}: no such file or folder"))
    return files, missing


def collect_items(args: list[str], options: GateOptions, patterns=GEOMETRY_PATTERNS) -> list[Item]:
    """Every frame of every file as an item, sorted by (path, frame); unreadable files
    and arguments that name nothing become error items."""
    from .api import load_molecules

    files, missing = expand_inputs(args, patterns)
    items: list[Item] = [Item(display_path(a) if os.path.isabs(a) else a, None, error=m) for a, m in missing]
    seen: set[str] = set()
    for f in files:
        real = os.path.realpath(f)
        if real in seen:
            continue
        seen.add(real)
        shown = display_path(f)
        try:
            frames = load_molecules(f, unit=options.unit, ghost=options.ghost)
        except AuditorError as exc:
            items.append(Item(shown, None, error=exc.message))
            continue
        for mol in frames:
            items.append(Item(shown, mol.frame + 1, mol.n_frames, mol))
    items.sort(key=lambda it: (it.path, it.frame or 0))
    used: set[str] = set()
    for it in items:
        flat = it.path.lstrip("/").replace("../", "up__").replace("/", "__")
        flat = "".join(c if c.isalnum() or c in "._-" else "_" for c in flat)
        it.name = unique_name(report_stem(flat, it.frame or 1, it.n_frames), used)
    return items


# ---------------------------------------------------------------- content keys and payloads

def _pyscf_version() -> str:
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("pyscf")
    except PackageNotFoundError:
        return "unknown"


def _versions() -> dict:
    """The versions a result depends on, where it is computed."""
    return {"auditor": __version__, "pyscf": _pyscf_version()}


def _geometry(mol: Molecule) -> dict:
    return {
        "symbols": list(mol.symbols),
        "coords": [[float(x) for x in row] for row in mol.coords],
        "ghost": [bool(g) for g in mol.ghost],
        "charge": int(mol.charge),
        "multiplicity": mol.multiplicity,
    }


def run_context(options: GateOptions) -> dict:
    """Everything besides the geometry that a result depends on (part of every cache key)."""
    names = [options.spec.default, *options.spec.per_element.values()]
    files = {n: file_digest(Path(n).expanduser()) for n in names if Path(n).expanduser().is_file()}
    return {
        "basis": options.spec.as_dict(),
        "basis_files": files,
        "policy": options.policy.as_dict(),
        "spectrum_method": options.spectrum_method,
        "remedies": options.remedies,
        "versions": _versions(),
    }


def item_key(geometry: dict, context: dict) -> str:
    """Content hash of (geometry, basis, options, versions); the file name plays no part."""
    return content_key({"geometry": geometry, **context})


def item_payload(item: Item, geometry: dict, context: dict) -> str:
    """JSON text that a worker needs to audit ``item`` (``context``: ``run_context``)."""
    mol = item.molecule
    return json.dumps({
        "geometry": geometry, "source": item.path, "frame": mol.frame, "n_frames": mol.n_frames,
        "basis": context["basis"], "policy": context["policy"], "spectrum_method": context["spectrum_method"],
        "remedies": context["remedies"], "versions": context["versions"],
    })


def run_item(payload: str) -> str:
    """Audit one item (worker side): JSON text in; JSON text out, {"report": <report JSON
    text>, "brief": ..., "versions": ...} or {"error": "..."}."""
    import numpy as np

    from .api import audit_prepared, prepare
    from .report.json import dumps_result

    p = json.loads(payload)
    t0 = time.perf_counter()
    try:
        g = p["geometry"]
        mol = Molecule(tuple(g["symbols"]), np.asarray(g["coords"], dtype=float), tuple(g["ghost"]),
                       charge=g["charge"], multiplicity=g["multiplicity"], source=p["source"],
                       frame=p["frame"], n_frames=p["n_frames"])
        spec = BasisSpec(p["basis"]["default"], dict(p["basis"]["per_element"]), bool(p["basis"]["cartesian"]))
        result = audit_prepared(prepare(mol, spec, p["spectrum_method"]), Policy(**p["policy"]),
                                p["spectrum_method"], remedies=bool(p.get("remedies", False))).as_dict()
        return json.dumps({"seconds": round(time.perf_counter() - t0, 6), "report": dumps_result(result, compact=True),
                           "brief": brief(result), "versions": _versions()})
    except Exception as exc:  # an item must never take the run down; report it as that item's error
        return json.dumps({"error": failure(exc)[0]})


def check_basis_names(spec: BasisSpec, elements) -> None:
    """A basis name that neither pyscf nor the file system knows is a usage error, not one
    error per item. (Imports pyscf: runs where the audits run.)"""
    from .basis import load_shells
    from .errors import InputError

    elements = set(elements)
    for name in sorted({spec.for_element(el) for el in elements}):
        users = sorted(el for el in elements if spec.for_element(el) == name)
        try:
            load_shells(name, users[0])
        except InputError as exc:
            if exc.message.startswith("unknown basis name"):
                raise UsageError(exc.message) from None


def _preflight(check: tuple | None) -> str:
    """Run ``check_basis_names(*check)``; the usage error's message, or "" when fine."""
    if check is None:
        return ""
    try:
        check_basis_names(*check)
    except UsageError as exc:
        return exc.message
    return ""


# ---------------------------------------------------------------- local engine

def _worker_main(conn, task, check=None) -> None:
    """Worker process: import the integral library once, check the basis names, then
    audit items until told to stop."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the parent handles Ctrl-C and ends its workers
    try:
        from . import api  # noqa: F401
        import pyscf.gto  # noqa: F401

        problem = _preflight(check)
        conn.send(("unusable", problem) if problem else ("ready", ""))
        while True:
            payload = conn.recv()
            if payload is None:
                return
            conn.send(("done", task(payload)))
    except (EOFError, BrokenPipeError, ConnectionResetError):
        return  # the parent is gone


#: a second item is queued in a worker's pipe only when its payload is this small, so
#: that the parent can never block on a send while the worker blocks on sending a result
_PIPELINE_BYTES = 16 * 1024


class _Worker:
    def __init__(self, ctx, task, check=None):
        self.conn, child = ctx.Pipe()
        self.proc = ctx.Process(target=_worker_main, args=(child, task, check), daemon=True)
        self.proc.start()
        child.close()
        self.ready = False
        self.tasks: deque[tuple[str, str]] = deque()   # sent and not answered; the first is running
        self.started = 0.0                               # when the first of them started

    def wants(self) -> bool:
        """Room for another item: none in hand, or one whose successor can wait in the pipe."""
        return self.ready and len(self.tasks) < 2

    def assign(self, name: str, payload: str) -> None:
        if not self.tasks:
            self.started = time.monotonic()
        self.tasks.append((name, payload))
        self.conn.send(payload)

    def finished(self) -> str:
        name, _ = self.tasks.popleft()
        self.started = time.monotonic()
        return name

    def kill(self) -> None:
        if self.proc.is_alive():
            self.proc.kill()
        self.proc.join(5)
        self.conn.close()


class LocalEngine:
    """Worker processes on this machine (from a fork server or spawned, never forked from
    this process). Each runs one item at a time and has at most one more waiting, so it
    never idles while this process writes results.

    A worker that dies, or that runs longer than ``timeout`` seconds on one item, is
    replaced; only that item is recorded as an error, and the one waiting behind it is
    given to another worker.
    """

    def __init__(self, jobs: int | None = None, timeout: float | None = None, task=run_item):
        cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)
        self.jobs = max(1, jobs or cores)
        # One BLAS/OpenMP thread per worker: on matrices of a few hundred functions more
        # threads gain little on an idle machine and lose many-fold on a busy one.
        self.threads = 1
        self.timeout = timeout if timeout and timeout > 0 else None
        self.task = task

    def warm_up(self) -> None:
        """Start the fork server now (it imports pyscf in the background) when something
        will surely be computed, so that the import overlaps reading the inputs."""
        start_server(self.threads)

    def run(self, tasks: list[tuple[str, str]], on_done, check: tuple | None = None) -> None:
        """Run (name, payload) tasks; call on_done(name, reply dict, seconds) as each ends.

        ``check``: (BasisSpec, elements) that every worker checks before its first item
        (``check_basis_names``); a failure is raised here as UsageError, before any item runs.
        """
        queue = deque(tasks)
        if not queue:
            return
        ctx = worker_context()
        workers: list[_Worker] = []
        failed_starts = 0

        def start() -> _Worker:
            nonlocal ctx
            with worker_env(self.threads):
                try:
                    return _Worker(ctx, self.task, check)
                except OSError:  # no fork server here (e.g. no room for its socket): spawn instead
                    if ctx.get_start_method() != "forkserver":
                        raise
                    ctx = mp.get_context("spawn")
                    return _Worker(ctx, self.task, check)

        def feed() -> None:
            for w in workers:
                while w is not None and queue and w.wants() and (not w.tasks or len(queue[0][1]) <= _PIPELINE_BYTES):
                    w.assign(*queue.popleft())

        try:
            for _ in range(min(self.jobs, len(queue))):
                workers.append(start())  # one at a time, so that a failed start leaves none unstopped
            while queue or any(w.tasks for w in workers):
                feed()
                wait_any([w.conn for w in workers] + [w.proc.sentinel for w in workers],
                         self._wait_time(workers))
                for i, w in enumerate(workers):
                    replies, died = [], False
                    try:
                        while w.conn.poll():
                            kind, text = w.conn.recv()
                            if kind == "ready":
                                w.ready = True
                            elif kind == "unusable":
                                raise UsageError(text)
                            else:
                                seconds = time.monotonic() - w.started
                                replies.append((w.finished(), text, seconds))
                    except (EOFError, OSError):
                        died = True
                    if replies:
                        feed()  # hand out the next items before writing these results
                        for name, text, seconds in replies:
                            on_done(name, json.loads(text), seconds)
                    died = died or not w.proc.is_alive()
                    late = bool(w.tasks) and self.timeout and time.monotonic() - w.started > self.timeout
                    if not (died or late):
                        continue
                    w.kill()
                    if w.tasks:
                        why = (f"took longer than the item timeout ({self.timeout:g} s); the worker was stopped"
                               if late and not died else
                               f"the worker process died (exit code {w.proc.exitcode}) while auditing this item")
                        on_done(w.tasks[0][0], {"error": why}, time.monotonic() - w.started)
                        queue.extendleft(reversed(list(w.tasks)[1:]))  # waiting, never started: run elsewhere
                    elif not w.ready:
                        failed_starts += 1
                        if failed_starts > 2 * self.jobs:
                            raise AuditorError(f"worker processes fail to start (exit code {w.proc.exitcode})")
                    workers[i] = start() if queue else None
                workers = [w for w in workers if w is not None]
        finally:
            for w in workers:
                try:
                    if w.proc.is_alive() and not w.tasks:
                        w.conn.send(None)
                except OSError:
                    pass
            for w in workers:
                w.proc.join(2 if not w.tasks else 0)
                w.kill()

    def _wait_time(self, workers) -> float:
        if not self.timeout:
            return 5.0
        now = time.monotonic()
        left = [self.timeout - (now - w.started) for w in workers if w.tasks]
        return max(0.01, min(left, default=5.0))


# ---------------------------------------------------------------- Dask engine

def _check_reachable(address: str, seconds: float = 5.0) -> None:
    """Fail fast on a tcp:// address that refuses connections (Dask itself retries until its timeout)."""
    import socket
    from urllib.parse import urlsplit

    if not address.startswith("tcp://"):
        return
    try:
        parts = urlsplit(address)
        host, port = parts.hostname, parts.port
    except ValueError:
        raise UsageError(f"cannot read the scheduler address {address!r}") from None
    if not host or not port:
        raise UsageError(f"the scheduler address {address!r} needs a host and a port")
    try:
        socket.create_connection((host, port), timeout=seconds).close()
    except OSError as exc:
        raise UsageError(f"cannot reach the Dask scheduler at {address} ({exc.strerror or exc})") from None


class DaskEngine:
    """Items as tasks on a running Dask distributed scheduler (JSON text in and out).

    The workers must have auditor installed. ``--item-timeout`` is not enforced here:
    Dask cannot stop a running task.
    """

    def __init__(self, address: str, connect_timeout: float = 20.0):
        self.address = address
        self.connect_timeout = connect_timeout

    def run(self, tasks: list[tuple[str, str]], on_done, check: tuple | None = None) -> None:
        if not tasks:
            return
        if check is not None:
            check_basis_names(*check)
        try:
            from dask.distributed import Client, as_completed
        except ImportError:
            raise UsageError("--engine dask needs dask[distributed]: pip install 'auditor[dask]'") from None
        _check_reachable(self.address)
        try:
            client = Client(self.address, timeout=self.connect_timeout, set_as_default=False)
        except (OSError, TimeoutError, ValueError) as exc:
            raise UsageError(f"cannot reach the Dask scheduler at {self.address} ({exc})") from None
        with client:
            started = time.monotonic()
            futures = {client.submit(run_item, payload, pure=False): name for name, payload in tasks}
            for fut in as_completed(futures, loop=client.loop):
                try:
                    reply = json.loads(fut.result())
                except Exception as exc:  # a lost worker or a task Dask gave up on
                    reply = {"error": f"the Dask task failed ({type(exc).__name__}: {exc})"}
                on_done(futures[fut], reply, time.monotonic() - started)


# ---------------------------------------------------------------- the run

@dataclass
class BatchRun:
    rows: list[dict]
    seconds: dict = field(default_factory=dict)   # item -> seconds spent on it in this run
    computed: int = 0
    cached: int = 0
    errors: int = 0
    inputs: list[str] = field(default_factory=list)   # the input files (never overwritten)
    files: list[str] = field(default_factory=list)    # the item files written, relative to items/


def _same_text(path: Path, text: str) -> bool:
    try:
        return path.read_text(encoding="utf-8") == text
    except (OSError, UnicodeDecodeError):
        return False


def _with_path(message: str, path: str) -> str:
    return message if path in message else f"{path}: {message}"


def run_batch(args: list[str], options: GateOptions, out: Path, engine, cache: ResultCache | None = None,
              patterns=GEOMETRY_PATTERNS, progress=None) -> BatchRun:
    """Audit every item named by ``args``; write out/items/<item>.json as each finishes.

    Cached results are used as they are; fresh ones are stored. ``progress(done, total)``
    is called after every item. Rows come back in item order.
    """
    from .report.json import dumps_result

    items_dir = Path(out) / ITEMS_DIR
    try:
        items_dir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise UsageError(f"{out}: cannot create the output folder ({exc.strerror})") from None
    if hasattr(engine, "warm_up") and (cache is None or not cache.path.exists()):
        engine.warm_up()   # nothing can come from the cache: start the workers' imports at once
    items = collect_items(args, options, patterns)
    with protect([it.path for it in items] + options.spec.files()):
        return _audit_items(items, options, items_dir, engine, cache, progress)


def _audit_items(items: list[Item], options: GateOptions, items_dir: Path, engine, cache, progress) -> BatchRun:
    from .report.json import dumps_result

    by_name = {it.name: it for it in items}
    rows: dict[str, dict] = {}
    run = BatchRun(rows=[], inputs=[it.path for it in items])
    basis = options.spec.describe()
    total = len(items)

    def done(it: Item, row: dict, report: str) -> None:
        target = items_dir / f"{it.name}.json"
        if not _same_text(target, report):  # a rename costs more than a read on some file systems
            atomic_write(target, report)
        rows[it.name] = row
        if progress:
            progress(len(rows), total)

    def fail(it: Item, message: str) -> None:
        message = _with_path(message, it.path)
        run.errors += 1
        report = json.dumps({"schema": "auditor-item-error/1", "path": it.path, "frame": it.frame,
                             "error": message}, indent=2) + "\n"
        done(it, error_row(it.path, it.frame, it.name, basis, message), report)

    def finish(it: Item, text: str, short: dict) -> None:
        """``short``: the result's ``brief``; the whole report is parsed only when it
        has to be rewritten for this item (a hit filled from another file)."""
        own = {"path": it.path, "frame": it.frame, "n_frames": it.n_frames}
        if any(short["input"].get(k) != v for k, v in own.items()):
            result = json.loads(text)
            result["input"].update(own)
            text = dumps_result(result, compact=True)
        done(it, result_row(it.path, it.frame, it.name, short), text)

    twins: dict[str, list[Item]] = {}   # items with the geometry of one being audited

    def on_done(name: str, reply: dict, seconds: float) -> None:
        it = by_name[name]
        run.seconds[name] = reply.get("seconds", seconds)
        if "report" in reply:
            run.computed += 1
            # a Dask worker may run other versions than the key says: do not store its result
            if cache is not None and reply.get("versions") == context["versions"]:
                cache.put(it.key, reply["report"], reply["brief"])
            for each in [it, *twins.get(it.key, [])]:
                finish(each, reply["report"], reply["brief"])
        else:
            for each in [it, *twins.get(it.key, [])]:
                fail(each, reply.get("error", "no result"))
        run.cached += len(twins.get(it.key, []))  # served by the same computation

    context = run_context(options) if any(it.molecule is not None for it in items) else {}
    todo: list[tuple[Item, dict]] = []
    for it in items:
        if it.error:
            fail(it, it.error)
            continue
        geometry = _geometry(it.molecule)
        it.key = item_key(geometry, context)
        hit = cache.get(it.key) if cache is not None else None
        if hit is not None:
            run.cached += 1
            finish(it, hit["text"], hit["data"])
        elif it.key in twins:
            twins[it.key].append(it)
        else:
            twins[it.key] = []
            todo.append((it, geometry))
    check = (options.spec, tuple(sorted({s for it, _ in todo for s in it.molecule.symbols})))
    if todo:
        from .report.summary import prefetch_libraries

        prefetch_libraries()  # the summary writer needs them; meanwhile this process mostly waits
    engine.run([(it.name, item_payload(it, g, context)) for it, g in todo], on_done, check=check)
    run.rows = [rows[it.name] for it in items]
    run.files = [f"{it.name}.json" for it in items]
    return run


# ---------------------------------------------------------------- the gate

def _rows_digest(rows: list[dict]) -> str:
    text = json.dumps(rows, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _summary_stamps(rows_digest: str, files) -> dict:
    """What run.json records to recognise the summary files on the next run."""
    return {"rows": rows_digest, **{Path(f).name: file_digest(f) for f in files}}


def _summaries_if_unchanged(out: Path, rows_digest: str):
    """(summary paths, stamps) when the summary files in ``out`` were written by an earlier
    run from exactly these rows and are untouched since (their SHA-256 recorded in
    run.json); else (None, None). Spares a rerun of an unchanged set from rewriting them
    (and from importing pandas)."""
    try:
        stamps = json.loads((Path(out) / "run.json").read_text(encoding="utf-8")).get("summary_stamps") or {}
        files = [Path(out) / "summary.csv", Path(out) / "summary.parquet"]
        if stamps.get("rows") != rows_digest or any(stamps.get(f.name) != file_digest(f) for f in files):
            return None, None
    except (OSError, ValueError, AttributeError):
        return None, None
    return files, stamps


LOCK_NAME = ".auditor-gate.lock"


@contextmanager
def output_lock(out: Path):
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
            import fcntl

            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except ImportError:  # pragma: no cover - not POSIX: no lock
            pass
        except OSError:
            raise UsageError(f"{out}: another auditor gate run is writing to this folder; "
                             "wait for it to end or choose another --out") from None
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
        stale += [p for p in items_dir.iterdir()
                  if (m := TEMP_NAME.match(p.name)) and m.group("target") in ours]
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


def run_gate(args: list[str], options: GateOptions, out: Path, engine, cache: ResultCache | None,
             gate_policy=None, baseline: dict | None = None, drop_decades: float | None = None,
             patterns=GEOMETRY_PATTERNS, progress=None, html: bool = False) -> GateOutcome:
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


def _finish_gate(run, options, out, cache, gate_policy, baseline, drop_decades, html, previous, t0) -> GateOutcome:
    from .errors import EXIT_FAIL, EXIT_OK
    from .gate_policy import BLOCKING, GatePolicy, improvements, judge
    from .report.junit import write_junit
    from .report.summary import write_summary

    judge(run.rows, gate_policy or GatePolicy(), baseline, drop_decades)
    digest = _rows_digest(run.rows)
    summaries, stamps = _summaries_if_unchanged(out, digest)
    if summaries is None:
        summaries = write_summary(run.rows, out)
        stamps = _summary_stamps(digest, summaries)
    written = [*summaries, write_junit(run.rows, Path(out) / "junit.xml", run.seconds)]
    if html:
        from .report.set_index import link_reports, write_item_pages, write_set_index

        pages = write_item_pages(out, run.rows)
        written += pages
        run.files += [p.name for p in pages]
        written.append(write_set_index(out, link_reports(out, run.rows),
                                       title=f"Gate: {options.spec.describe()}", policy=options.policy.as_dict()))
    code = EXIT_FAIL if any(r["outcome"] in BLOCKING for r in run.rows) else EXIT_OK
    outcomes: dict[str, int] = {}
    for r in run.rows:
        outcomes[r["outcome"]] = outcomes.get(r["outcome"], 0) + 1
    stats = {
        "items": len(run.rows), "computed": run.computed, "cached": run.cached, "errors": run.errors,
        "outcomes": outcomes, "exit_code": code, "seconds": round(time.monotonic() - t0, 3),
        "basis": options.spec.describe(), "policy": options.policy.as_dict(),
        "cache": str(cache.root) if cache is not None else None,
        "cache_write_errors": cache.failed_writes if cache is not None else 0, "version": __version__,
        "summary_stamps": stamps,
        "item_files": sorted(run.files),
    }
    _remove_stale(Path(out) / ITEMS_DIR, previous, set(run.files))
    written.append(Path(out) / "run.json")
    atomic_write(written[-1], json.dumps(stats, indent=2) + "\n")
    return GateOutcome(run, improvements(run.rows), code, written)
