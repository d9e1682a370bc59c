"""Run every corpus case in a fresh process against the auditor on PYTHONPATH and print one
line per case: id, exit code (or exception) and the first line of its message.

    PYTHONPATH=/path/to/checkout python tests/hostile/record.py > outcomes.tsv
"""

from __future__ import annotations

import os
import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(1, str(Path(__file__).resolve().parents[1]))

import corpus  # noqa: E402


def _first_line(text: str) -> str:
    lines = [ln.strip() for ln in text.splitlines() if ln.strip()]
    for key in ("Traceback", "internal error", "error:", "Error"):
        hit = next((ln for ln in lines if key in ln), None)
        if hit:
            return hit[:150]
    return (lines[-1] if lines else "")[:150]


def _cli(case: corpus.Case, folder: Path) -> str:
    corpus.write_files(case, folder)
    if case.id in corpus.LIVE:
        case = corpus.LIVE[case.id](case)
    res = corpus.launch(corpus.cli_args(case), 60, folder, {**os.environ, "XDG_CACHE_HOME": str(folder / "xdg")})
    if res is None:
        return "hang (killed after 60 s)\t"
    return f"exit {res.returncode}\t{_first_line(res.stderr + res.stdout)}"


def _api(case: corpus.ApiCase, folder: Path) -> str:
    res = corpus.launch(["api", case.id, str(folder)], 60)
    if res is None:
        return "hang (killed after 60 s)\t"
    return "\t" + _first_line(res.stdout + res.stderr)


def main() -> None:
    only = set(sys.argv[1:])
    cases: list[corpus.Case | corpus.ApiCase] = [*corpus.CLI_CASES, *corpus.API_CASES]
    for case in cases:
        if only and case.id not in only:
            continue
        with tempfile.TemporaryDirectory() as tmp:
            got = _cli(case, Path(tmp)) if isinstance(case, corpus.Case) else _api(case, Path(tmp))
        print(f"{case.id}\t{got}", flush=True)
        corpus.close_resources()


if __name__ == "__main__":
    main()
