"""Where items run: worker processes on this machine, or a Dask cluster (JSON text in and out)."""

from __future__ import annotations

import json
import multiprocessing as mp
import os
import signal
import socket
import threading
import time
from collections import deque
from collections.abc import Callable
from multiprocessing.connection import Connection
from multiprocessing.connection import wait as wait_any
from typing import Any, Protocol
from urllib.parse import urlsplit

from ..base.errors import AuditorError, UsageError
from .tasks import BasisCheck, _preflight, check_basis_names, run_item
from .workers import WorkerContext, start_server, worker_context, worker_env

#: what a worker runs on every item: payload JSON text in, reply JSON text out
Task = Callable[[str], str]
#: called as each item ends: (item name, reply dict, seconds)
OnDone = Callable[[str, dict, float], None]


class Engine(Protocol):
    """Where a gate run's items are audited (LocalEngine, DaskEngine). An engine may also
    have ``warm_up()``, called when nothing can come from the cache."""

    def run(self, tasks: list[tuple[str, str]], on_done: OnDone, check: BasisCheck | None = None) -> None:
        """Audit the (name, payload) tasks; call ``on_done`` as each one ends."""


def _worker_main(conn: Connection, task: Task, check: BasisCheck | None = None) -> None:
    """Worker process: import the integral library once, check the basis names, then
    audit items until told to stop."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the parent handles Ctrl-C and ends its workers
    try:
        # here, not at the top: the parent process of a gate run never imports pyscf
        import pyscf.gto  # noqa: F401

        from ..pipeline import run  # noqa: F401

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
    def __init__(self, ctx: WorkerContext, task: Task, check: BasisCheck | None = None):
        self.conn, child = ctx.Pipe()
        self.proc = ctx.Process(target=_worker_main, args=(child, task, check), daemon=True)
        self.proc.start()
        child.close()
        self.ready = False
        self.gone = False  # a send found it dead
        self.tasks: deque[tuple[str, str]] = deque()  # sent and not answered; the first is running
        self.started = 0.0  # when the first of them started

    def wants(self) -> bool:
        """Room for another item: none in hand, or one whose successor can wait in the pipe."""
        return self.ready and not self.gone and len(self.tasks) < 2

    def assign(self, name: str, payload: str) -> None:
        """Send an item; OSError (BrokenPipeError) when the worker is gone, and then the
        item is not counted as sent."""
        started = self.started
        if not self.tasks:
            self.started = time.monotonic()
        self.tasks.append((name, payload))
        try:
            self.conn.send(payload)
        except (OSError, ValueError):  # ValueError: the connection is closed
            self.tasks.pop()
            self.started = started
            raise OSError(f"worker {self.proc.pid} is gone") from None

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

    def __init__(self, jobs: int | None = None, timeout: float | None = None, task: Task = run_item):
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

    def run(self, tasks: list[tuple[str, str]], on_done: OnDone, check: BasisCheck | None = None) -> None:
        """Run (name, payload) tasks; call on_done(name, reply dict, seconds) as each ends.

        ``check``: (BasisSpec, elements) that every worker checks before its first item
        (``check_basis_names``); a failure is raised here as UsageError, before any item runs.
        """
        if not tasks:
            return
        pool = _Pool(self, tasks, on_done, check)
        try:
            pool.start_workers()
            while pool.busy():
                pool.step()
        finally:
            pool.stop()


class _Pool:
    """The state of one ``LocalEngine.run``: its workers, the items not yet handed out, and
    the count of workers that failed to start."""

    def __init__(self, engine: LocalEngine, tasks: list[tuple[str, str]], on_done: OnDone, check: BasisCheck | None):
        self.engine = engine
        self.on_done = on_done
        self.check = check
        self.queue = deque(tasks)
        self.ctx: WorkerContext = worker_context()
        self.workers: list[_Worker] = []
        self.failed_starts = 0

    def start(self) -> _Worker:
        """A new worker; where the fork server cannot start one, from spawn from then on."""
        with worker_env(self.engine.threads):
            try:
                return _Worker(self.ctx, self.engine.task, self.check)
            except OSError:  # no fork server here (e.g. no room for its socket): spawn instead
                if self.ctx.get_start_method() != "forkserver":
                    raise
                self.ctx = mp.get_context("spawn")
                return _Worker(self.ctx, self.engine.task, self.check)

    def start_workers(self) -> None:
        for _ in range(min(self.engine.jobs, len(self.queue))):
            self.workers.append(self.start())  # one at a time, so that a failed start leaves none unstopped

    def busy(self) -> bool:
        return bool(self.queue) or any(w.tasks for w in self.workers)

    def feed(self) -> None:
        """Hand out queued items: one to each idle worker, and a second one to a busy worker
        when its payload is small enough to wait in the pipe."""
        for w in self.workers:
            while self.queue and w.wants() and (not w.tasks or len(self.queue[0][1]) <= _PIPELINE_BYTES):
                task = self.queue.popleft()
                try:
                    w.assign(*task)
                except OSError:  # the worker died unnoticed: the item was never sent
                    self.queue.appendleft(task)
                    w.gone = True  # no more items for it; tend() retires it
                    break

    def step(self) -> None:
        """Hand out items, wait for a reply, a dead worker or a timeout, then see to every worker."""
        self.feed()
        events = [w.conn for w in self.workers] + [w.proc.sentinel for w in self.workers]
        wait_any(events, self._wait_time())
        for w in list(self.workers):  # a worker replaced in this pass is looked at in the next
            self.tend(w)

    def tend(self, w: _Worker) -> None:
        """Hand out the replies of ``w``; replace it when it died or overran the item timeout."""
        replies, died = self._read(w)
        if not died and not w.proc.is_alive():
            # it may have answered an item before dying on the next: drain the pipe first
            more, _ = self._read(w)
            replies += more
            died = True
        died = died or w.gone
        if replies:
            self.feed()  # hand out the next items before writing these results
            for name, text, seconds in replies:
                self.on_done(name, json.loads(text), seconds)
        timeout = self.engine.timeout
        late = bool(w.tasks) and timeout and time.monotonic() - w.started > timeout
        if died or late:
            self._retire(w, timed_out=bool(late and not died))

    def _read(self, w: _Worker) -> tuple[list[tuple[str, str, float]], bool]:
        """Everything ``w`` has sent: (finished replies as (name, text, seconds), whether its pipe broke)."""
        replies: list[tuple[str, str, float]] = []
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
            return replies, True
        return replies, False

    def _retire(self, w: _Worker, timed_out: bool) -> None:
        """Stop ``w``: its running item becomes an error and the one waiting behind it goes
        back to the queue; a worker that never became ready counts as a failed start. A new
        worker takes its place while items remain."""
        w.kill()
        if w.tasks:
            why = (
                f"took longer than the item timeout ({self.engine.timeout:g} s); the worker was stopped"
                if timed_out
                else f"the worker process died (exit code {w.proc.exitcode}) while auditing this item"
            )
            self.on_done(w.tasks[0][0], {"error": why}, time.monotonic() - w.started)
            self.queue.extendleft(reversed(list(w.tasks)[1:]))  # waiting, never started: run elsewhere
        elif not w.ready:
            self.failed_starts += 1
            if self.failed_starts > 2 * self.engine.jobs:
                raise AuditorError(f"worker processes fail to start (exit code {w.proc.exitcode})")
        i = self.workers.index(w)
        if self.queue:
            self.workers[i] = self.start()
        else:
            del self.workers[i]

    def _wait_time(self) -> float:
        timeout = self.engine.timeout
        if not timeout:
            return 5.0
        now = time.monotonic()
        left = [timeout - (now - w.started) for w in self.workers if w.tasks]
        return max(0.01, min(left, default=5.0))

    def stop(self) -> None:
        """Ask idle workers to end, give them a moment, then kill whatever still runs."""
        for w in self.workers:
            try:
                if w.proc.is_alive() and not w.tasks:
                    w.conn.send(None)
            except OSError:
                pass
        for w in self.workers:
            w.proc.join(2 if not w.tasks else 0)
            w.kill()


def parse_scheduler_address(address: str) -> tuple[str, int]:
    """(host, port) of a Dask scheduler address, ``tcp://HOST:PORT`` or ``HOST:PORT``;
    UsageError for anything else (other schemes, such as tls://, need settings that
    ``auditor gate`` does not take)."""
    text = str(address).strip()
    scheme, sep, _ = text.partition("://")
    if sep and scheme.lower() != "tcp":
        raise UsageError(
            f"--scheduler {text}: only tcp:// scheduler addresses are supported "
            f"({scheme}:// needs security settings that auditor gate does not take)"
        )
    try:
        parts = urlsplit(text if sep else f"tcp://{text}")
        host, port = parts.hostname, parts.port
    except ValueError:
        raise UsageError(f"--scheduler {text}: cannot read the address (expected tcp://HOST:PORT)") from None
    if not host or not port:
        raise UsageError(f"--scheduler {text}: the address needs a host and a port (tcp://HOST:PORT)")
    return host, port


def _check_reachable(address: str, seconds: float = 5.0) -> None:
    """Fail fast on an address that refuses connections (Dask itself retries until its timeout)."""
    host, port = parse_scheduler_address(address)
    try:
        socket.create_connection((host, port), timeout=seconds).close()
    except OSError as exc:
        raise UsageError(f"cannot reach the Dask scheduler at {address} ({exc.strerror or exc})") from None


class DaskEngine:
    """Items as tasks on a running Dask distributed scheduler (JSON text in and out).

    The workers must have auditor installed. ``--item-timeout`` is not enforced here:
    Dask cannot stop a running task. The address is checked when the engine is made;
    connecting and the scheduler's first answer are bounded by ``connect_timeout``
    seconds, whatever the other end does (a port that accepts and never answers too).
    """

    def __init__(self, address: str, connect_timeout: float = 10.0):
        parse_scheduler_address(address)
        self.address = address
        self.connect_timeout = connect_timeout

    def _connect(self) -> Any:
        """A Dask Client, or UsageError within about ``connect_timeout`` seconds."""
        from dask.distributed import Client  # optional, and slow to import

        box: dict[str, Any] = {}

        def connect() -> None:
            try:
                box["client"] = Client(self.address, timeout=self.connect_timeout, set_as_default=False)
            except BaseException as exc:  # noqa: BLE001 - reported below as one line
                box["error"] = exc

        thread = threading.Thread(target=connect, name="auditor-dask-connect", daemon=True)
        thread.start()
        thread.join(self.connect_timeout + 5.0)
        if thread.is_alive():
            raise UsageError(
                f"the Dask scheduler at {self.address} does not answer (nothing within {self.connect_timeout:g} s)"
            )
        if "error" in box:
            exc = box["error"]
            why = str(exc).strip().splitlines()[0][:160] if str(exc).strip() else type(exc).__name__
            raise UsageError(f"cannot reach the Dask scheduler at {self.address} ({why})")
        return box["client"]

    def run(self, tasks: list[tuple[str, str]], on_done: OnDone, check: BasisCheck | None = None) -> None:
        if not tasks:
            return
        if check is not None:
            check_basis_names(*check)
        try:
            from dask.distributed import as_completed  # optional, and slow to import
        except ImportError:
            raise UsageError("--engine dask needs dask[distributed]: pip install 'auditor[dask]'") from None
        _check_reachable(self.address)
        client = self._connect()
        with client:
            started = time.monotonic()
            futures = {client.submit(run_item, payload, pure=False): name for name, payload in tasks}
            for fut in as_completed(futures, loop=client.loop):
                try:
                    reply = json.loads(fut.result())
                except Exception as exc:  # a lost worker or a task Dask gave up on
                    reply = {"error": f"the Dask task failed ({type(exc).__name__}: {exc})"}
                on_done(futures[fut], reply, time.monotonic() - started)
