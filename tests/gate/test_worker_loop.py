"""The local engine's worker loop when workers die at awkward moments: a reply sent just
before a worker died is never lost, and a send to a worker that died unnoticed is that
worker dying (its item is given to another), never a traceback."""

from __future__ import annotations

import json
import os
from collections import deque
from typing import Any

from test_gate import H2, OPTIONS

from auditor.gate.engines import LocalEngine, _Pool, _Worker
from auditor.gate.run import run_batch
from auditor.gate.tasks import run_item
from helpers import WATER, write_xyz


class _Proc:
    """A worker process that dies at a chosen moment: ``on_check`` runs when the pool asks
    whether it is alive (the moment a reply can slip into the pipe)."""

    def __init__(self, alive: bool = True, on_check=None):
        self.alive, self.on_check, self.exitcode, self.pid, self.sentinel = alive, on_check, 3, 12345, -1

    def is_alive(self) -> bool:
        if self.on_check:
            self.on_check()
            self.on_check = None
        return self.alive

    def kill(self) -> None:
        self.alive = False

    def join(self, timeout=None) -> None:
        pass


class _Conn:
    def __init__(self, broken: bool = False):
        self.inbox: deque = deque()
        self.sent: list = []
        self.broken = broken

    def poll(self) -> bool:
        return bool(self.inbox)

    def recv(self):
        return self.inbox.popleft()

    def send(self, payload) -> None:
        if self.broken:
            raise BrokenPipeError(32, "Broken pipe")
        self.sent.append(payload)

    def close(self) -> None:
        pass


def _fake_worker(tasks=(), proc=None, conn=None) -> _Worker:
    w: Any = object.__new__(_Worker)  # a worker without a process: its pipe and process are fakes
    w.conn, w.proc = conn or _Conn(), proc or _Proc()
    w.ready, w.gone, w.started = True, False, 0.0
    w.tasks = deque(tasks)
    return w


def _pool(tasks=()):
    done: dict[str, dict] = {}
    pool = _Pool(LocalEngine(jobs=1), list(tasks), lambda name, reply, s: done.setdefault(name, reply), None)
    return pool, done


def test_reply_sent_just_before_the_worker_died_is_kept():
    # the worker finished x, then died on y queued behind it; x's reply reaches the pipe
    # between the pool's read and its look at the process
    conn = _Conn()
    proc = _Proc(alive=False, on_check=lambda: conn.inbox.append(("done", json.dumps({"report": "{}", "n": 1}))))
    pool, done = _pool()
    w = _fake_worker([("x", "{}"), ("y", "{}")], proc, conn)
    pool.workers = [w]
    pool.tend(w)
    assert done["x"] == {"report": "{}", "n": 1}  # not lost, and not blamed for the death
    assert "died" in done["y"]["error"]
    assert pool.workers == []


def test_send_to_a_worker_that_died_unnoticed_requeues_the_item():
    pool, done = _pool([("a", "{}"), ("b", "{}")])
    dead = _fake_worker(conn=_Conn(broken=True), proc=_Proc(alive=False))
    pool.workers = [dead]
    pool.feed()  # BrokenPipeError must not escape
    assert [name for name, _ in pool.queue] == ["a", "b"] and not dead.tasks and dead.gone
    fresh = _fake_worker()
    pool.start = lambda: fresh  # the replacement
    pool.tend(dead)
    assert pool.workers == [fresh] and not done
    pool.feed()
    assert [name for name, _ in fresh.tasks] == ["a", "b"]  # nothing lost, nothing errored
    assert pool.failed_starts == 0


def test_send_failing_to_a_busy_worker_keeps_its_running_item():
    pool, done = _pool([("b", "{}")])
    conn = _Conn()
    busy = _fake_worker([("a", "{}")], proc=_Proc(alive=True), conn=conn)
    conn.broken = True
    pool.workers = [busy]
    pool.feed()
    assert [n for n, _ in busy.tasks] == ["a"] and [n for n, _ in pool.queue] == ["b"]
    busy.proc.alive = False
    pool.start = lambda: _fake_worker()
    pool.tend(busy)
    assert "died" in done["a"]["error"] and [n for n, _ in pool.queue] == ["b"]


_AUDITED: list[str] = []  # in each worker process: the items it audited


def dies_after_first(payload: str) -> str:
    """Worker task: audits the first item it gets, then dies on the next one."""
    if _AUDITED:
        os._exit(7)
    _AUDITED.append(payload)
    return run_item(payload)


def test_real_workers_first_reply_kept_when_the_next_item_kills_the_worker(tmp_path):
    # one worker, two small items queued in its pipe: the first is answered, the worker
    # dies on the second (repeated, since the moment of death varies)
    for k in range(3):
        folder = tmp_path / f"pair{k}"
        folder.mkdir()
        write_xyz(folder / "a.xyz", *WATER)
        write_xyz(folder / "b.xyz", *H2)
        engine = LocalEngine(jobs=1, task=dies_after_first)
        rows = {r["item"]: r for r in run_batch([str(folder)], OPTIONS, tmp_path / f"out{k}", engine).rows}
        verdicts = sorted(r["verdict"] for r in rows.values())
        assert verdicts == ["error", "pass"], rows
        assert all("died" in r["error"] for r in rows.values() if r["verdict"] == "error")
