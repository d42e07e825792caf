"""The pack and its appendix rendered in a real browser (Debian's headless Chromium): layout, print, contrast."""

from __future__ import annotations

import json
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest

from harness.report import build_report, page_ids
from tests.harness.report.report_fixtures import SKILL, make_bundle, make_extras

CHROMIUM = Path("/usr/bin/chromium")
MARKUP = '<b>x</b>&"'

pytestmark = [
    pytest.mark.browser,
    pytest.mark.skipif(not CHROMIUM.is_file(),
                       reason="needs Debian's /usr/bin/chromium (CI installs it: apt-get install chromium)"),
]

# Layout and contrast probe, added to a copy of a page (the report itself has no script). For every
# element with its own text it composites the background colours of the element and its ancestors
# (alpha over alpha, down to the white canvas) and computes the WCAG 2.1 contrast ratio of the text
# colour against it: (L1 + 0.05) / (L2 + 0.05) with the relative luminance L of sRGB (W3C, WCAG 2.1,
# definitions "contrast ratio" and "relative luminance").
PROBE = r"""
<div id="probe-fail" style="color:#777777;background:#ffffff">probe 4.48</div>
<div id="probe-pass" style="color:#767676;background:#ffffff">probe 4.54</div>
<script>
(function () {
  function rgba(s) {
    var m = s.match(/rgba?\(([^)]+)\)/); if (!m) return [0, 0, 0, 0];
    var p = m[1].split(',').map(parseFloat); return [p[0], p[1], p[2], p.length > 3 ? p[3] : 1];
  }
  function over(top, bot) {  // "source over" compositing of two colours
    var a = top[3] + bot[3] * (1 - top[3]); if (a === 0) return [0, 0, 0, 0];
    return [0, 1, 2].map(function (i) { return (top[i] * top[3] + bot[i] * bot[3] * (1 - top[3])) / a; })
      .concat([a]);
  }
  function lum(c) {
    var v = [0, 1, 2].map(function (i) { var x = c[i] / 255;
      return x <= 0.03928 ? x / 12.92 : Math.pow((x + 0.055) / 1.055, 2.4); });
    return 0.2126 * v[0] + 0.7152 * v[1] + 0.0722 * v[2];
  }
  function background(el) {
    var stack = [];
    for (var e = el; e; e = e.parentElement) stack.push(rgba(getComputedStyle(e).backgroundColor));
    var c = [255, 255, 255, 1];
    for (var i = stack.length - 1; i >= 0; i--) c = over(stack[i], c);
    return c;
  }
  var bad = [], n = 0, probes = {};
  document.querySelectorAll('body *').forEach(function (el) {
    var own = Array.prototype.some.call(el.childNodes, function (x) {
      return x.nodeType === 3 && x.textContent.trim(); });
    var cs = getComputedStyle(el);
    if (!own || cs.display === 'none' || cs.visibility === 'hidden') return;
    var bg = background(el), fg = over(rgba(cs.color), bg);
    var l1 = lum(fg), l2 = lum(bg), r = (Math.max(l1, l2) + 0.05) / (Math.min(l1, l2) + 0.05);
    if (el.id && el.id.indexOf('probe-') === 0) { probes[el.id] = r; return; }
    n++;
    if (r < 4.5) bad.push({tag: el.tagName, cls: el.className, text: el.textContent.trim().slice(0, 40),
                           ratio: Math.round(r * 100) / 100});
  });
  var rect = function (sel) { var e = document.querySelector(sel); if (!e) return null;
    var b = e.getBoundingClientRect(); return {top: b.top + window.scrollY, bottom: b.bottom + window.scrollY}; };
  var sections = Array.prototype.map.call(document.querySelectorAll('section'), function (s) {
    return {id: s.id, top: s.getBoundingClientRect().top + window.scrollY}; });
  var rows = document.querySelectorAll('table.decision tbody tr:not(.group)');
  var firstRow = rows.length ? rows[0].getBoundingClientRect() : null;
  var out = {n: n, bad: bad, probes: probes, sections: sections, width: window.innerWidth,
             decision: rect('section#decision'), table: rect('table.decision'),
             firstRowBottom: firstRow ? firstRow.bottom + window.scrollY : null, rows: rows.length};
  document.body.setAttribute('data-probe', JSON.stringify(out));
  ['probe-fail', 'probe-pass'].forEach(function (i) { document.getElementById(i).remove(); });
})();
</script>
"""


def _chromium(profile: Path, *args: str) -> subprocess.CompletedProcess:
    cmd = [str(CHROMIUM), "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
           "--disable-background-networking", "--no-first-run", "--disable-component-update", "--disable-sync",
           f"--user-data-dir={profile}", *args]
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


def _probe(out: Path, name: str, tmp: Path) -> tuple[dict, str]:
    """Load a copy of ``name`` with the probe at 1280 × 900 CSS pixels; return its findings and the DOM."""
    page = (out / name).read_text(encoding="utf-8")
    probed = tmp / f"probe-{name}"
    probed.write_text(page.replace("</body>", PROBE + "</body>"), encoding="utf-8")
    d = _chromium(tmp / f"profile-{name}", "--window-size=1280,900", "--dump-dom", probed.resolve().as_uri())
    dom = d.stdout.decode("utf-8")
    m = re.search(r'data-probe="([^"]*)"', dom)
    assert m, d.stderr.decode(errors="replace")[-2000:]
    import html

    return json.loads(html.unescape(m.group(1))), dom


@pytest.fixture(scope="module")
def rendered(tmp_path_factory):
    """A pack and appendix with a markup-named model, probed in the browser, its first screen and its PDF."""
    # a sharp and a blunt model put cells at both ends of the colour scale, where contrast is lowest
    b = make_bundle(models=("rw", MARKUP, "bvar", "sharp", "blunt"), n_draws=100,
                    skill=[*SKILL, (0.0, 0.25, 0.35), (1.5, 1.8, 2.5)])
    out = tmp_path_factory.mktemp("browser_report")
    tmp = tmp_path_factory.mktemp("browser_probe")
    paths = build_report(b.evaluation, out, sensitivity=b.sensitivity, ledger=b.ledger, fan_truths=b.fan_truths,
                         since=b.earlier, extras=make_extras(b))
    shot = out / "shot.png"
    r = _chromium(tmp / "profile-shot", f"--screenshot={shot}", "--window-size=1280,900",
                  (out / "report.html").resolve().as_uri())
    assert shot.is_file(), r.stderr.decode(errors="replace")[-2000:]
    probes = {name: _probe(out, name, tmp) for name in ("report.html", "appendix.html")}
    yield out, paths, shot, probes
    shutil.rmtree(tmp, ignore_errors=True)


def test_first_screen_shows_the_decision_page(rendered):
    """At 1280 × 900 px the decision page comes first: its heading, table head and first rows are above 900 px."""
    import matplotlib.image as mpimg

    _, _, shot, probes = rendered
    info, _ = probes["report.html"]
    assert info["width"] == 1280
    assert [s["id"] for s in info["sections"]][0] == "decision"
    assert info["decision"]["top"] < 200 and info["table"]["top"] < 450
    assert info["rows"] >= 8 and info["firstRowBottom"] < 900
    img = mpimg.imread(shot)
    assert img.shape[:2] == (900, 1280)
    rgb = img[..., :3].astype(np.float64)
    grey = rgb.mean(axis=-1)
    assert grey.var() > 0.005 and (grey < 0.3).mean() > 0.005  # text is there, the page is not blank


def test_text_contrast_is_at_least_4_5_everywhere(rendered):
    """Every text of both pages has a WCAG 2.1 contrast of at least 4.5:1 with its composited background."""
    _, _, _, probes = rendered
    for name, (info, _) in probes.items():
        # the checker itself: #777 on white is 4.48:1 and #767676 4.54:1 (WebAIM's contrast checker, from memory)
        assert info["probes"]["probe-fail"] == pytest.approx(4.48, abs=0.01)
        assert info["probes"]["probe-pass"] == pytest.approx(4.54, abs=0.01)
        assert info["n"] > 200, name  # every cell, caption and note was checked, not a handful
        assert not info["bad"], (name, info["bad"][:10])
    # the pages hold cells at both darkest levels of the scale (the hardest backgrounds for text)
    from harness.report.colours import PALETTE

    page = (rendered[0] / "report.html").read_text(encoding="utf-8")
    assert f"background:{PALETTE[-4]}" in page and f"background:{PALETTE[4]}" in page


def test_pack_prints_to_at_most_four_a4_pages(rendered, tmp_path):
    """Printed to PDF by Chromium the pack takes at most four A4 pages, and each pack section starts a page."""
    out, _, _, _ = rendered
    pdf = tmp_path / "pack.pdf"
    r = _chromium(tmp_path / "profile-pdf", f"--print-to-pdf={pdf}", "--no-pdf-header-footer",
                  (out / "report.html").resolve().as_uri())
    assert pdf.is_file(), r.stderr.decode(errors="replace")[-2000:]
    data = pdf.read_bytes()
    assert data[:5] == b"%PDF-"
    # Page objects are written as "/Type /Page" (ISO 32000-1, sect. 7.7.3.3); "/Pages" is the tree node.
    n = len(re.findall(rb"/Type\s*/Page(?!s)", data))
    boxes = re.findall(rb"/MediaBox\s*\[\s*0\s+0\s+([\d.]+)\s+([\d.]+)\s*\]", data)
    assert 4 <= len([s for s in page_ids("pack") if s != "caution"]) <= n <= 4
    # A4 is 210 × 297 mm = 595.28 × 841.89 pt (ISO 216; 1 pt = 1/72 in)
    assert boxes and all(abs(float(w) - 595.28) < 1 and abs(float(h) - 841.89) < 1 for w, h in boxes)


def test_both_pages_hold_their_sections_and_tables(rendered):
    """The browser's DOM holds each page's sections once, every table written for it, and embedded PNGs only."""
    out, paths, _, probes = rendered
    written = {Path(k).stem for k in paths if k.startswith("tables/")}
    ids = set()
    for name, page in (("report.html", "pack"), ("appendix.html", "appendix")):
        _, dom = probes[name]
        p = _Dom()
        p.feed(dom)
        assert [a.get("id") for t, a in p.tags if t == "section"] == list(page_ids(page))
        ids |= {a.get("id") for t, a in p.tags if t == "table" and a.get("id")}
        assert all(a["src"].startswith("data:image/png;base64,") for t, a in p.tags if t == "img")
    assert written and written <= ids


def test_markup_in_a_model_name_stays_text_in_the_dom(rendered):
    """A model named with markup characters is text in the browser's DOM: escaped, and no element injected."""
    _, _, _, probes = rendered
    for name in ("report.html", "appendix.html"):
        _, dom = probes[name]
        p = _Dom()
        p.feed(dom)
        assert not any(t == "b" for t, _ in p.tags)
        assert MARKUP in "".join(p.text)
