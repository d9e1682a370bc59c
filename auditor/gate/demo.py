"""The demo: audit the bundled example geometries and write sample reports."""

from __future__ import annotations

import sys
from pathlib import Path

from ..base.errors import InputError
from ..base.files import atomic_write
from ..base.textio import read_text
from ..diagnosis.verdict import Policy
from ..inputs.cell import parse_kmesh
from ..pipeline.run import make_spec
from ..report.naming import report_stem
from ..report.overview import item_from_result, write_set_index
from ..report.rows import error_row
from .periodic import PeriodicOptions
from .serial import RunOutcome, audit_paths

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

MANIFEST = "examples.toml"
ORIGIN = "Written by `auditor demo` from `example_geometries/` (a scenario of our own, not real data)"


def find_examples() -> Path:
    """example_geometries/ in the working folder (as a relative path, so that the reports
    do not depend on where the checkout lives), else beside the installed package."""
    for base in (Path("."), Path(__file__).resolve().parents[2]):
        folder = base / "example_geometries"
        if (folder / MANIFEST).is_file():
            return folder
    raise InputError(f"no example_geometries/{MANIFEST} found here or beside the package")


#: the keys of an [[example]] table and the types of their values
EXAMPLE_KEYS: dict[str, tuple[type, ...]] = {
    "file": (str,),
    "basis": (str,),
    "basis_for": (list, dict),
    "cartesian": (bool,),
    "unit": (str,),
    "ghost": (str, list),
    "note": (str,),
    "kmesh": (str,),
    "precision": (float,),
    "fragments": (list,),
}
#: files that carry their own basis (QCSchema inputs, pyscf checkpoints): basis is optional
OWN_BASIS_SUFFIXES = (".json", ".chk")


def _check_example(path: Path, k: int, ex: object) -> None:
    where = f"{path}: example {k}"
    if not isinstance(ex, dict):
        raise InputError(f"{where}: expected a table ([[example]])")
    if "file" not in ex:
        raise InputError(f"{where}: needs a file")
    if "basis" not in ex and not str(ex["file"]).lower().endswith(OWN_BASIS_SUFFIXES):
        raise InputError(f"{where}: needs a basis")
    for key, value in ex.items():
        if key not in EXAMPLE_KEYS:
            raise InputError(f"{where}: unknown key {key!r} (known: {', '.join(EXAMPLE_KEYS)})")
        if not isinstance(value, EXAMPLE_KEYS[key]):
            kinds = " or ".join(t.__name__ for t in EXAMPLE_KEYS[key])
            raise InputError(f"{where}: {key} must be a {kinds}, got {value!r:.40}")


def load_manifest(folder: Path) -> list[dict]:
    """The [[example]] tables of ``folder/examples.toml``, every key checked."""
    path = Path(folder) / MANIFEST
    try:
        data = tomllib.loads(read_text(path, "manifest"))
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{path}: not valid TOML ({exc})") from None
    examples = data.get("example", [])
    if not isinstance(examples, list):
        raise InputError(f"{path}: example must be an array of tables ([[example]])")
    for k, ex in enumerate(examples, 1):
        _check_example(path, k, ex)
    return examples


def run_demo(folder: Path, out: Path) -> tuple[RunOutcome, Path]:
    """Audit every example of the manifest; write reports and an index to ``out``."""
    total = RunOutcome()
    rows, items = [], []
    policy = Policy()
    for ex in load_manifest(folder):
        spec = make_spec(ex.get("basis"), ex.get("basis_for"), bool(ex.get("cartesian", False)))
        periodic = PeriodicOptions(parse_kmesh(ex.get("kmesh")), ex.get("precision"))
        o = audit_paths(
            [folder / ex["file"]],
            spec,
            policy,
            out,
            "all",
            unit=ex.get("unit", "angstrom"),
            ghost=ex.get("ghost"),
            periodic=periodic,
            fragments=ex.get("fragments"),
        )
        total.results += o.results
        total.errors += o.errors
        total.written += o.written
        for r in o.results:
            stem = report_stem(r.input.path, r.input.frame, r.input.n_frames)
            kinds = sorted({f.kind for f in r.findings if f.severity != "info"})
            rows.append(
                f"| [{stem}]({stem}.md) | {r.input.basis} | {r.input.n_functions} | "
                f"**{r.verdict}** | {r.spectrum.smallest:.2e} | {', '.join(kinds) or '-'} | {ex.get('note', '')} |"
            )
            items.append({**item_from_result(r, f"{stem}.html"), "path": Path(r.input.path).name})
        for p, msg, _ in o.errors:
            basis = ex.get("basis", "")
            rows.append(f"| {Path(p).name} | {basis} | | unreadable | | {msg} | {ex.get('note', '')} |")
            items.append({**error_row(Path(p).name, None, "", basis, msg), "report": ""})
    index = out / "index.md"
    atomic_write(
        index,
        "\n".join(
            [
                "# Sample reports",
                "",
                f"{ORIGIN}. The same reports as self-contained HTML pages: [index.html](index.html).",
                "",
                "| report | basis | functions | verdict | smallest eigenvalue | findings | scenario |",
                "|---|---|---|---|---|---|---|",
                *rows,
                "",
            ]
        ),
    )
    total.written.append(
        write_set_index(out, items, title="Sample reports", policy=policy.as_dict(), note=ORIGIN.replace("`", "") + ".")
    )
    return total, index
