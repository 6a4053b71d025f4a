"""report.html: one self-contained file with every section, written by runs and by
``woodlot report``, and shown by a real browser (headless Chromium) without a console error."""

from __future__ import annotations

import base64
import io
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from harness.cli import main
from harness.report.page import CAUTION, REPORT_NAME, SECTIONS
from harness.store import Store
from tests.conftest import SMALL_SUITE

ROOT = Path(__file__).resolve().parents[1]

SWEEP = """
[speedup]
workers = [1, 2]
repeats = 1
datasets = ["wine"]
strategies = ["forest"]
"""


class Page(HTMLParser):
    """What the tests look at: sections with their headings and text, every URL-bearing
    attribute, every tag name."""

    def __init__(self, text: str) -> None:
        super().__init__()
        self.tags: list[str] = []
        self.urls: list[tuple[str, str, str]] = []  # (tag, attribute, value)
        self.sections: dict[str, dict] = {}
        self._section: str | None = None
        self._in_h2 = False
        self.feed(text)

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        a = dict(attrs)
        for name in ("src", "href", "action", "data", "poster", "srcset", "formaction"):
            if name in a:
                self.urls.append((tag, name, a[name] or ""))
        if tag == "section":
            self._section = a.get("id")
            self.sections[self._section] = {"title": "", "text": ""}
        if tag == "h2":
            self._in_h2 = True

    def handle_endtag(self, tag):
        if tag == "h2":
            self._in_h2 = False
        if tag == "section":
            self._section = None

    def handle_data(self, data):
        if self._section is None:
            return
        s = self.sections[self._section]
        s["text"] += data
        if self._in_h2:
            s["title"] += data


def squash(text: str) -> str:
    return re.sub(r"\s+", " ", text).strip()


def caution_in_contributor_guide() -> str:
    """The caution paragraph as DEVELOPERS.md has it (a Markdown blockquote)."""
    lines = (ROOT / "DEVELOPERS.md").read_text(encoding="utf-8").splitlines()
    start = next(i for i, line in enumerate(lines) if line.startswith("> **Caution.**"))
    quote = []
    for line in lines[start:]:
        if not line.startswith(">"):
            break
        quote.append(line.lstrip("> ").strip())
    return " ".join(quote)


@pytest.fixture(scope="module")
def swept(run_once):
    """SMALL_SUITE with a small speedup sweep, run once."""
    return run_once(SMALL_SUITE + SWEEP, "report").folder


@pytest.fixture(scope="module")
def plain(run_once):
    """SMALL_SUITE without a sweep."""
    return run_once(SMALL_SUITE, "plain").folder


def test_caution_is_the_contributor_guide_paragraph_verbatim():
    assert CAUTION == caution_in_contributor_guide()


def test_report_is_self_contained(swept):
    text = (swept / REPORT_NAME).read_text(encoding="utf-8")
    page = Page(text)
    for banned in ("script", "link", "iframe", "object", "embed", "base", "frame"):
        assert banned not in page.tags, banned
    assert "@import" not in text and "url(" not in text.lower()
    imgs = [u for u in page.urls if u[0] == "img"]
    assert len(imgs) >= 9  # score/time, rank/time, two diagrams, ensemble size, two speedup,
    # probability bars, posterior triangles
    for tag, attr, value in page.urls:
        assert not re.match(r"\s*(https?:|//|ftp:|file:)", value, re.I), (tag, attr, value)
        if tag == "img":
            assert value.startswith("data:image/png;base64,"), value[:40]
            data = base64.b64decode(value.split(",", 1)[1], validate=True)
            with Image.open(io.BytesIO(data)) as im:
                im.verify()  # a whole, decodable PNG
        elif tag == "a":
            assert value.startswith("#") and value[1:] in page.sections, value
        else:
            pytest.fail(f"unexpected {tag} {attr}={value[:40]}")
    assert "Content-Security-Policy" in text and "default-src 'none'" in text


# a run (not `woodlot choose`) has no recommendation section
RUN_SECTIONS = [(sid, title) for sid, title in SECTIONS if sid != "recommendation"]


def test_report_has_every_section(swept):
    page = Page((swept / REPORT_NAME).read_text(encoding="utf-8"))
    assert list(page.sections) == [sid for sid, _ in RUN_SECTIONS if sid != "tuning"]
    for sid, title in RUN_SECTIONS:
        if sid == "tuning":  # not tuned
            continue
        assert squash(page.sections[sid]["title"]) == title
        assert len(squash(page.sections[sid]["text"])) > len(title) + 20, sid
    caution = squash(page.sections["caution"]["text"])
    assert caution.endswith(squash(CAUTION.replace("**", "")))
    verdict = squash(page.sections["verdict"]["text"])
    assert "Across 2 datasets" in verdict and "ranks first" in verdict or "share the best" \
        in verdict
    # two datasets: the report says the tests cannot separate anything
    assert "With 2 datasets the smallest two-sided Wilcoxon p-value possible is 0.5" in verdict
    speed = squash(page.sections["speedup"]["text"])
    assert "Speedup S(p) = T(1) / T(p)" in speed  # tables/speedup.md, embedded
    datasets = squash(page.sections["datasets"]["text"])
    assert "wine" in datasets and "friedman" in datasets and "P(within region of best)" \
        in datasets
    assert "dominated by" in squash(page.sections["cost"]["text"])


def test_no_sweep_no_speedup_section_and_report_rewritten_from_store(plain):
    report = plain / REPORT_NAME
    first = Page(report.read_text(encoding="utf-8"))
    assert "speedup" not in first.sections
    assert list(first.sections) == [sid for sid, _ in RUN_SECTIONS if sid not in ("speedup", "tuning")]
    report.unlink()
    shutil.rmtree(plain / "plots")
    assert main(["report", str(plain)]) == 0
    again = Page(report.read_text(encoding="utf-8"))
    assert list(again.sections) == list(first.sections)
    assert again.sections["datasets"]["text"] == first.sections["datasets"]["text"]
    assert len([u for u in again.urls if u[0] == "img"]) == 7


def test_store_without_accuracy_cells_still_gets_a_report(tmp_path):
    with Store(tmp_path / "empty") as store:
        store.start_run("empty", "", "test", {})
    assert main(["report", str(tmp_path / "empty")]) == 0
    page = Page((tmp_path / "empty" / REPORT_NAME).read_text(encoding="utf-8"))
    assert "nothing to compare" in page.sections["verdict"]["text"]
    assert "caution" in page.sections


def test_per_dataset_figures_stop_at_a_dozen_datasets_and_say_so(write_suite, tmp_path):
    from harness import run_suite
    from harness.report.shown import MAX_PANELS
    from harness.report.images import DPI

    datasets = "".join(f"""
[[dataset]]
name = "blobs-{i:02d}"
from = "generator"
make = "make_classification"
params = {{ n_samples = 60, n_features = 4, random_state = {i} }}
""" for i in range(MAX_PANELS + 1))
    path = write_suite(f"""
[suite]
name = "many"

[protocol]
folds = 2
repeats = 1
{datasets}
""" + SMALL_SUITE[SMALL_SUITE.index("[[strategy]]"):])
    out = run_suite(path, out=tmp_path / "out", jobs=2, progress=False).folder
    page = Page((out / REPORT_NAME).read_text(encoding="utf-8"))
    note = (f"Figures with one panel per dataset show the first {MAX_PANELS} of the "
            f"{MAX_PANELS + 1} datasets by name")
    assert note in squash(page.sections["cost"]["text"])
    assert note in squash(page.sections["ensemble-size"]["text"])
    for name, titles in (("score_vs_fit_time", 1.1), ("ensemble_size", 0.9)):
        with Image.open(out / "plots" / f"{name}.png") as im:
            # rows of three 3.6-inch panels plus room for title and legend (`plots.grid`)
            assert im.height == round((3.6 * MAX_PANELS / 3 + titles) * DPI), name


def test_verdict_pictures_past_two_dozen_pairs_show_the_best_strategys_pairs(write_suite,
                                                                              tmp_path):
    from harness import run_suite
    from harness.report.shown import MAX_PAIRS

    trees = "".join(f"""
[[strategy]]
name = "tree-{leaf}"
method = "single-tree"
params = {{ min_samples_leaf = {leaf} }}
""" for leaf in range(1, 9))  # 8 strategies: 28 pairs
    body = SMALL_SUITE[:SMALL_SUITE.index("[[strategy]]")].replace("repeats = 2", "repeats = 1")
    out = run_suite(write_suite(body + trees), out=tmp_path / "out", jobs=2,
                    progress=False).folder
    page = Page((out / REPORT_NAME).read_text(encoding="utf-8"))
    text = squash(page.sections["pictures"]["text"])
    assert MAX_PAIRS < 28
    assert "8 strategies make 28 pairs: the pictures show the 7 pairs of the best-ranked " \
           "strategy" in text
    with Image.open(out / "plots" / "posterior_triangles.png") as im:
        assert im.height == round((2.7 * 2 + 0.5) * 110)  # 7 triangles: two rows of four


# ------------------------------------------------------------------ a real browser

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
needs_chromium = pytest.mark.skipif(
    CHROMIUM is None, reason="chromium is not installed (.ci/run installs Debian's chromium)")
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--hide-scrollbars", "--enable-logging=stderr", "--v=0"]


def chromium(url: str, tmp_path: Path, *args: str) -> subprocess.CompletedProcess:
    profile = tmp_path / f"profile-{len(list(tmp_path.iterdir()))}"
    return subprocess.run([CHROMIUM, *FLAGS, f"--user-data-dir={profile}", *args, url],
                          capture_output=True, text=True, timeout=180)


def console_messages(stderr: str) -> list[str]:
    """Lines Chromium logs for the page's console (errors, CSP refusals, uncaught exceptions)."""
    return [line for line in stderr.splitlines()
            if ":CONSOLE" in line or "Uncaught" in line or "Refused to" in line]


@needs_chromium
def test_the_console_check_catches_a_broken_page(tmp_path):
    # the same policy as the report: an outside image is refused, and the browser says so
    bad = tmp_path / "bad.html"
    bad.write_text('<!DOCTYPE html><html><head><meta charset="utf-8"><meta http-equiv='
                   '"Content-Security-Policy" content="default-src \'none\'; img-src data:">'
                   '</head><body><h2>x</h2><img src="https://example.invalid/a.png"></body>'
                   "</html>", encoding="utf-8")
    run = chromium(bad.as_uri(), tmp_path, "--dump-dom")
    assert run.returncode == 0, run.stderr[-2000:]
    assert console_messages(run.stderr), run.stderr[-2000:]


@needs_chromium
def test_report_in_headless_chromium(swept, tmp_path):
    url = (swept / REPORT_NAME).resolve().as_uri()
    run = chromium(url, tmp_path, "--dump-dom")
    assert run.returncode == 0, run.stderr[-2000:]
    assert console_messages(run.stderr) == []
    dom = Page(run.stdout)
    assert list(dom.sections) == [sid for sid, _ in RUN_SECTIONS if sid != "tuning"]
    for sid, title in RUN_SECTIONS:
        if sid == "tuning":  # not tuned
            continue
        assert squash(dom.sections[sid]["title"]) == title
    assert len([u for u in dom.urls if u[0] == "img"]) >= 7
    shot = tmp_path / "report.png"
    run = chromium(url, tmp_path, f"--screenshot={shot}", "--window-size=1280,2400")
    assert run.returncode == 0 and shot.exists(), run.stderr[-2000:]
    assert console_messages(run.stderr) == []
    with Image.open(shot) as im:
        assert im.size == (1280, 2400)
        gray = im.convert("L")
        # the top of the page is drawn: text and tables, not a blank or an error page
        dark = int((np.asarray(gray.crop((0, 0, 1280, 1200))) < 128).sum())
        assert dark > 5000, dark
