"""The review report rendered in a real browser (Debian's headless Chromium): screenshot, DOM, print."""

from __future__ import annotations

import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest

from harness.report import SECTION_IDS, build_report
from tests.harness.report_fixtures import make_bundle

CHROMIUM = Path("/usr/bin/chromium")
MARKUP = '<b>x</b>&"'

pytestmark = [
    pytest.mark.browser,
    pytest.mark.skipif(not CHROMIUM.is_file(),
                       reason="needs Debian's /usr/bin/chromium (CI installs it: apt-get install chromium)"),
]


def _chromium(profile: Path, *args: str) -> subprocess.CompletedProcess:
    cmd = [str(CHROMIUM), "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
           "--no-first-run", "--disable-component-update", "--disable-sync", f"--user-data-dir={profile}", *args]
    # A generous guard against a hung browser, not a performance check.
    return subprocess.run(cmd, capture_output=True, timeout=180, check=False)


class _Dom(HTMLParser):
    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data):
        self.text.append(data)


@pytest.fixture(scope="module")
def rendered(tmp_path_factory):
    """A report with a markup-named model, its screenshot and its DOM as the browser built it."""
    b = make_bundle(models=("rw", MARKUP, "bvar"), n_draws=100)
    out = tmp_path_factory.mktemp("browser_report")
    paths = build_report(b.evaluation, out, sensitivity=b.sensitivity, ledger=b.ledger, fan_truths=b.fan_truths,
                         since=b.earlier)
    url = (out / "report.html").resolve().as_uri()
    shot = out / "shot.png"
    r = _chromium(out / "profile-shot", f"--screenshot={shot}", "--window-size=1280,4000", url)
    assert shot.is_file(), r.stderr.decode(errors="replace")[-2000:]
    d = _chromium(out / "profile-dom", "--dump-dom", url)
    dom = d.stdout.decode("utf-8")
    assert "</html>" in dom, d.stderr.decode(errors="replace")[-2000:]
    yield out, paths, shot, dom
    shutil.rmtree(out / "profile-shot", ignore_errors=True)
    shutil.rmtree(out / "profile-dom", ignore_errors=True)


def test_screenshot_is_not_blank(rendered):
    """The rendered page is a 1280-pixel-wide image with real content (pixel variance, dark and coloured pixels)."""
    import matplotlib.image as mpimg

    _, _, shot, _ = rendered
    img = mpimg.imread(shot)
    assert img.shape[1] == 1280 and img.shape[0] >= 1000
    rgb = img[..., :3].astype(np.float64)
    grey = rgb.mean(axis=-1)
    assert grey.var() > 0.005  # a blank page has zero variance
    assert (grey < 0.3).mean() > 0.005  # text is there
    chroma = rgb.max(axis=-1) - rgb.min(axis=-1)
    assert (chroma > 0.15).mean() > 0.01  # the colour scale of the tables is rendered


def test_dom_has_every_section_and_table(rendered):
    """The browser's DOM holds each section id once, and every table whose files were written."""
    out, paths, _, dom = rendered
    p = _Dom()
    p.feed(dom)
    ids = [a.get("id") for t, a in p.tags if t == "section"]
    assert ids == list(SECTION_IDS)
    table_ids = {a.get("id") for t, a in p.tags if t == "table" and a.get("id")}
    written = {Path(k).stem for k in paths if k.startswith("tables/")}
    assert written and written <= table_ids
    imgs = [a for t, a in p.tags if t == "img"]
    figs = [k for k in paths if k.startswith("figures/")]
    assert len(imgs) == len(figs)
    assert all(a["src"].startswith("data:image/png;base64,") for a in imgs)


def test_markup_in_a_model_name_stays_text_in_the_dom(rendered):
    """A model named with markup characters is text in the browser's DOM: escaped, and no element injected."""
    _, _, _, dom = rendered
    p = _Dom()
    p.feed(dom)
    assert not any(t == "b" for t, _ in p.tags)
    assert MARKUP in "".join(p.text)
    assert "&lt;b&gt;x&lt;/b&gt;&amp;" in dom


def _pdf_pages(profile: Path, html_file: Path, pdf: Path) -> int:
    r = _chromium(profile, f"--print-to-pdf={pdf}", "--no-pdf-header-footer", html_file.resolve().as_uri())
    assert pdf.is_file(), r.stderr.decode(errors="replace")[-2000:]
    data = pdf.read_bytes()
    assert data[:5] == b"%PDF-"
    # Page objects are written as "/Type /Page" (ISO 32000-1, sect. 7.7.3.3); "/Pages" is the tree node.
    return len(re.findall(rb"/Type\s*/Page(?!s)", data))


def test_printing_starts_each_section_on_a_new_page(rendered, tmp_path):
    """Printed to PDF, each section starts a page: more pages than the same page without the break rule."""
    out, _, _, _ = rendered
    page = (out / "report.html").read_text(encoding="utf-8")
    no_breaks = re.sub(r"section \{ break-before: page; page-break-before: always; \}", "", page)
    assert no_breaks != page
    plain = tmp_path / "no_breaks.html"
    plain.write_text(no_breaks, encoding="utf-8")
    n_with = _pdf_pages(tmp_path / "profile-a", out / "report.html", tmp_path / "a.pdf")
    n_without = _pdf_pages(tmp_path / "profile-b", plain, tmp_path / "b.pdf")
    assert n_with >= len(SECTION_IDS)
    assert n_with > n_without
