"""Run one hostile-input case in a fresh process (the corpus runs FIFO, device and hang
cases this way, with a time-out, so that a regression fails instead of hanging).

    python launch.py cli [--patch NAME] ARG...      the command line (auditor.cli.main)
    python launch.py api CASE_ID FOLDER             one API case of the corpus

An API case prints ``exception: TYPE: MESSAGE`` or ``returned`` and exits 0.
"""

from __future__ import annotations

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(1, str(Path(__file__).resolve().parents[1]))


def main(argv: list[str]) -> None:
    import corpus

    if argv[0] == "cli":
        args = argv[1:]
        patch = ""
        if args[:1] == ["--patch"]:
            patch, args = args[1], args[2:]
        corpus.apply_patch(patch, None)
        from auditor.cli import main as cli_main

        sys.argv = ["auditor", *args]
        cli_main()
    else:
        case = corpus.API_CASES_BY_ID[argv[1]]
        print(corpus.run_api_case(case, Path(argv[2])), flush=True)


if __name__ == "__main__":
    main(sys.argv[1:])
