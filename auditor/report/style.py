"""Colours and the page stylesheet shared by every report format."""

from __future__ import annotations

from dataclasses import dataclass

# Okabe & Ito's colour-blind-safe qualitative palette.
INK = "#222222"


ORANGE = "#E69F00"


SKY = "#56B4E9"


GREEN = "#009E73"


YELLOW = "#F0E442"


BLUE = "#0072B2"


VERMILION = "#D55E00"


PURPLE = "#CC79A7"


GREY = "#8C8C8C"


VERDICT_COLOURS = {"pass": GREEN, "caution": ORANGE, "fail": VERMILION, "error": PURPLE}


WEIGHT_CMAP = "YlGnBu"  # sequential in lightness, readable by colour-blind viewers: light = no share


@dataclass(frozen=True)
class LevelLine:
    """How a policy level or the advised threshold is drawn across a figure: colour, dash
    pattern (a matplotlib line style) and the legend label before the value."""

    colour: str
    dashes: str | tuple[float, tuple[float, ...]]
    name: str
    spec: str  # format of the value in the label
    width: float = 1.3

    def label(self, value: float) -> str:
        return f"{self.name} {value:{self.spec}}"


#: the levels of the policy and the advised threshold, in the order the legends list them
LEVEL_LINES = {
    "caution": LevelLine(ORANGE, (0, (5, 3)), "caution level", ".0e"),
    "fail": LevelLine(VERMILION, "-", "fail level", ".0e"),
    "threshold": LevelLine(BLUE, (0, (6, 2, 1.5, 2)), "advised threshold τ =", ".1e"),
}


#: one CSS variable per verdict colour (--pass, --caution, ...), from VERDICT_COLOURS
_VERDICT_VARIABLES = " ".join(f"--{verdict}:{colour};" for verdict, colour in VERDICT_COLOURS.items())


#: the page frame both HTML writers share (palette, type, numbers, figures, footer)
PAGE_CSS = f"""
:root {{ --ink:#1f2328; --muted:#59636e; --line:#d8dee4; --band:#f6f8fa;
        {_VERDICT_VARIABLES} --accent:{BLUE}; }}
* {{ box-sizing: border-box; }}
body {{ margin:0; color:var(--ink); background:#fff; font:15px/1.5 system-ui, -apple-system,
       "Segoe UI", "DejaVu Sans", sans-serif; }}
h1 {{ font-size: 1.55em; margin: 0.2em 0 0.1em; }}
.sub {{ color: var(--muted); margin: 0 0 14px; }}
td.n, th.n {{ text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }}
figure {{ margin: 10px 0 16px; }}
figure img {{ max-width: 100%; height: auto; border: 1px solid var(--line); border-radius: 4px; }}
footer {{ margin-top: 36px; color: var(--muted); font-size: 0.82em; }}
"""


#: rich styles of the terminal tables: verdicts in their report colours, gate outcomes
TERMINAL_STYLE = {
    **VERDICT_COLOURS,
    "fail": f"bold {VERDICT_COLOURS['fail']}",
    "unreadable": VERDICT_COLOURS["error"],
    "regressed": f"bold {VERMILION}",
    "blocked": f"bold {VERMILION}",
    "allowed": SKY,
    "known": ORANGE,
    "ok": GREEN,
}
