"""The figures of a report: drawn in this process, or by a helper process started early.

matplotlib takes about a quarter of a second to import, and its first figures another
tenth or two (fonts, first layouts). `start_helper` starts a child interpreter that pays
this while this process reads its input and computes (its second core is mostly idle
then), and `report_figures` has the helper draw each report's figures (`plots.report_plots`,
the same function either way). The helper can only make a run faster, never fail it: when
it is not running, is not ready within ``HELPER_WAIT`` seconds, or fails in any way, the
figures are drawn in this process and the helper is stopped.

Standard library only at import: this module loads before numpy and matplotlib.
"""

from __future__ import annotations

import os
import pickle
import subprocess
import sys
from collections.abc import Iterable
from multiprocessing.connection import Connection
from pathlib import Path
from typing import TYPE_CHECKING, Any
from urllib.parse import quote

from ..base.defaults import THREAD_VARS
from ..base.files import atomic_write

if TYPE_CHECKING:
    from ..pipeline.result import AuditResult

FIGURE_TITLES = {
    "spectrum": "Overlap spectrum with the caution and fail levels and the advised threshold",
    "causes": "Share of the near-null space per atom, angular momentum and shell kind",
    "molecule": "Geometry on its principal plane, atoms shaded by their near-null-space share",
    "kpoints": "Smallest eigenvalue of S(k) at every k-point of the mesh (periodic inputs)",
}

#: longest wait (s) for the helper to be ready, and then for one report's figures
HELPER_WAIT = 60.0
#: the helper draws on one core: no BLAS or OpenMP thread pools of its own
_ONE_THREAD = {k: "1" for k in THREAD_VARS}


def draw_figures(result: AuditResult | dict) -> dict[str, bytes]:
    """Every figure of one report, drawn in this process (matplotlib loads here)."""
    from .plots import report_plots

    return report_plots(result)


def report_figures(result: AuditResult | dict) -> dict[str, bytes]:
    """Every figure of one report: by the helper when one runs, else (or when it fails) here."""
    d = result if isinstance(result, dict) else result.as_dict()
    if _helper is not None:
        images = _helper.draw(d)
        if images is not None:
            return images
        stop_helper()
    return draw_figures(d)


class _Helper:
    """A child interpreter that warms matplotlib up, then draws the figures of each result
    it reads from its standard input (pickled, framed by `multiprocessing.connection`)."""

    def __init__(self) -> None:
        env = {**os.environ, **_ONE_THREAD}
        root = Path(__file__).resolve().parents[2]
        if root.name not in ("site-packages", "dist-packages"):
            # a source tree: the child imports this copy of auditor, not another one installed
            env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(root), os.environ.get("PYTHONPATH")]))
        self.proc = subprocess.Popen(
            [sys.executable, "-c", "from auditor.report.figures import serve; serve()"],
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            stderr=subprocess.DEVNULL,
            env=env,
        )
        assert self.proc.stdin is not None and self.proc.stdout is not None
        # the connections own copies of the pipe ends (they close them); the files let theirs go
        self.send = Connection(os.dup(self.proc.stdin.fileno()), readable=False)
        self.recv = Connection(os.dup(self.proc.stdout.fileno()), writable=False)
        self.proc.stdin.close()
        self.proc.stdout.close()
        self.ready = False

    def draw(self, d: dict) -> dict[str, bytes] | None:
        """The figures of ``d``, or None when the helper does not deliver them in time."""
        try:
            if not self.ready:  # its first message says the warm-up is over and it reads
                self.ready = self.recv.poll(HELPER_WAIT) and self.recv.recv() == "ready"
            if not self.ready:
                return None
            self.send.send(d)
            if not self.recv.poll(HELPER_WAIT):
                return None
            ok, images = self.recv.recv()
            return images if ok else None
        except (OSError, EOFError, ValueError, TypeError, AttributeError, pickle.PicklingError):
            return None  # a dead helper, or a result that does not pickle

    def stop(self) -> None:
        self.send.close()
        self.recv.close()
        self.proc.kill()
        self.proc.wait(timeout=5)


_helper: _Helper | None = None


def start_helper() -> None:
    """Start the figure helper (idempotent); on any failure the figures are drawn here."""
    global _helper
    if _helper is None:
        try:
            _helper = _Helper()
        except Exception:  # noqa: BLE001 - an optimization only
            _helper = None


def stop_helper() -> None:
    """Stop the figure helper, if one runs."""
    global _helper
    if _helper is not None:
        _helper.stop()
        _helper = None


def serve() -> None:
    """The helper's loop (run by `_Helper`): warm up, say so, then answer each result read
    from standard input with (ok, figures) on standard output."""
    out = Connection(os.dup(1), readable=False)
    os.dup2(2, 1)  # anything else printed goes where stderr goes, not into the answers
    conn = Connection(0, writable=False)
    try:
        _warm_up()
    except Exception:  # noqa: BLE001 - each figure request below reports its own failure
        pass
    out.send("ready")
    while True:
        try:
            d = conn.recv()
        except (EOFError, OSError):
            return
        try:
            answer: tuple[bool, Any] = (True, draw_figures(d))
        except Exception as exc:  # noqa: BLE001 - the caller draws them itself and shows the error
            answer = (False, repr(exc))
        out.send(answer)


def _warm_up() -> None:
    """Import what the figures need and draw a small one (fonts, text layout, PNG)."""
    from matplotlib import rc_context
    from scipy.spatial import cKDTree  # noqa: F401 - the molecule figure's bond search

    from .plots import STYLE, _new, _png

    with rc_context(STYLE):
        fig, ax = _new(2.0, 1.5)
        ax.set_yscale("log")
        ax.plot([1, 2], [1e-6, 1.0], label="warm-up")
        ax.set_title("warm-up")
        ax.legend()
        _png(fig)


def write_figures(images: dict[str, bytes], out: str | Path, stem: str) -> list[Path]:
    """Write each figure as out/<stem>_<name>.png; returns the paths in FIGURE_TITLES order."""
    paths = []
    for name in FIGURE_TITLES:
        if images.get(name):
            path = Path(out) / f"{stem}_{name}.png"
            atomic_write(path, images[name])
            paths.append(path)
    return paths


def markdown_figures(paths: Iterable[Path], stem: str) -> list[str]:
    """Markdown lines that show the figures written beside the report (relative links)."""
    lines = ["## Figures", ""]
    for path in paths:
        name = path.name[len(stem) + 1 : -4] if path.name.startswith(stem + "_") else path.stem
        lines += [f"![{FIGURE_TITLES.get(name, name)}]({quote(path.name)})", ""]
    return lines
