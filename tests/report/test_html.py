"""HTML reports, figures and the set index: structure, embedded images, numbers against the JSON."""

import base64
import copy
import io
import json
import math
import re
import shutil
import subprocess
from html.parser import HTMLParser

import numpy as np
import pytest
from matplotlib import image as mpimg

import auditor
from auditor.inputs.geometry import Molecule
from auditor.report.html import render_html
from auditor.report.json_report import to_json
from auditor.report.overview import item_from_result, render_set_index, write_set_index
from auditor.report.plots import principal_projection, report_plots, spectrum_png
from auditor.report.writers import write_reports
from helpers import WATER, make_molecule

VOID = {"meta", "img", "br", "hr", "input", "link", "source", "wbr"}
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


class Page(HTMLParser):
    """Collects what the tests look at and checks that every element is closed in order."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack, self.errors = [], []
        self.images, self.links, self.scripts, self.numbers = [], [], [], []
        self.rows, self._cell, self._row, self._num = [], None, None, None
        self.text = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag not in VOID:
            self.stack.append(tag)
        if tag == "img":
            self.images.append(a.get("src", ""))
        if tag == "a":
            self.links.append(a.get("href", ""))
        if tag == "script":
            self.scripts.append(a)
        if tag == "link":
            self.links.append(a.get("href", ""))
        if "data-key" in a:
            self._num = [a["data-key"], a.get("data-value"), ""]
            self.numbers.append(self._num)
        if tag == "tr":
            self._row = []
            self.rows.append(self._row)
        if tag == "td" and self._row is not None:
            self._row.append(a)

    def handle_endtag(self, tag):
        if tag in VOID:
            return
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes {self.stack[-1] if self.stack else 'nothing'}")
            return
        self.stack.pop()
        if self._num is not None and tag in ("span", "td", "div"):
            self._num = None

    def handle_data(self, data):
        self.text.append(data)
        if self._num is not None:
            self._num[2] += data


def parse(text: str) -> Page:
    p = Page()
    p.feed(text)
    p.close()
    assert not p.errors, p.errors[:5]
    assert p.stack == [], p.stack
    return p


def decode_png(src: str) -> np.ndarray:
    assert src.startswith("data:image/png;base64,")
    raw = base64.b64decode(src.split(",", 1)[1], validate=True)
    assert raw.startswith(PNG_MAGIC) and len(raw) > 1000
    return mpimg.imread(io.BytesIO(raw), format="png")


def lookup(d, key: str):
    for part in key.split("."):
        if isinstance(d, list):
            d = d[int(part)]
        elif part in d:
            d = d[part]
        else:  # keys that themselves contain dots, such as "1e-05" never do; keep it strict
            raise KeyError(key)
    return d


@pytest.fixture(scope="module")
def clean():
    return auditor.audit(make_molecule(*WATER), "cc-pvdz")


@pytest.fixture(scope="module")
def broken():
    """Water with one hydrogen pasted about 1 mÅ from another and a ghost water beside it."""
    w = np.array(WATER[1])
    xyz = np.vstack([w, w[1] + [0.0, 0.0008, -0.0008], w + [3.0, 0.0, 0.0]])
    mol = Molecule(("O", "H", "H", "H", "O", "H", "H"), xyz, (False,) * 4 + (True,) * 3, source="pasted.xyz")
    return auditor.audit(mol, "aug-cc-pvdz")


@pytest.fixture(scope="module")
def pages(clean, broken):
    """The rendered report of each result, drawn once for the module."""
    return {"clean": render_html(clean), "broken": render_html(broken)}


def test_report_parses_and_is_self_contained(pages):
    page = parse(pages["broken"])
    assert len(page.images) == 3
    for src in page.images:
        assert src.startswith("data:")
    # nothing to fetch: no external scripts, styles or images; links stay inside the page
    assert all(not s.get("src") for s in page.scripts)
    assert all(href.startswith("#") for href in page.links)


def test_every_embedded_image_decodes_and_is_not_blank(pages):
    for text in pages.values():
        for src in parse(text).images:
            img = decode_png(src)
            assert img.ndim == 3 and img.shape[0] > 200 and img.shape[1] > 300
            assert float(img[..., :3].std()) > 0.02  # not a single colour


def test_numbers_in_html_equal_the_json(broken, clean, pages):
    for name, r in (("broken", broken), ("clean", clean)):
        d = json.loads(to_json(r))
        page = parse(pages[name])
        keys = {k for k, _, _ in page.numbers}
        must = {
            "verdict",
            "spectrum.smallest",
            "spectrum.largest",
            "spectrum.log10_condition",
            "spectrum.condition_number",
            "policy.caution",
            "policy.fail",
            "input.n_functions",
            "input.n_atoms",
        }
        if d["recommendation"]["threshold"] is not None:  # a broken geometry gets no threshold
            must |= {"recommendation.threshold", "recommendation.n_removed"}
        must |= {f"spectrum.counts_below.{k}" for k in d["spectrum"]["counts_below"]}
        must |= {f"recommendation.candidates.{i}.threshold" for i in range(len(d["recommendation"]["candidates"]))}
        must |= {f"causes.atoms.{i}.weight" for i in range(min(5, len(d["causes"]["atoms"])))}
        assert must <= keys, must - keys
        for key, value, shown in page.numbers:
            expected = lookup(d, key)
            assert json.loads(value) == expected, key
            if isinstance(expected, (int, float)) and not isinstance(expected, bool):
                # the displayed text must round to the same number
                x = float(shown.strip().rstrip("%")) / (100 if shown.strip().endswith("%") else 1)
                digits = re.sub(r"e.*", "", shown.strip().rstrip("%")).split(".")
                decimals = len(digits[1]) if len(digits) > 1 else 0
                exponent = int(shown.split("e")[1]) if "e" in shown else (-2 if shown.strip().endswith("%") else 0)
                tol = 0.5 * 10.0 ** (exponent - decimals) * (1 + 1e-9)
                assert abs(x - expected) <= tol, (key, shown, expected)


def test_findings_are_listed_and_text_is_escaped(broken):
    d = json.loads(to_json(broken))
    kinds = {f["kind"] for f in d["findings"]}
    assert {"coincident_atoms", "near_singular"} <= kinds
    d["findings"][0]["message"] = "<script>alert('x')</script> & <b>bold</b>"
    d["input"]["path"] = "<img src=x onerror=alert(1)>.xyz"
    text = render_html(d)
    assert "<script>alert" not in text and "<img src=x" not in text
    page = parse(text)
    body = "".join(page.text)
    assert "<script>alert('x')</script> & <b>bold</b>" in body
    for f in d["findings"][1:]:
        assert f["message"] in body


def test_remedies_and_trial_scf_are_shown():
    from auditor.remedies.plan import RemedyOptions

    # a ghost H 0.05 Å from H2: nearly singular, but not a broken geometry (remedies are offered)
    w = np.array(WATER[1])
    mol = Molecule(
        ("O", "H", "H", "H"), np.vstack([w, w[1] + [0.0, 0.05, 0.0]]), (False,) * 3 + (True,), source="p.xyz"
    )
    r = auditor.audit(mol, "sto-3g", remedies=RemedyOptions(trial_scf="hf", target=1e-2))
    d = json.loads(to_json(r))
    runs = d["remedies"]["trial_scf"]["runs"]
    assert runs and d["remedies"]["alternatives"]
    page = parse(render_html(r))
    keys = {k: json.loads(v) for k, v, _ in page.numbers}
    for i, run in enumerate(runs):
        assert keys[f"remedies.trial_scf.runs.{i}.energy"] == run["energy"]
    body = "".join(page.text)
    for a in d["remedies"]["alternatives"]:
        assert a["title"] in body
    # a part the page does not know yet is still shown, not dropped
    d["remedies"]["future_part"] = {"tolerance": 2.5e-6}
    keys = {k: json.loads(v) for k, v, _ in parse(render_html(d)).numbers}
    assert keys["remedies.future_part.tolerance"] == 2.5e-6


def test_figures_are_deterministic(broken):
    d = json.loads(to_json(broken))
    assert report_plots(d) == report_plots(copy.deepcopy(d))
    # PNG specification: a tIME chunk or a Software text chunk would differ between runs
    # or versions; none is written
    for png in report_plots(d).values():
        assert png.startswith(b"\x89PNG") and b"tIME" not in png and b"Software" not in png


def test_spectrum_plot_survives_singular_and_negative_eigenvalues(clean):
    d = json.loads(to_json(clean))
    ev = d["spectrum"]["eigenvalues"]
    d["spectrum"]["eigenvalues"] = [-3e-16, 0.0] + ev[2:]
    img = mpimg.imread(io.BytesIO(spectrum_png(d)), format="png")
    assert float(img[..., :3].std()) > 0.02
    # the clipped points change the picture
    assert spectrum_png(d) != spectrum_png(json.loads(to_json(clean)))


def test_principal_projection_keeps_a_planar_molecule_undistorted():
    rng = np.random.default_rng(7)
    flat = np.c_[rng.normal(size=(8, 2)) * 2.0, np.zeros(8)]
    q, _ = np.linalg.qr(rng.normal(size=(3, 3)))
    p = principal_projection(flat @ q.T + [1.0, -2.0, 3.0])

    def dists(x):
        return np.linalg.norm(x[:, None] - x[None], axis=-1)

    assert np.allclose(dists(p), dists(flat), atol=1e-9)


def test_write_reports_all_puts_figures_beside_the_markdown(tmp_path, broken):
    written = write_reports(broken, tmp_path, "all", "pasted")
    names = {p.name for p in written}
    assert {
        "pasted.json",
        "pasted.md",
        "pasted.html",
        "pasted_spectrum.png",
        "pasted_causes.png",
        "pasted_molecule.png",
    } <= names
    md = (tmp_path / "pasted.md").read_text()
    links = re.findall(r"!\[[^\]]*\]\(([^)]+)\)", md)
    assert len(links) == 3
    for link in links:
        assert (tmp_path / link).read_bytes().startswith(PNG_MAGIC)
    only = write_reports(broken, tmp_path / "h", "html", "pasted")
    assert [p.name for p in only] == ["pasted.html"]


def set_items(results):
    items = [item_from_result(r, f"r{i}.html") for i, r in enumerate(results)]
    items.append(
        {
            "path": "unreadable.xyz",
            "frame": None,
            "verdict": "error",
            "smallest_eigenvalue": math.nan,
            "n_functions": None,
            "report": "",
            "error": "unreadable.xyz: line 2: not a number",
        }
    )
    items.append(
        {
            "path": "mild.xyz",
            "frame": 2,
            "verdict": "caution",
            "smallest_eigenvalue": 3e-6,
            "n_functions": 50,
            "report": "items/mild f2.html",
            "error": "",
        }
    )
    return items


def test_set_index_counts_order_and_links(tmp_path, broken, clean):
    items = set_items([clean, broken])
    path = write_set_index(tmp_path, items, policy={"caution": 1e-5, "fail": 1e-7})
    page = parse(path.read_text())
    counts = {k[len("count.") :]: int(v) for k, v, _ in page.numbers if k.startswith("count.")}
    assert counts == {"pass": 1, "fail": 1, "caution": 1, "error": 1}
    body = [r for r in page.rows if r]  # rows with cells: the item table
    verdict_order = [int(r[2]["data-sort"]) for r in body]
    assert verdict_order == sorted(verdict_order)
    shown = [json.loads(v) for k, v, _ in page.numbers if k == "smallest_eigenvalue"]
    assert shown[0] == broken.spectrum.smallest and clean.spectrum.smallest in shown
    assert {"r0.html", "r1.html", "items/mild%20f2.html"} <= set(page.links)
    assert len(page.images) == 1
    decode_png(page.images[0])
    assert page.scripts and all(not s.get("src") for s in page.scripts)


def test_set_index_from_gate_summary_rows(tmp_path):
    import pandas as pd

    from auditor.report.overview import link_reports

    rows = pd.DataFrame(
        [
            {
                "path": "a.xyz",
                "frame": 1,
                "item": "a",
                "verdict": "pass",
                "outcome": "ok",
                "smallest_eigenvalue": 2e-3,
                "n_functions": 24,
                "basis": "cc-pvdz",
                "threshold": 1e-6,
                "reason": "fine",
                "error": "",
            },
            {
                "path": "b.xyz",
                "frame": 1,
                "item": "b",
                "verdict": "caution",
                "outcome": "blocked",
                "smallest_eigenvalue": 4e-6,
                "n_functions": 40,
                "basis": "cc-pvdz",
                "threshold": 1e-6,
                "reason": "below caution",
                "error": "",
            },
            {
                "path": "c.xyz",
                "frame": None,
                "item": "c",
                "verdict": "error",
                "outcome": "blocked",
                "smallest_eigenvalue": math.nan,
                "n_functions": None,
                "basis": "cc-pvdz",
                "threshold": math.nan,
                "reason": "c.xyz: empty",
                "error": "c.xyz: empty",
            },
        ]
    )
    csv = tmp_path / "summary.csv"
    rows.to_csv(csv, index=False)
    back = pd.read_csv(csv).to_dict("records")  # empty cells come back as NaN
    (tmp_path / "items").mkdir()
    (tmp_path / "items" / "a.html").write_text("<!DOCTYPE html><title>a</title>")
    (tmp_path / "items" / "c.json").write_text("{}")
    page = parse(write_set_index(tmp_path, link_reports(tmp_path, back)).read_text())
    assert set(page.links) == {"items/a.html", "items/c.json"}  # b has no report: no link
    body = "".join(page.text)
    assert "nan" not in body.lower()
    assert "Every item: basis cc-pvdz; advised threshold 1.0e-06." in body
    firsts = [r[1]["data-sort"] for r in page.rows if r]
    assert firsts == ["c.xyz", "b.xyz [1]", "a.xyz [1]"]  # blocked first; an unreadable item before a caution


def test_item_pages_are_written_for_results_only(tmp_path, clean):
    from auditor.report.overview import link_reports, write_item_pages

    items = tmp_path / "items"
    items.mkdir()
    (items / "ok.json").write_text(to_json(clean))
    (items / "bad.json").write_text(json.dumps({"schema": "auditor-item-error/1", "error": "bad.xyz: empty"}))
    rows = [{"item": "ok", "path": "ok.xyz", "verdict": "pass"}, {"item": "bad", "path": "bad.xyz", "verdict": "error"}]
    written = write_item_pages(tmp_path, rows)
    assert [p.name for p in written] == ["ok.html"]
    parse((items / "ok.html").read_text())
    assert [r["report"] for r in link_reports(tmp_path, rows)] == ["items/ok.html", "items/bad.json"]
    # a page already drawn from the same JSON is not drawn again; a newer JSON is
    import os

    import auditor.report.html as html_writer

    def must_not_draw(*_):
        raise AssertionError("page drawn again from an unchanged report")

    real = html_writer.write_html
    html_writer.write_html = must_not_draw
    try:
        assert [p.name for p in write_item_pages(tmp_path, rows)] == ["ok.html"]
    finally:
        html_writer.write_html = real
    page = items / "ok.html"
    os.utime(items / "ok.json", ns=(page.stat().st_mtime_ns + 10**9,) * 2)
    page.write_text("stale")
    write_item_pages(tmp_path, rows)
    assert page.read_text() != "stale"


def test_set_index_without_any_audited_item_has_no_figure():
    text = render_set_index(
        [
            {
                "path": "a.xyz",
                "frame": None,
                "verdict": "error",
                "smallest_eigenvalue": None,
                "n_functions": None,
                "report": "",
                "error": "a.xyz: empty file",
            }
        ]
    )
    page = parse(text)
    assert page.images == [] and "a.xyz: empty file" in "".join(page.text)


# ---------------------------------------------------------------- headless Chromium

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
needs_chromium = pytest.mark.skipif(CHROMIUM is None, reason="chromium is not installed")


def chromium(tmp_path, *args):
    profile = tmp_path / "profile"
    cmd = [
        CHROMIUM,
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--hide-scrollbars",
        f"--user-data-dir={profile}",
        *args,
    ]
    return subprocess.run(cmd, check=False, capture_output=True, text=True, timeout=120)


@pytest.mark.slow
@needs_chromium
def test_report_renders_in_chromium(tmp_path, pages):
    page, shot = tmp_path / "r.html", tmp_path / "shot.png"
    page.write_text(pages["broken"], encoding="utf-8")
    chromium(tmp_path, f"--screenshot={shot}", "--window-size=1200,1600", page.as_uri())
    img = mpimg.imread(str(shot))
    assert img.shape[0] >= 1000 and img.shape[1] >= 1000
    rgb = img[..., :3].reshape(-1, 3)
    assert float(rgb.std(axis=0).max()) > 0.05
    assert len(np.unique((rgb * 255).astype(np.uint8), axis=0)) > 50


@pytest.mark.slow
@needs_chromium
def test_set_index_table_sorts_in_chromium(tmp_path, broken, clean):
    items = set_items([clean, broken])
    text = render_set_index(items)
    # click the "smallest eigenvalue" heading once (ascending), then dump the page
    text = text.replace("</main>", "<script>document.querySelectorAll('thead th button')[3].click();</script></main>")
    page = tmp_path / "index.html"
    page.write_text(text, encoding="utf-8")
    res = chromium(tmp_path, "--dump-dom", page.as_uri())
    dom = parse(res.stdout)
    heads = re.findall(r"<th[^>]*aria-sort=\"(\w+)\"[^>]*><button[^>]*>([^<]+)<", res.stdout)
    assert heads == [("ascending", "smallest eigenvalue")]
    column = [r[3].get("data-sort", "") for r in dom.rows if r]
    values = [float(x) for x in column if x]
    assert values == sorted(values) and len(values) == 3
    assert column[-1] == ""  # the unreadable item goes last


def test_gate_format_html_writes_index_and_item_pages(tmp_path):
    from typer.testing import CliRunner

    from auditor.cli import app
    from helpers import write_xyz

    sets = tmp_path / "set"
    sets.mkdir()
    symbols, coords = WATER
    write_xyz(sets / "good.xyz", symbols, coords)
    write_xyz(sets / "pasted.xyz", symbols + ["H"], coords + [coords[1]])
    (sets / "broken.xyz").write_text("2\nc\nO 0 0 0\n")
    out = tmp_path / "gate"
    res = CliRunner().invoke(
        app, ["gate", str(sets), "-b", "sto-3g", "-o", str(out), "--format", "html", "--no-cache", "--jobs", "1"]
    )
    assert res.exit_code == 1, res.output
    index = parse((out / "index.html").read_text())
    linked = sorted({h for h in index.links if h.startswith("items/")})
    # audited items link to their pages, the unreadable one to its JSON error report
    assert [h.rsplit("__", 1)[1] for h in linked] == ["broken.json", "good.html", "pasted.html"]
    for h in linked[1:]:
        page = parse((out / h).read_text())
        assert page.images and all(decode_png(src).size for src in page.images)
    # the JSON-only format writes no HTML
    out2 = tmp_path / "gate2"
    res2 = CliRunner().invoke(app, ["gate", str(sets), "-b", "sto-3g", "-o", str(out2), "--no-cache", "--jobs", "1"])
    assert res2.exit_code == 1 and (out2 / "summary.csv").is_file(), res2.output
    assert not list(out2.rglob("*.html"))
