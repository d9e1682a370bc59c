"""The pruned-basis document (format ``auditor-pruned-basis/1``) read back as a pyscf Mole."""

from __future__ import annotations

import json
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ..base.errors import InputError
from ..base.textio import read_text
from .basis import eval_off

if TYPE_CHECKING:
    from pyscf import gto

PRUNED_FORMAT = "auditor-pruned-basis/1"


def _atoms(doc: dict, frame: int | None) -> list:
    """The document's atoms, at the coordinates of ``frame`` (1-based) of a multi-frame input."""
    if frame is None:
        return doc["atoms"]
    frames = doc.get("frames") or [[xyz for _, xyz in doc["atoms"]]]
    if not 1 <= frame <= len(frames):
        raise InputError(f"frame {frame} requested, the pruned basis holds {len(frames)} frame(s)")
    return [[label, xyz] for (label, _), xyz in zip(doc["atoms"], frames[frame - 1])]


def load_pruned_doc(doc: dict, frame: int | None = None, **overrides: Any) -> gto.Mole:
    """A pyscf Mole from a pruned-basis document (keyword arguments override Mole fields);
    ``frame`` (1-based) picks the coordinates of one frame of a multi-frame input (default:
    those of ``atoms``, the worst frame)."""
    from pyscf import gto  # pyscf is slow to import: only when a pruned basis is loaded

    eval_off()  # the document is user data: pyscf must not evaluate text in it
    where = str(overrides.pop("where", "pruned-basis document"))
    if not isinstance(doc, dict):
        raise InputError(f"{where}: not a pruned-basis document (a JSON object is expected)")
    try:
        kw = {
            "atom": _atoms(doc, frame),
            "basis": doc["basis"],
            "unit": doc.get("unit", "angstrom"),
            "cart": bool(doc.get("cartesian", False)),
            "charge": int(doc.get("charge", 0)),
            "spin": int(doc.get("spin", 0)),
            "verbose": 0,
        }
    except (KeyError, TypeError, ValueError) as exc:
        raise InputError(f"{where}: not a pruned-basis document ({exc.__class__.__name__}: {exc})") from None
    kw.update(overrides)
    try:
        return gto.M(**kw)
    except Exception as exc:  # pyscf raises many types on bad atoms or basis text; the message is what matters
        text = str(exc).strip().splitlines()[0][:120] if str(exc).strip() else ""
        raise InputError(f"{where}: pyscf cannot build this pruned basis ({type(exc).__name__}: {text})") from None


def load_pruned(path: str | Path, frame: int | None = None, **overrides: Any) -> gto.Mole:
    """A pyscf Mole from a pruned-basis JSON file (keyword arguments override Mole fields;
    ``frame`` as for `load_pruned_doc`)."""
    try:
        doc = json.loads(read_text(path, "pruned-basis file"))
    except ValueError as exc:
        raise InputError(f"{path}: cannot read a pruned-basis file ({exc.__class__.__name__})") from None
    return load_pruned_doc(doc, frame, where=str(path), **overrides)
