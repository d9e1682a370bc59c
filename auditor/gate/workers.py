"""Worker processes for sets of geometries: how they are started and their environment.

Standard library only (and `auditor.base.defaults`, which is too), so that the command line
can start the fork server before it imports numpy, pyscf or its own argument parser.
"""

from __future__ import annotations

import multiprocessing as mp
import os
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING, Union

from ..base.defaults import THREAD_VARS

if TYPE_CHECKING:
    from multiprocessing.context import ForkServerContext, SpawnContext

#: how worker processes are started (see worker_context)
WorkerContext = Union["ForkServerContext", "SpawnContext"]

#: glibc malloc tunables for worker processes (see worker_env)
MALLOC_VARS = {"MALLOC_MMAP_THRESHOLD_": str(64 << 20), "MALLOC_TRIM_THRESHOLD_": str(256 << 20)}
#: what the fork server imports once for all workers
PRELOAD = ["auditor.pipeline.run", "auditor.gate.tasks", "pyscf.gto", "scipy.linalg"]


@contextmanager
def worker_env(threads: int) -> Iterator[None]:
    """Environment for worker processes started inside: BLAS/OpenMP pools of ``threads``,
    and glibc's malloc told to keep freed memory up to 64 MB instead of returning it.

    A worker allocates arrays of the same few sizes for every item; returned to the
    kernel, each would come back as fresh pages to fault in and zero, which on small
    molecules costs about as much as the numerical work. (A user's own MALLOC_* settings win.)
    """
    wanted = {k: str(threads) for k in THREAD_VARS}
    wanted.update({k: v for k, v in MALLOC_VARS.items() if k not in os.environ})
    old = {k: os.environ.get(k) for k in wanted}
    os.environ.update(wanted)
    try:
        yield
    finally:
        for k, v in old.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


def worker_context() -> WorkerContext:
    """forkserver where the platform has it, else spawn; never a plain fork.

    The fork server is a fresh interpreter started with one BLAS/OpenMP thread, so no
    thread pool exists when it forks; it imports the integral library once and every
    worker inherits it (spawn would import it again in each worker)."""
    if "forkserver" in mp.get_all_start_methods():
        ctx = mp.get_context("forkserver")
        ctx.set_forkserver_preload(PRELOAD)
        return ctx
    return mp.get_context("spawn")


def start_server(threads: int = 1) -> None:
    """Start the fork server now, if this platform uses one (idempotent)."""
    ctx = worker_context()
    if ctx.get_start_method() != "forkserver":
        return
    from multiprocessing import forkserver  # here: a module that only platforms with a fork server use

    with worker_env(threads):
        try:
            forkserver.ensure_running()
        except OSError:
            pass  # the run falls back to spawned workers


def start_early(argv: list[str]) -> None:
    """Start the fork server from the command line itself, before its arguments are parsed,
    when they show a local ``gate`` run that cannot be served from the cache: pyscf then
    loads in the server while this process reads the inputs. (Anything unusual, such as a
    Dask engine or help, is left to the normal path.)"""
    if (
        not argv
        or argv[0] != "gate"
        or any(a in ("--help", "-h", "--engine") or a.startswith("--engine=") for a in argv)
    ):
        return
    if "--no-cache" not in argv:
        # here, not at the top: the command line imports this module first, on every command
        from .cache import FILE_NAME, default_cache_dir

        root = None
        for i, a in enumerate(argv):
            if a == "--cache-dir" and i + 1 < len(argv):
                root = argv[i + 1]
            elif a.startswith("--cache-dir="):
                root = a.split("=", 1)[1]
        if (Path(root) if root else default_cache_dir()).joinpath(FILE_NAME).exists():
            return
    try:
        start_server()
    except Exception:  # noqa: BLE001 - an optimization only; the run starts its workers itself
        pass
