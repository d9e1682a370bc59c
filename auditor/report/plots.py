"""Figures for the reports: each function reads a result dictionary and returns PNG bytes.

The figures are drawn on matplotlib's Agg canvas directly (no pyplot, no global backend
switch), so they work headless, inside worker processes and beside an interactive session.
Same input, same bytes: fixed size and resolution, and no timestamp or software tag in the PNG.
"""

from __future__ import annotations

import io
import math
from pathlib import Path
from urllib.parse import quote

import numpy as np
from matplotlib import rc_context
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from ..base.files import atomic_write
from .style import BLUE, GREEN, GREY, INK, ORANGE, SKY, VERDICT_COLOURS, VERMILION, WEIGHT_CMAP
from .text import vectors_note

DPI = 110

STYLE = {
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


def _new(width: float, height: float, ncols: int = 1, **kw):
    fig = Figure(figsize=(width, height), dpi=DPI)
    FigureCanvasAgg(fig)
    axes = fig.subplots(1, ncols, **kw)
    return fig, axes


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI, facecolor="white", metadata={"Software": None})
    return buf.getvalue()


def _d(result) -> dict:
    return result if isinstance(result, dict) else result.as_dict()


# ---------------------------------------------------------------- spectrum


def spectrum_png(result) -> bytes:
    """log10 of the overlap eigenvalues against their rank, with the policy levels and
    the advised threshold as horizontal lines."""
    d = _d(result)
    with rc_context(STYLE):
        return _png(_spectrum_figure(d))


def _spectrum_figure(d: dict):
    sp, pol, rec = d["spectrum"], d["policy"], d["recommendation"]
    n_total = d["input"]["n_functions"]
    ev = np.asarray([v for v in sp["eigenvalues"] if v is not None], dtype=float)
    fig, ax = _new(8.6, 3.9)
    fig.subplots_adjust(left=0.09, right=0.70, top=0.88, bottom=0.14)
    levels = [pol["caution"], pol["fail"], rec["threshold"]]
    if ev.size == 0:
        ax.text(0.5, 0.5, "no eigenvalues in the result", ha="center", va="center", transform=ax.transAxes)
        ax.set_yscale("log")
        ax.set_ylim(min(levels) / 10, 10)
    else:
        positive = ev[ev > 0]
        low = min([*levels, *(positive[:1] if positive.size else [])])
        floor = 10.0 ** (math.floor(math.log10(low)) - 1)
        clipped = ev <= floor
        shown = np.where(clipped, floor, ev)
        idx = np.arange(1, ev.size + 1)
        ax.set_yscale("log")
        ax.plot(idx, shown, color=BLUE, lw=1.2, drawstyle="steps-mid", zorder=3)
        if ev.size <= 300:
            ax.plot(idx[~clipped], shown[~clipped], "o", ms=2.6, color=BLUE, zorder=4)
        below = ev < rec["threshold"]
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
    for value, colour, style, label in (
        (pol["caution"], ORANGE, (0, (5, 3)), f"caution level {pol['caution']:.0e}"),
        (pol["fail"], VERMILION, "-", f"fail level {pol['fail']:.0e}"),
        (rec["threshold"], BLUE, (0, (6, 2, 1.5, 2)), f"advised threshold τ = {rec['threshold']:.1e}"),
    ):
        ax.axhline(value, color=colour, ls=style, lw=1.3, zorder=2)
    handles = [Line2D([], [], color=BLUE, lw=1.2, marker="o", ms=2.6, label="eigenvalue")]
    if ev.size and (ev < rec["threshold"]).any():
        handles.append(
            Line2D([], [], color=VERMILION, lw=0, marker="o", mfc="white", mew=1.2, ms=4, label="removed at τ")
        )
    handles += [
        Line2D([], [], color=ORANGE, ls=(0, (5, 3)), lw=1.3, label=f"caution level {pol['caution']:.0e}"),
        Line2D([], [], color=VERMILION, ls="-", lw=1.3, label=f"fail level {pol['fail']:.0e}"),
        Line2D(
            [], [], color=BLUE, ls=(0, (6, 2, 1.5, 2)), lw=1.3, label=f"advised threshold τ = {rec['threshold']:.1e}"
        ),
    ]
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0)
    partial = ev.size < n_total
    ax.set_xlabel(
        "eigenvalue rank, smallest first (dimensionless)" + (f"; {ev.size} smallest of {n_total}" if partial else "")
    )
    ax.set_ylabel("eigenvalue of unit-diagonal S")
    ax.set_title(f"Overlap spectrum: {n_total} functions, smallest {sp['smallest']:.2e}", loc="left")
    return fig


# ---------------------------------------------------------------- causes

MAX_ATOM_BARS = 16


def causes_png(result) -> bytes:
    """Share of the near-null space per atom and per shell type (angular momentum, diffuse)."""
    d = _d(result)
    with rc_context(STYLE):
        return _png(_causes_figure(d))


def _causes_figure(d: dict):
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

    rank = {l: i for i, l in enumerate("spdfghiklm")}
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


def _radii(elements) -> np.ndarray:
    from ase.data import atomic_numbers, covalent_radii

    return np.array([covalent_radii[atomic_numbers.get(e, 0)] for e in elements])


def molecule_png(result) -> bytes:
    """The geometry on its principal plane, atoms shaded by their near-null-space weight;
    short contacts and coincident atoms from the findings as red dashed lines."""
    d = _d(result)
    with rc_context(STYLE):
        return _png(_molecule_figure(d))


def _pairs(d: dict):
    for f in d["findings"]:
        if f["kind"] in PAIR_KINDS and len(f["atoms"]) == 2:
            yield f["kind"], f["atoms"][0], f["atoms"][1], f.get("details", {}).get("distance_angstrom")


def _molecule_figure(d: dict):
    from matplotlib.collections import EllipseCollection, LineCollection
    from matplotlib.patches import Circle

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
    pad = 0.08 * span + 0.6
    width_a = float(np.ptp(p[:, 0])) + 2 * pad if n else 1.0
    height_a = float(np.ptp(p[:, 1])) + 2 * pad if n else 1.0
    # the figure's height follows the molecule's aspect, so that little paper is wasted
    ax_w = 5.0
    ax_h = min(max(ax_w * height_a / width_a, 2.2), 6.5)
    legend = bool(ghost.any()) or any(True for _ in _pairs(d))
    below = 1.0 if legend else 0.7
    fig_h = ax_h + 0.45 + below
    fig, ax = _new(7.2, fig_h)
    fig.subplots_adjust(left=0.1, right=0.1 + ax_w / 7.2, top=1 - 0.45 / fig_h, bottom=below / fig_h)
    ax.set_aspect("equal", adjustable="box")
    ax.grid(False)
    handles = []
    if n:
        from scipy.spatial import cKDTree

        segs, gsegs = [], []
        for i, j in sorted(cKDTree(xyz).query_pairs(BOND_FACTOR * 2 * cov.max())):
            dij = np.linalg.norm(xyz[i] - xyz[j])
            if 0.01 <= dij < BOND_FACTOR * (cov[i] + cov[j]):
                (gsegs if ghost[i] or ghost[j] else segs).append(p[[i, j]])
        ax.add_collection(LineCollection(segs, colors="#A0A0A0", linewidths=2.4, capstyle="round", zorder=1))
        ax.add_collection(LineCollection(gsegs, colors="#B8B8B8", linewidths=1.6, linestyles="--", zorder=1))

        vmax = max(float(weight.max()), 1e-6)
        order = np.argsort(weight, kind="stable")  # heaviest drawn last, on top
        coll = EllipseCollection(
            2 * disc[order],
            2 * disc[order],
            np.zeros(n),
            units="xy",
            offsets=p[order],
            offset_transform=ax.transData,
            cmap=WEIGHT_CMAP,
            edgecolors=INK,
            zorder=3,
        )
        coll.set_array(weight[order])
        coll.set_clim(0, vmax)
        coll.set_linewidths(0.8)
        ax.add_collection(coll)
        if ghost.any():
            # ghost atoms keep their fill (it carries the weight) inside a dashed ring
            for i in np.flatnonzero(ghost):
                ax.add_patch(Circle(p[i], 1.35 * disc[i], fill=False, ec=INK, ls=(0, (2.5, 2)), lw=1.2, zorder=3.6))
            handles.append(
                Line2D(
                    [],
                    [],
                    lw=0,
                    marker="o",
                    ms=12,
                    mfc="none",
                    mec=INK,
                    mew=1.2,
                    label="ringed: ghost atom (functions, no nucleus)",
                )
            )
        cax = ax.inset_axes([1.04, 0.0, 0.04, 1.0])
        cb = fig.colorbar(coll, cax=cax)
        cb.set_label("share of near-null space (fraction)")
        cax.grid(False)

        contact = False
        for kind, i, j, dist in _pairs(d):
            i, j = i - 1, j - 1
            if not (0 <= i < n and 0 <= j < n):
                continue
            contact = True
            mid = p[[i, j]].mean(axis=0)
            sep = np.linalg.norm(p[i] - p[j])
            if sep < 1.2 * max(disc[i], disc[j]):
                # too close to see a line: ring the pair instead
                ax.add_patch(
                    Circle(
                        mid, 1.9 * max(disc[i], disc[j]), fill=False, ec=VERMILION, ls=(0, (4, 2.5)), lw=2.0, zorder=6
                    )
                )
                anchor, xytext = mid + np.array([0, 1.9 * max(disc[i], disc[j])]), (0, 4)
            else:
                ax.plot(p[[i, j], 0], p[[i, j], 1], color=VERMILION, ls=(0, (4, 2.5)), lw=2.2, zorder=6)
                anchor, xytext = mid, (0, 4)
            if dist is not None:
                ax.annotate(
                    f"{el[i]}{i + 1}–{el[j]}{j + 1} {dist:.3g} Å",
                    anchor,
                    xytext=xytext,
                    textcoords="offset points",
                    ha="center",
                    va="bottom",
                    color=VERMILION,
                    fontsize=8.5,
                    fontweight="bold",
                    zorder=9,
                    bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.85},
                )
        if contact:
            handles.append(
                Line2D([], [], color=VERMILION, ls=(0, (4, 2.5)), lw=2, label="coincident atoms / short contact")
            )

        labelled = range(n) if n <= MAX_LABELS else np.argsort(-weight, kind="stable")[:12]
        placed: list[np.ndarray] = []
        for i in labelled:
            offset = (6.0, 5.0)
            if any(np.linalg.norm(p[i] - q) < 0.5 * disc[i] for q in placed):
                offset = (6.0, -15.0)  # a second atom on (nearly) the same spot
            placed.append(p[i])
            ax.annotate(
                f"{el[i]}{i + 1}",
                p[i] + disc[i] * np.array([0.55, 0.55]),
                xytext=offset,
                textcoords="offset points",
                fontsize=8.5,
                color=INK,
                zorder=8,
                bbox={"boxstyle": "round,pad=0.12", "fc": "white", "ec": "none", "alpha": 0.8},
            )
        ax.set_xlim(p[:, 0].min() - pad, p[:, 0].max() + pad)
        ax.set_ylim(p[:, 1].min() - pad, p[:, 1].max() + pad)
    if handles:
        fig.legend(handles=handles, loc="lower center", bbox_to_anchor=(0.5, 0.0), ncol=2)
    ax.set_xlabel("first principal axis (Å)")
    ax.set_ylabel("second principal axis (Å)")
    more = "" if n <= MAX_LABELS else "; the 12 heaviest labelled"
    ax.set_title(f"Geometry on its principal plane ({n} atoms{more})", loc="left")
    return fig


# ---------------------------------------------------------------- sets


def set_histogram_png(smallest: list[float | None], verdicts: list[str], policy: dict | None = None) -> bytes:
    """Histogram of log10 of the smallest eigenvalue over a set, stacked by verdict."""
    with rc_context(STYLE):
        return _png(_set_histogram_figure(smallest, verdicts, policy))


def _set_histogram_figure(smallest, verdicts, policy):
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
    if policy:
        for value, colour, style, label in (
            (policy.get("caution"), ORANGE, (0, (5, 3)), "caution level"),
            (policy.get("fail"), VERMILION, "-", "fail level"),
        ):
            if value:
                ax.axvline(math.log10(value), color=colour, ls=style, lw=1.3, label=f"{label} {value:.0e}")
    ax.set_xlabel("log10 of the smallest eigenvalue of unit-diagonal S (dimensionless)")
    ax.set_ylabel("items (count)")
    ax.yaxis.get_major_locator().set_params(integer=True)
    ax.set_title(f"Smallest overlap eigenvalue over {len(vals)} audited item(s)", loc="left")
    ax.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0)
    return fig


def report_plots(result) -> dict[str, bytes]:
    """The three figures of a single-geometry report, by short name."""
    d = _d(result)
    return {"spectrum": spectrum_png(d), "causes": causes_png(d), "molecule": molecule_png(d)}


FIGURE_TITLES = {
    "spectrum": "Overlap spectrum with the caution and fail levels and the advised threshold",
    "causes": "Share of the near-null space per atom, angular momentum and shell kind",
    "molecule": "Geometry on its principal plane, atoms shaded by their near-null-space share",
}


def write_figures(images: dict[str, bytes], out, stem: str) -> list:
    """Write each figure as out/<stem>_<name>.png; returns the paths in FIGURE_TITLES order."""
    paths = []
    for name in FIGURE_TITLES:
        if images.get(name):
            path = Path(out) / f"{stem}_{name}.png"
            atomic_write(path, images[name])
            paths.append(path)
    return paths


def markdown_figures(paths, stem: str) -> list[str]:
    """Markdown lines that show the figures written beside the report (relative links)."""
    lines = ["## Figures", ""]
    for path in paths:
        name = path.name[len(stem) + 1 : -4] if path.name.startswith(stem + "_") else path.stem
        lines += [f"![{FIGURE_TITLES.get(name, name)}]({quote(path.name)})", ""]
    return lines
