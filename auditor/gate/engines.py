"""Where items run: worker processes on this machine, or a Dask cluster (JSON text in and out)."""

from __future__ import annotations

import json
import multiprocessing as mp
import os
import signal
import time
from collections import deque
from multiprocessing.connection import wait as wait_any

from ..base.errors import AuditorError, UsageError
from .tasks import _preflight, check_basis_names, run_item
from .workers import start_server, worker_context, worker_env


def _worker_main(conn, task, check=None) -> None:
    """Worker process: import the integral library once, check the basis names, then
    audit items until told to stop."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the parent handles Ctrl-C and ends its workers
    try:
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
    def __init__(self, ctx, task, check=None):
        self.conn, child = ctx.Pipe()
        self.proc = ctx.Process(target=_worker_main, args=(child, task, check), daemon=True)
        self.proc.start()
        child.close()
        self.ready = False
        self.tasks: deque[tuple[str, str]] = deque()  # sent and not answered; the first is running
        self.started = 0.0  # when the first of them started

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
                wait_any([w.conn for w in workers] + [w.proc.sentinel for w in workers], self._wait_time(workers))
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
                        why = (
                            f"took longer than the item timeout ({self.timeout:g} s); the worker was stopped"
                            if late and not died
                            else f"the worker process died (exit code {w.proc.exitcode}) while auditing this item"
                        )
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
