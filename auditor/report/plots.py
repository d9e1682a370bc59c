"""Figures for the reports: each function reads a result dictionary and returns PNG bytes.

The figures are drawn on matplotlib's Agg canvas directly (no pyplot, no global backend
switch), so they work headless, inside worker processes and beside an interactive session.
Same input, same bytes: fixed size and resolution, and no timestamp or software tag in the PNG.
"""

from __future__ import annotations

import io
import math
from collections.abc import Iterator
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
from ase.data import atomic_numbers, covalent_radii
from matplotlib import rc_context
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.collections import EllipseCollection, LineCollection
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Circle

from ..base.elements import L_LETTERS
from .periodic import periodic_part
from .style import BLUE, GREEN, GREY, INK, LEVEL_LINES, ORANGE, SKY, VERDICT_COLOURS, VERMILION, WEIGHT_CMAP
from .text import vectors_note

if TYPE_CHECKING:
    from ..pipeline.result import AuditResult

DPI = 110

#: matplotlib rc settings of every figure (typed loosely: matplotlib types the keys as literals)
STYLE: dict[Any, Any] = {
    "font.family": "DejaVu Sans",
    "font.size": 9.5,
    "axes.titlesize": 10.5,
    "axes.titleweight": "bold",
    "axes.labelsize": 9.5,
    "axes.edgecolor": "#555555",
    "axes.labelcolor": INK,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "grid.color": "#E3E3E3",
    "grid.linewidth": 0.7,
    "xtick.color": "#444444",
    "ytick.color": "#444444",
    "legend.frameon": False,
    "legend.fontsize": 8.5,
    "svg.hashsalt": "auditor",
}


def _new(width: float, height: float, ncols: int = 1, **kw: Any) -> tuple[Figure, Any]:
    fig = Figure(figsize=(width, height), dpi=DPI)
    FigureCanvasAgg(fig)
    axes = fig.subplots(1, ncols, **kw)
    return fig, axes


def _png(fig: Figure) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI, facecolor="white", metadata={"Software": None})
    return buf.getvalue()


def _d(result: AuditResult | dict) -> dict:
    return result if isinstance(result, dict) else result.as_dict()


# ---------------------------------------------------------------- spectrum


def spectrum_png(result: AuditResult | dict) -> bytes:
    """log10 of the overlap eigenvalues against their rank, with the policy levels and
    the advised threshold as horizontal lines."""
    d = _d(result)
    with rc_context(STYLE):
        return _png(_spectrum_figure(d))


def _spectrum_figure(d: dict) -> Figure:
    sp, pol, rec = d["spectrum"], d["policy"], d["recommendation"]
    n_total = d["input"]["n_functions"]
    ev = np.asarray([v for v in sp["eigenvalues"] if v is not None], dtype=float)
    fig, ax = _new(8.6, 3.9)
    fig.subplots_adjust(left=0.09, right=0.70, top=0.88, bottom=0.14)
    levels = {"caution": pol["caution"], "fail": pol["fail"]}
    if rec["threshold"] is not None:  # none is advised for a broken geometry
        levels["threshold"] = rec["threshold"]
    if ev.size == 0:
        ax.text(0.5, 0.5, "no eigenvalues in the result", ha="center", va="center", transform=ax.transAxes)
        ax.set_yscale("log")
        ax.set_ylim(min(levels.values()) / 10, 10)
    else:
        _draw_eigenvalues(ax, ev, min(levels.values()), levels.get("threshold"))
    for key, value in levels.items():
        line = LEVEL_LINES[key]
        ax.axhline(value, color=line.colour, ls=line.dashes, lw=line.width, zorder=2)
    ax.legend(handles=_spectrum_handles(ev, levels), loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0)
    partial = ev.size < n_total
    ax.set_xlabel(
        "eigenvalue rank, smallest first (dimensionless)" + (f"; {ev.size} smallest of {n_total}" if partial else "")
    )
    ax.set_ylabel("eigenvalue of unit-diagonal S")
    ax.set_title(f"Overlap spectrum: {n_total} functions, smallest {sp['smallest']:.2e}", loc="left")
    return fig


def _draw_eigenvalues(ax: Axes, ev: np.ndarray, lowest_level: float, threshold: float | None) -> None:
    """The eigenvalues against their rank on a log axis; those at or below a floor a decade
    under everything else (singular ones included) are drawn on the floor and counted."""
    positive = ev[ev > 0]
    low = min([lowest_level, *(positive[:1] if positive.size else [])])
    floor = 10.0 ** (math.floor(math.log10(low)) - 1)
    clipped = ev <= floor
    shown = np.where(clipped, floor, ev)
    idx = np.arange(1, ev.size + 1)
    ax.set_yscale("log")
    ax.plot(idx, shown, color=BLUE, lw=1.2, drawstyle="steps-mid", zorder=3)
    if ev.size <= 300:
        ax.plot(idx[~clipped], shown[~clipped], "o", ms=2.6, color=BLUE, zorder=4)
    below = ev < threshold if threshold is not None else np.zeros(ev.shape, dtype=bool)
    if below.any():
        ax.plot(
            idx[below & ~clipped], shown[below & ~clipped], "o", ms=4, mfc="white", mec=VERMILION, mew=1.2, zorder=5
        )
    if clipped.any():
        ax.plot(idx[clipped], shown[clipped], "v", ms=7, color=VERMILION, zorder=6)
        ax.annotate(
            f"{int(clipped.sum())} eigenvalue(s) ≤ {floor:.0e} (singular), drawn at the floor",
            xy=(idx[clipped][-1], floor),
            xytext=(12, 10),
            textcoords="offset points",
            fontsize=8.5,
            color=VERMILION,
        )
    top = max(1.0, float(ev.max())) * 3
    ax.set_ylim(floor / 2, top)
    ax.set_xlim(0.5, ev.size + 0.5)


def _spectrum_handles(ev: np.ndarray, levels: dict[str, float]) -> list[Line2D]:
    """Legend entries: the eigenvalues, those removed at the threshold (if any), each level."""
    handles = [Line2D([], [], color=BLUE, lw=1.2, marker="o", ms=2.6, label="eigenvalue")]
    if ev.size and "threshold" in levels and (ev < levels["threshold"]).any():
        handles.append(
            Line2D([], [], color=VERMILION, lw=0, marker="o", mfc="white", mew=1.2, ms=4, label="removed at τ")
        )
    for key, value in levels.items():
        line = LEVEL_LINES[key]
        handles.append(Line2D([], [], color=line.colour, ls=line.dashes, lw=line.width, label=line.label(value)))
    return handles


# ---------------------------------------------------------------- causes

MAX_ATOM_BARS = 16


def causes_png(result: AuditResult | dict) -> bytes:
    """Share of the near-null space per atom and per shell type (angular momentum, diffuse)."""
    d = _d(result)
    with rc_context(STYLE):
        return _png(_causes_figure(d))


def _causes_figure(d: dict) -> Figure:
    c = d["causes"]
    fig, (ax_a, ax_l, ax_d) = _new(9.0, 4.0, ncols=3, gridspec_kw={"width_ratios": [3.2, 1.4, 1.0], "wspace": 0.42})
    fig.subplots_adjust(left=0.07, right=0.98, top=0.82, bottom=0.25)
    atoms = c["atoms"][:MAX_ATOM_BARS]
    labels = [f"{a['element']}{a['atom']}" for a in atoms]
    w = [a["weight"] for a in atoms]
    colours = [SKY if a["ghost"] else BLUE for a in atoms]
    bars = ax_a.bar(range(len(atoms)), w, color=colours, edgecolor=INK, lw=0.5, zorder=3)
    for bar, a in zip(bars, atoms):
        if a["ghost"]:
            bar.set_hatch("///")
    ax_a.set_xticks(
        range(len(atoms)),
        labels,
        rotation=60 if len(atoms) > 8 else 0,
        ha="right" if len(atoms) > 8 else "center",
        fontsize=8.5,
    )
    ax_a.set_ylabel("share of near-null space (fraction)")
    ax_a.set_xlabel("atom (element and 1-based number)")
    more = len(c["atoms"]) - len(atoms)
    ax_a.set_title("By atom" + (f" (largest {len(atoms)}; {more} more)" if more > 0 else ""), loc="left")
    if any(a["ghost"] for a in atoms):
        ax_a.legend(
            handles=[
                Line2D([], [], lw=0, marker="s", ms=8, color=BLUE, label="atom"),
                Line2D([], [], lw=0, marker="s", ms=8, color=SKY, label="ghost atom"),
            ],
            loc="upper right",
        )

    rank = {l: i for i, l in enumerate(L_LETTERS)}
    ang = sorted(c["angular"], key=lambda x: rank.get(str(x["l"]), 99))
    ax_l.bar([x["l"] for x in ang], [x["weight"] for x in ang], color=GREEN, edgecolor=INK, lw=0.5, zorder=3)
    ax_l.set_title("By angular momentum", loc="left")
    ax_l.set_xlabel("shell type (l)")
    ax_l.set_ylabel("share (fraction)")

    dif = c["diffuse"]
    ax_d.bar(
        ["diffuse", "other"],
        [dif.get("diffuse", 0.0), dif.get("other", 0.0)],
        color=[ORANGE, GREY],
        edgecolor=INK,
        lw=0.5,
        zorder=3,
    )
    ax_d.set_title("Diffuse shells", loc="left")
    ax_d.set_xlabel("shell kind")
    ax_d.set_ylabel("share (fraction)")
    for ax in (ax_a, ax_l, ax_d):
        ax.set_ylim(0, 1.05 * max([0.05] + [p.get_height() for p in ax.patches]) + 0.02)
        ax.grid(axis="x", visible=False)
    fig.suptitle(
        f"Where the near-null space sits: {vectors_note(d)}", x=0.07, ha="left", fontsize=10.5, fontweight="bold"
    )
    return fig


# ---------------------------------------------------------------- molecule

BOND_FACTOR = 1.2  # drawn as a bond when d < 1.2 (r_i + r_j)
MAX_LABELS = 40
PAIR_KINDS = {"coincident_atoms": VERMILION, "short_contact": VERMILION}


def principal_projection(xyz: np.ndarray) -> np.ndarray:
    """Coordinates (Å) projected onto the plane of the two largest principal axes;
    the sign of each axis is fixed so that the picture does not flip between runs."""
    xyz = np.asarray(xyz, dtype=float).reshape(-1, 3)
    centred = xyz - xyz.mean(axis=0)
    if len(xyz) < 2:
        return centred[:, :2]
    _, _, vt = np.linalg.svd(centred, full_matrices=False)
    axes = vt[:2]
    if axes.shape[0] < 2:
        axes = np.vstack([axes, np.zeros(3)])
    p = centred @ axes.T
    for k in range(2):
        j = int(np.argmax(np.abs(p[:, k])))
        if p[j, k] < 0:
            p[:, k] = -p[:, k]
    return p


def _radii(elements: list[str]) -> np.ndarray:
    return np.array([covalent_radii[atomic_numbers.get(e, 0)] for e in elements])


def molecule_png(result: AuditResult | dict) -> bytes:
    """The geometry on its principal plane, atoms shaded by their near-null-space weight;
    short contacts and coincident atoms from the findings as red dashed lines."""
    d = _d(result)
    with rc_context(STYLE):
        return _png(_molecule_figure(d))


def _pairs(d: dict) -> Iterator[tuple[str, int, int, float | None]]:
    for f in d["findings"]:
        if f["kind"] in PAIR_KINDS and len(f["atoms"]) == 2:
            yield f["kind"], f["atoms"][0], f["atoms"][1], f.get("details", {}).get("distance_angstrom")


@dataclass(frozen=True)
class _Drawing:
    """The atoms of a molecule figure: projected positions, drawn radii and weights."""

    n: int
    xyz: np.ndarray  # Å
    elements: list[str]
    ghost: np.ndarray  # bool per atom
    weight: np.ndarray  # share of the near-null space per atom
    p: np.ndarray  # positions on the principal plane (Å)
    cov: np.ndarray  # covalent radii (Å)
    disc: np.ndarray  # drawn radii (Å)
    pad: float  # margin around the atoms (Å)


def _drawing(d: dict) -> _Drawing:
    atoms = d["input"]["atoms"]
    n = len(atoms)
    xyz = np.array([a["xyz"] for a in atoms], dtype=float).reshape(-1, 3)
    el = [a["element"] for a in atoms]
    ghost = np.array([bool(a["ghost"]) for a in atoms], dtype=bool)
    weight = np.zeros(n)
    for a in d["causes"]["atoms"]:
        if 1 <= a["atom"] <= n:
            weight[a["atom"] - 1] = a["weight"]
    p = principal_projection(xyz) if n else np.zeros((0, 2))
    cov = _radii(el) if n else np.zeros(0)
    disc = 0.08 + 0.22 * np.clip(cov, 0.25, 2.0)  # drawn radius in Å
    span = max(float(np.ptp(p, axis=0).max()) if n > 1 else 1.0, 1.0)
    return _Drawing(n, xyz, el, ghost, weight, p, cov, disc, 0.08 * span + 0.6)


def _molecule_canvas(m: _Drawing, legend: bool) -> tuple[Figure, Axes]:
    """A figure whose height follows the molecule's aspect, so that little paper is wasted."""
    width_a = float(np.ptp(m.p[:, 0])) + 2 * m.pad if m.n else 1.0
    height_a = float(np.ptp(m.p[:, 1])) + 2 * m.pad if m.n else 1.0
    ax_w = 5.0
    ax_h = min(max(ax_w * height_a / width_a, 2.2), 6.5)
    below = 1.0 if legend else 0.7
    fig_h = ax_h + 0.45 + below
    fig, ax = _new(7.2, fig_h)
    fig.subplots_adjust(left=0.1, right=0.1 + ax_w / 7.2, top=1 - 0.45 / fig_h, bottom=below / fig_h)
    ax.set_aspect("equal", adjustable="box")
    ax.grid(False)
    return fig, ax


def _molecule_figure(d: dict) -> Figure:
    m = _drawing(d)
    pairs = list(_pairs(d))
    fig, ax = _molecule_canvas(m, bool(m.ghost.any()) or bool(pairs))
    handles: list[Line2D] = []
    if m.n:
        _draw_bonds(ax, m)
        handles += _draw_atoms(fig, ax, m)
        handles += _draw_contacts(ax, m, pairs)
        _label_atoms(ax, m)
        ax.set_xlim(m.p[:, 0].min() - m.pad, m.p[:, 0].max() + m.pad)
        ax.set_ylim(m.p[:, 1].min() - m.pad, m.p[:, 1].max() + m.pad)
    if handles:
        fig.legend(handles=handles, loc="lower center", bbox_to_anchor=(0.5, 0.0), ncol=2)
    ax.set_xlabel("first principal axis (Å)")
    ax.set_ylabel("second principal axis (Å)")
    more = "" if m.n <= MAX_LABELS else "; the 12 heaviest labelled"
    ax.set_title(f"Geometry on its principal plane ({m.n} atoms{more})", loc="left")
    return fig


def _draw_bonds(ax: Axes, m: _Drawing) -> None:
    """Grey lines between atoms closer than BOND_FACTOR times their covalent-radius sum;
    dashed when a ghost atom takes part."""
    # scipy.spatial takes about 0.2 s to import and only this figure needs it
    from scipy.spatial import cKDTree

    segs: list[np.ndarray] = []
    gsegs: list[np.ndarray] = []
    for i, j in sorted(cKDTree(m.xyz).query_pairs(BOND_FACTOR * 2 * m.cov.max())):
        dij = np.linalg.norm(m.xyz[i] - m.xyz[j])
        if 0.01 <= dij < BOND_FACTOR * (m.cov[i] + m.cov[j]):
            (gsegs if m.ghost[i] or m.ghost[j] else segs).append(m.p[[i, j]])
    ax.add_collection(LineCollection(segs, colors="#A0A0A0", linewidths=2.4, capstyle="round", zorder=1))
    ax.add_collection(LineCollection(gsegs, colors="#B8B8B8", linewidths=1.6, linestyles="--", zorder=1))


def _draw_atoms(fig: Figure, ax: Axes, m: _Drawing) -> list[Line2D]:
    """Discs shaded by weight (heaviest on top), dashed rings round ghost atoms and the
    colour bar; returns the legend entry of the rings, if any."""
    order = np.argsort(m.weight, kind="stable")  # heaviest drawn last, on top
    coll = EllipseCollection(
        2 * m.disc[order],
        2 * m.disc[order],
        np.zeros(m.n),
        units="xy",
        offsets=m.p[order],
        offset_transform=ax.transData,
        cmap=WEIGHT_CMAP,
        edgecolors=INK,
        zorder=3,
    )
    coll.set_array(m.weight[order])
    coll.set_clim(0, max(float(m.weight.max()), 1e-6))
    coll.set_linewidth(0.8)
    ax.add_collection(coll)
    handles = []
    if m.ghost.any():
        # ghost atoms keep their fill (it carries the weight) inside a dashed ring
        for i in np.flatnonzero(m.ghost):
            ax.add_patch(Circle(m.p[i], 1.35 * m.disc[i], fill=False, ec=INK, ls=(0, (2.5, 2)), lw=1.2, zorder=3.6))
        ring = "ringed: ghost atom (functions, no nucleus)"
        handles.append(Line2D([], [], lw=0, marker="o", ms=12, mfc="none", mec=INK, mew=1.2, label=ring))
    cax = ax.inset_axes((1.04, 0.0, 0.04, 1.0))
    cb = fig.colorbar(coll, cax=cax)
    cb.set_label("share of near-null space (fraction)")
    cax.grid(False)
    return handles


def _draw_contacts(ax: Axes, m: _Drawing, pairs: list[tuple[str, int, int, float | None]]) -> list[Line2D]:
    """Coincident atoms and short contacts from the findings: a red dashed line, or a ring
    round the pair when the two are too close to see a line; returns their legend entry."""
    contact = False
    for _, first, second, dist in pairs:
        i, j = first - 1, second - 1
        if not (0 <= i < m.n and 0 <= j < m.n):
            continue
        contact = True
        mid = m.p[[i, j]].mean(axis=0)
        sep = np.linalg.norm(m.p[i] - m.p[j])
        radius = max(m.disc[i], m.disc[j])
        if sep < 1.2 * radius:
            # too close to see a line: ring the pair instead
            ax.add_patch(Circle(mid, 1.9 * radius, fill=False, ec=VERMILION, ls=(0, (4, 2.5)), lw=2.0, zorder=6))
            anchor = mid + np.array([0, 1.9 * radius])
        else:
            ax.plot(m.p[[i, j], 0], m.p[[i, j], 1], color=VERMILION, ls=(0, (4, 2.5)), lw=2.2, zorder=6)
            anchor = mid
        if dist is not None:
            ax.annotate(
                f"{m.elements[i]}{i + 1}–{m.elements[j]}{j + 1} {dist:.3g} Å",
                anchor,
                xytext=(0, 4),
                textcoords="offset points",
                ha="center",
                va="bottom",
                color=VERMILION,
                fontsize=8.5,
                fontweight="bold",
                zorder=9,
                bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.85},
            )
    if not contact:
        return []
    return [Line2D([], [], color=VERMILION, ls=(0, (4, 2.5)), lw=2, label="coincident atoms / short contact")]


def _label_atoms(ax: Axes, m: _Drawing) -> None:
    """Element and number beside each atom (the 12 heaviest beyond MAX_LABELS atoms)."""
    labelled = range(m.n) if m.n <= MAX_LABELS else np.argsort(-m.weight, kind="stable")[:12]
    placed: list[np.ndarray] = []
    for i in labelled:
        offset = (6.0, 5.0)
        if any(np.linalg.norm(m.p[i] - q) < 0.5 * m.disc[i] for q in placed):
            offset = (6.0, -15.0)  # a second atom on (nearly) the same spot
        placed.append(m.p[i])
        ax.annotate(
            f"{m.elements[i]}{i + 1}",
            m.p[i] + m.disc[i] * np.array([0.55, 0.55]),
            xytext=offset,
            textcoords="offset points",
            fontsize=8.5,
            color=INK,
            zorder=8,
            bbox={"boxstyle": "round,pad=0.12", "fc": "white", "ec": "none", "alpha": 0.8},
        )


# ---------------------------------------------------------------- sets


def set_histogram_png(smallest: list[float | None], verdicts: list[str], policy: dict | None = None) -> bytes:
    """Histogram of log10 of the smallest eigenvalue over a set, stacked by verdict."""
    with rc_context(STYLE):
        return _png(_set_histogram_figure(smallest, verdicts, policy))


def _set_histogram_figure(smallest: list[float | None], verdicts: list[str], policy: dict | None) -> Figure:
    fig, ax = _new(8.6, 3.4)
    fig.subplots_adjust(left=0.08, right=0.76, top=0.88, bottom=0.16)
    vals = [(math.log10(v) if v > 0 else None, verd) for v, verd in zip(smallest, verdicts) if v is not None]
    finite = [x for x, _ in vals if x is not None]
    marks = [math.log10(v) for v in (policy or {}).values() if isinstance(v, (int, float)) and v > 0]
    lo = math.floor(min(finite + marks + [-1.0]))
    hi = math.ceil(max(finite + marks + [0.0]))
    floor = lo - 1
    edges = np.arange(floor, hi + 0.5, 0.5)
    order = [v for v in ("fail", "caution", "pass") if any(verd == v for _, verd in vals)]
    order += sorted({verd for _, verd in vals} - set(order))
    data = [[floor + 0.25 if x is None else x for x, verd in vals if verd == v] for v in order]
    if data:
        ax.hist(
            data,
            bins=edges,
            stacked=True,
            color=[VERDICT_COLOURS.get(v, GREY) for v in order],
            label=order,
            edgecolor="white",
            lw=0.6,
            zorder=3,
        )
    n_singular = sum(1 for x, _ in vals if x is None)
    if n_singular:
        ax.annotate(
            f"{n_singular} singular (≤ 0), left bin",
            (floor + 0.25, 0),
            xytext=(0, 18),
            textcoords="offset points",
            ha="left",
            fontsize=8.5,
            color=VERMILION,
        )
    for key in ("caution", "fail"):
        value = (policy or {}).get(key)
        if value:
            line = LEVEL_LINES[key]
            ax.axvline(math.log10(value), color=line.colour, ls=line.dashes, lw=line.width, label=line.label(value))
    ax.set_xlabel("log10 of the smallest eigenvalue of unit-diagonal S (dimensionless)")
    ax.set_ylabel("items (count)")
    ax.yaxis.get_major_locator().set_params(integer=True)
    ax.set_title(f"Smallest overlap eigenvalue over {len(vals)} audited item(s)", loc="left")
    ax.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0)
    return fig


# ---------------------------------------------------------------- k-points (periodic)


def kpoints_png(result: AuditResult | dict) -> bytes:
    """The smallest eigenvalue of S(k) at every k-point, log axis, with the policy levels."""
    d = _d(result)
    with rc_context(STYLE):
        return _png(_kpoints_figure(d))


def _kpoints_figure(d: dict) -> Figure:
    part, pol = d["periodic"], d["policy"]
    rows = part["kpoints"]
    x = np.array([r["k"] for r in rows])
    y = np.array([r["smallest"] for r in rows], dtype=float)
    fig, ax = _new(8.6, 3.4)
    fig.subplots_adjust(left=0.09, right=0.70, top=0.88, bottom=0.16)
    positive = y[y > 0]
    floor = 10.0 ** (math.floor(math.log10(min([pol["fail"], *positive.tolist()]))) - 1)
    low = y <= floor
    ax.semilogy(x[~low], y[~low], "o-", color=BLUE, ms=4, lw=1.0, label="smallest eigenvalue", zorder=3)
    if low.any():
        ax.semilogy(
            x[low],
            np.full(int(low.sum()), floor),
            "v",
            color=VERMILION,
            ms=6,
            ls="none",
            label=f"≤ {floor:.0e} (drawn on the floor)",
            zorder=4,
        )
    for key in ("caution", "fail"):
        line = LEVEL_LINES[key]
        ax.axhline(pol[key], color=line.colour, ls=line.dashes, lw=line.width, label=line.label(pol[key]))
    w = part["worst"]
    ax.set_xlabel("k-point (mesh order, 1-based)")
    ax.set_ylabel("smallest eigenvalue of S(k)")
    ax.set_title(f"S(k) over the {'×'.join(map(str, part['kmesh']))} mesh: worst k-point {w['k']}", loc="left")
    ax.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0)
    return fig


def report_plots(result: AuditResult | dict) -> dict[str, bytes]:
    """Every figure of a single-geometry report, by short name: spectrum, causes and
    molecule, and kpoints for a periodic result."""
    d = _d(result)
    images = {"spectrum": spectrum_png(d), "causes": causes_png(d), "molecule": molecule_png(d)}
    if periodic_part(d):
        images["kpoints"] = kpoints_png(d)
    return images
