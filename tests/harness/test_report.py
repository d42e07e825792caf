"""Tests of the review report (harness.report): files, sections, tables, escaping, verdicts, changes."""

from __future__ import annotations

import base64
import dataclasses
import html
import io
import re
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from harness.report import SECTION_IDS, build_report, changes, headline
from harness.report.colours import PALETTE, RATIO_STEPS, ratio_level, stars
from harness.report.escape import escape_latex, escape_markdown
from harness.report.headline import format_horizons
from tests.harness.report_fixtures import make_bundle, make_store

MARKUP = '<b>x</b>&"$1'


# --------------------------------------------------------------------------- helpers
class _Page(HTMLParser):
    """Collects tags, attributes, section ids, text, and table cells of an HTML page."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict]] = []
        self.sections: list[str] = []
        self.text: list[str] = []
        self.tables: list[str] = []
        self._h2_in: dict[str, bool] = {}
        self._section: str | None = None
        self.cells: list[dict] = []  # grid cells: {"table", "best", "strong", "title", "text"}
        self._table: str | None = None
        self._cell: dict | None = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append((tag, a))
        if tag == "section":
            self._section = a.get("id")
            self.sections.append(a.get("id"))
        elif tag == "h2" and self._section:
            self._h2_in[self._section] = True
        elif tag == "table" and a.get("id"):
            self.tables.append(a["id"])
            self._table = a["id"] if "grid" in a.get("class", "") else None
        elif tag == "td" and self._table:
            self._cell = {"table": self._table, "best": "best" in (a.get("class") or ""), "strong": False,
                          "title": a.get("title", ""), "text": ""}
        elif tag == "strong" and self._cell is not None:
            self._cell["strong"] = True

    def handle_endtag(self, tag):
        if tag == "td" and self._cell is not None:
            self.cells.append(self._cell)
            self._cell = None
        elif tag == "table":
            self._table = None

    def handle_data(self, data):
        self.text.append(data)
        if self._cell is not None:
            self._cell["text"] += data


def _parse(text: str) -> _Page:
    p = _Page()
    p.feed(text)
    return p


_NUM = re.compile(r"-?\d+\.\d+")


def _md_rows(path) -> tuple[list[str], list[list[str]]]:
    """Header and body cells of a Markdown table (escaped pipes are not separators)."""
    lines = [ln for ln in path.read_text(encoding="utf-8").splitlines() if ln.startswith("|")]
    split = [[c.strip() for c in re.split(r"(?<!\\)\|", ln)[1:-1]] for ln in lines]
    return split[0], split[2:]


def _tex_rows(path) -> list[list[str]]:
    """Body rows of a LaTeX tabular (between the header's midrule and the bottomrule)."""
    lines = path.read_text(encoding="utf-8").splitlines()
    start = lines.index("\\midrule") + 1
    end = lines.index("\\bottomrule")
    rows = [ln for ln in lines[start:end] if not ln.startswith("\\multicolumn") and ln != "\\midrule"]
    return [[c.strip() for c in re.split(r"(?<!\\)&", r.removesuffix("\\\\").strip())] for r in rows]


# --------------------------------------------------------------------------- fixtures
@pytest.fixture(scope="module")
def bundle():
    return make_bundle()


@pytest.fixture(scope="module")
def report(bundle, tmp_path_factory):
    out = tmp_path_factory.mktemp("report")
    paths = build_report(bundle.evaluation, out, sensitivity=bundle.sensitivity, ledger=bundle.ledger,
                         fan_truths=bundle.fan_truths, since=bundle.earlier)
    return out, paths


@pytest.fixture(scope="module")
def page(report):
    out, _ = report
    return (out / "report.html").read_text(encoding="utf-8")


# --------------------------------------------------------------------------- files and structure
def test_returned_paths_exist_and_cover_every_table_format(report):
    """Every returned path exists; each table has .md, .tex and .csv, each figure is a PNG file."""
    out, paths = report
    assert paths["report.html"] == out / "report.html"
    assert all(p.is_file() for p in paths.values())
    stems = {p.stem for k, p in paths.items() if k.startswith("tables/")}
    for s in stems:
        for ext in ("md", "tex", "csv"):
            assert (out / "tables" / f"{s}.{ext}").is_file(), (s, ext)
    figs = [p for k, p in paths.items() if k.startswith("figures/")]
    assert len(figs) >= 6  # over-time, PIT and fan chart for each of the two variables
    for f in figs:
        assert f.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948, sect. 5.2)


def test_sections_in_order_each_with_a_heading(page):
    """The page has exactly the documented sections, in order, each with an h2 heading."""
    p = _parse(page)
    assert p.sections == list(SECTION_IDS)
    assert all(p._h2_in.get(s) for s in SECTION_IDS)


def test_without_since_sensitivity_or_ledger(bundle, tmp_path):
    """Without ``since`` there is no changes section; missing inputs are stated, not silently dropped."""
    build_report(bundle.evaluation, tmp_path)
    text = (tmp_path / "report.html").read_text(encoding="utf-8")
    p = _parse(text)
    assert p.sections == [s for s in SECTION_IDS if s != "changes"]
    assert "Revision sensitivity was not run" in text
    assert "it was not given" in text


def test_empty_comparison_tables_are_reported_not_fatal(bundle, tmp_path):
    """With no tests, MCS, calibration or fluctuation rows (too few forecasts) the report still builds and says so."""
    ev = dataclasses.replace(bundle.evaluation, tests=pd.DataFrame(), mcs=pd.DataFrame(),
                             calibration=pd.DataFrame(), fluctuation=pd.DataFrame())
    paths = build_report(ev, tmp_path)
    text = paths["report.html"].read_text(encoding="utf-8")
    assert "No fluctuation test in this evaluation" in text
    assert "No calibration tests in this evaluation" in text
    assert 'class="sig"' not in text  # no stars without tests


def test_page_is_self_contained(page):
    """No src/href points outside the file; images are base64 PNG data URIs; no script, no link tags."""
    p = _parse(page)
    imgs = 0
    for tag, attrs in p.tags:
        assert tag not in ("script", "link", "iframe", "object", "embed")
        for k in ("src", "href"):
            v = (attrs.get(k) or "").strip()
            if not v:
                continue
            assert not re.match(r"(?i)^(https?:)?//", v), v
            if k == "href":
                assert v.startswith("#"), v  # only in-page links (table of contents)
        if tag == "img":
            imgs += 1
            src = attrs["src"]
            assert src.startswith("data:image/png;base64,")
            raw = base64.b64decode(src.split(",", 1)[1], validate=True)
            import matplotlib.image as mpimg

            arr = mpimg.imread(io.BytesIO(raw), format="png")
            assert arr.ndim == 3 and arr.shape[0] > 100 and arr.shape[1] > 100
    assert imgs >= 6
    assert not re.search(r"(?i)https?://", page)
    assert "@import" not in page and "url(" not in page


def test_print_css_breaks_pages_before_sections(page):
    """The print style starts each section on a new page and keeps colours when printing."""
    m = re.search(r"@media print\s*\{(.*?)\n\}", page, flags=re.S)
    assert m
    assert re.search(r"section\s*\{[^}]*break-before:\s*page", m.group(1))
    assert "print-color-adjust: exact" in page


# --------------------------------------------------------------------------- table contents
def _relative_csvs(out):
    return sorted((out / "tables").glob("relative_*.csv"))


def test_csv_ratios_equal_the_evaluation_and_rmse_is_root_of_mse(report, bundle):
    """CSV values equal ``relative`` for CRPS; RMSE ratio = sqrt(mean SE / benchmark mean SE) from the forecasts."""
    out, _ = report
    ev = bundle.evaluation
    f = ev.forecasts.explode("subperiods")
    # RMSE = sqrt(mean squared error) (common practice); computed here from the raw forecasts.
    mse = f.groupby(["model", "variable", "horizon", "subperiods"])["se_mean"].mean()
    rel = ev.relative.set_index(["model", "variable", "horizon", "subperiod"])
    checked = 0
    for path in _relative_csvs(out):
        t = pd.read_csv(path)
        for r in t.itertuples(index=False):
            key = (r.model, r.variable, int(r.horizon), r.subperiod)
            if r.score == "crps":
                np.testing.assert_allclose(r.value, rel.loc[key, "crps"], rtol=1e-12)
                assert r.n == rel.loc[key, "n"]
            else:
                assert r.score == "se_mean"
                want = np.sqrt(mse[key] / mse[(ev.benchmark, r.variable, int(r.horizon), r.subperiod)])
                np.testing.assert_allclose(r.value, want, rtol=1e-10)
            checked += 1
    n_cells = len(ev.relative) * 2
    assert checked == n_cells


def test_markdown_and_latex_numbers_equal_the_csv(report):
    """Parsing the Markdown and LaTeX tables back gives the CSV's values (to the 3 decimals shown) and n."""
    out, _ = report
    for csv in _relative_csvs(out) + sorted((out / "tables").glob("tails_*.csv")):
        t = pd.read_csv(csv)
        cols = list(dict.fromkeys(zip(t["score"], t["subperiod"], strict=True)))
        want = t.set_index(["horizon", "model", "score", "subperiod"])
        head, body = _md_rows(csv.with_suffix(".md"))
        assert head[:3] == ["variable", "horizon", "model"]
        assert len(body) == t.groupby(["horizon", "model"]).ngroups
        tex = _tex_rows(csv.with_suffix(".tex"))
        assert len(tex) == len(body)
        for md_row, tex_row in zip(body, tex, strict=True):
            h, m = int(md_row[1]), html.unescape(md_row[2].replace("\\", ""))
            assert tex_row[0].replace("\\", "") == m.replace("\\", "")
            for j, col in enumerate(cols):
                v = want.loc[(h, m, *col)]
                for cell in (md_row[3 + j], tex_row[1 + j]):
                    if not np.isfinite(v["value"]):
                        assert cell in ("\u2014", "--")
                        continue
                    assert abs(float(_NUM.search(cell).group()) - v["value"]) <= 5e-4 + 1e-12
                    assert re.search(rf"\((?:n=)?{int(v['n'])}\)", cell), cell


def test_bold_cell_is_the_column_minimum(report):
    """In every file format the bold cells of a column (per horizon) are exactly its minimum."""
    out, _ = report
    for csv in _relative_csvs(out):
        t = pd.read_csv(csv)
        for _, g in t.groupby(["horizon", "score", "subperiod"]):
            shown = g["value"].round(3)
            assert (g["best"] == (shown == shown.min())).all()
        head, body = _md_rows(csv.with_suffix(".md"))
        ncol = len(head) - 3
        for h in {r[1] for r in body}:
            rows = [r for r in body if r[1] == h]
            for j in range(ncol):
                cells = [r[3 + j] for r in rows]
                vals = np.array([float(_NUM.search(c).group()) for c in cells])
                bold = np.array([c.startswith("**") for c in cells])
                assert (bold == (vals == vals.min())).all(), (csv.name, h, j, cells)
        tex = _tex_rows(csv.with_suffix(".tex"))
        k = 0
        for h in dict.fromkeys(r[1] for r in body):
            n = sum(r[1] == h for r in body)
            rows = tex[k:k + n]
            k += n
            for j in range(ncol):
                cells = [r[1 + j] for r in rows]
                vals = np.array([float(_NUM.search(c).group()) for c in cells])
                bold = np.array([c.startswith("\\textbf{") for c in cells])
                assert (bold == (vals == vals.min())).all()


def test_html_bold_matches_best_flags_and_min(page):
    """In the HTML, every grid cell marked best is bold, and the bold cells carry the minimum shown."""
    p = _parse(page)
    cells = [c for c in p.cells if c["table"].startswith("relative_")]
    assert cells
    for c in cells:
        assert c["best"] == c["strong"]
        assert re.search(r"n=\d+", c["text"])  # forecasts per cell, visible for print
        assert re.search(r"n = \d+ forecasts", c["title"])  # and in the tooltip


def test_stars_follow_the_test_pvalues(report, bundle):
    """Stars in the CSV and Markdown follow the DM/HLN p-values: * < 0.10, ** < 0.05, *** < 0.01 (common practice)."""
    out, _ = report
    tests = bundle.evaluation.tests.set_index(["model", "variable", "horizon", "subperiod", "score"])
    seen = set()
    for csv in _relative_csvs(out):
        t = pd.read_csv(csv, keep_default_na=False, na_values=[""])
        for r in t.itertuples(index=False):
            if r.model == bundle.evaluation.benchmark:
                assert r.stars == "" or pd.isna(r.stars)
                continue
            p = tests.loc[(r.model, r.variable, int(r.horizon), r.subperiod, r.score), "pvalue"]
            want = "***" if p < 0.01 else "**" if p < 0.05 else "*" if p < 0.10 else ""
            got = "" if pd.isna(r.stars) else r.stars
            assert got == want
            # the printed mark carries the direction: ↓ lower loss than the benchmark, ↑ higher
            mark = "" if pd.isna(r.mark) else r.mark
            assert mark == ((("\u2193" if r.value < 1 else "\u2191") + want) if want else "")
            seen.add(want)
    assert {"*", "**", "***", ""} <= seen  # the fixture exercises every level


# --------------------------------------------------------------------------- colour scale
def _wcag_luminance(hex_colour: str) -> float:
    """Relative luminance, WCAG 2.0 (W3C 2008), definition 'relative luminance'."""
    rgb = np.array([int(hex_colour[i:i + 2], 16) for i in (1, 3, 5)]) / 255
    lin = np.where(rgb <= 0.03928, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)
    return float(0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2])


def test_colour_scale_reads_in_grey_and_keeps_text_contrast():
    """Equal ratios either side of 1 get equal luminance, darker with distance; black text keeps WCAG AA contrast."""
    lum = {k: _wcag_luminance(c) for k, c in PALETTE.items()}
    for k in range(1, 5):
        assert abs(lum[k] - lum[-k]) < 0.01  # same grey when printed in black and white
        assert lum[k] < lum[k - 1] - 0.03 and lum[-k] < lum[-(k - 1)] - 0.03
        # WCAG 2.0 success criterion 1.4.3: contrast (L1 + 0.05) / (L2 + 0.05) >= 4.5 for body text.
        assert (lum[k] + 0.05) / 0.05 >= 4.5
        r, g, b = (int(PALETTE[-k][i:i + 2], 16) for i in (1, 3, 5))
        assert b > r  # better = blue
        r, g, b = (int(PALETTE[k][i:i + 2], 16) for i in (1, 3, 5))
        assert r > b  # worse = orange


@settings(max_examples=200, deadline=None)
@given(st.floats(min_value=-4.0, max_value=4.0, allow_nan=False))
def test_ratio_level_is_antisymmetric(log_r):
    """A ratio r and its reciprocal 1/r get opposite colour levels (same lightness, other hue)."""
    edges = np.log(np.asarray(RATIO_STEPS))
    if np.min(np.abs(np.abs(log_r) - edges)) < 1e-9:
        return  # exactly on a bin edge: rounding may put either side
    r = float(np.exp(log_r))
    assert int(ratio_level(r)) == -int(ratio_level(1 / r))
    assert (int(ratio_level(r)) < 0) == (r < 1 / RATIO_STEPS[0])


# --------------------------------------------------------------------------- escaping
def test_markup_in_names_is_shown_as_text(tmp_path):
    """A model and a variable named with markup characters appear as text in HTML, Markdown and LaTeX."""
    b = make_bundle(models=("rw", MARKUP, "bvar"), variables=("gdp", "<i>v</i>"), horizons=range(0, 2),
                    n_origins=24, n_draws=100)
    paths = build_report(b.evaluation, tmp_path, ledger=b.ledger, fan_truths=b.fan_truths)
    text = paths["report.html"].read_text(encoding="utf-8")
    p = _parse(text)
    assert not any(tag in ("b", "i") for tag, _ in p.tags)  # no injected element
    alltext = "".join(p.text)
    assert MARKUP in alltext and "<i>v</i>" in alltext
    assert html.escape(MARKUP) in text
    md = "".join(f.read_text(encoding="utf-8") for f in (tmp_path / "tables").glob("*.md"))
    assert "<b>" not in md and "&lt;b&gt;x&lt;/b&gt;&amp;" in md
    tex = "".join(f.read_text(encoding="utf-8") for f in (tmp_path / "tables").glob("*.tex"))
    assert "\\textless{}b\\textgreater{}x\\textless{}/b\\textgreater{}\\&\\textquotedbl{}\\$1" in tex


def test_escape_latex_covers_the_special_characters():
    """Each of LaTeX's ten special characters (Lamport 1994, sect. 2.2.1) is escaped so it prints literally."""
    specials = "#$%&~_^\\{}"
    got = escape_latex(specials)
    assert got == ("\\#\\$\\%\\&\\textasciitilde{}\\_\\textasciicircum{}\\textbackslash{}\\{\\}")
    # Escaping is one pass: the output's own braces and backslashes are not escaped again.
    assert escape_latex("a_b") == "a\\_b"


def test_escape_markdown_neutralises_emphasis_pipes_and_html():
    """Markdown punctuation is backslash-escaped and HTML's < and & become entities (CommonMark 0.31, sect. 2.4)."""
    assert escape_markdown("a*b_c|d") == "a\\*b\\_c\\|d"
    assert escape_markdown("<b>&") == "&lt;b&gt;&amp;"


# --------------------------------------------------------------------------- plain-words verdicts
def test_headline_counts_follow_the_forecasts(bundle):
    """The leader, its horizon count and its significant wins match counts derived from the raw forecasts."""
    ev = bundle.evaluation
    f = ev.forecasts[np.isfinite(ev.forecasts["crps"])]
    for v in ("gdp", "cpi"):
        mean = f[f["variable"] == v].groupby(["horizon", "model"])["crps"].mean().unstack()
        best = mean.idxmin(axis=1)
        counts = best.value_counts()
        tied = list(counts[counts == counts.max()].index)
        # Documented tie-break: the lower mean (over horizons) of the CRPS ratio to the benchmark.
        ratio = mean.div(mean[ev.benchmark], axis=0).mean()
        leader = min(tied, key=lambda m: (ratio[m], m))
        text = headline(ev, v)
        assert text.startswith(f"{v}: {leader} has the lowest CRPS at {counts.max()} of {len(best)} horizons")
        t = ev.tests
        sig = t[(t["variable"] == v) & (t["model"] == leader) & (t["score"] == "crps") & (t["subperiod"] == "full")
                & (t["pvalue"] < 0.10) & (t["mean_diff"] < 0)]
        tail = f"{len(sig)} horizon" if len(sig) else "no horizon"
        assert f"significantly better than {ev.benchmark} (HLN-DM, 10%) at {tail}" in text


def test_headline_when_the_benchmark_wins(bundle):
    """If the benchmark has the lowest CRPS everywhere and no test rejects, the verdict says so."""
    ev = bundle.evaluation
    table = ev.table.copy()
    table.loc[table["model"] == ev.benchmark, "crps"] = 1e-6
    tests = ev.tests.assign(pvalue=0.5)
    ev2 = dataclasses.replace(ev, table=table, tests=tests, mcs=ev.mcs.iloc[0:0])
    text = headline(ev2, "gdp")
    n_h = ev.table["horizon"].nunique()
    assert text.startswith(f"gdp: {ev.benchmark} has the lowest CRPS at {n_h} of {n_h} horizons")
    assert f"no model beats {ev.benchmark} significantly" in text
    assert "it stays best in recessions at h = -1 to 4 (recession sample: " in text


def test_headline_does_not_count_tied_horizons(bundle):
    """Where every model has the same score (a target already published), no model is credited with that horizon."""
    ev = bundle.evaluation
    table = ev.table.copy()
    tie = (table["variable"] == "gdp") & (table["horizon"] == -1)
    table.loc[tie, "crps"] = 1e-8
    text = headline(dataclasses.replace(ev, table=table), "gdp")
    n_h = ev.table["horizon"].nunique()
    assert f" of {n_h - 1} horizons" in text and "; all models tie at h = -1)" in text


def test_format_horizons_compresses_runs():
    """Consecutive horizons are written as ranges."""
    assert format_horizons([3, -1, 0, 1, 5, 6]) == "-1 to 1, 3, 5, 6"
    assert format_horizons([]) == "none"
    assert format_horizons([2]) == "2"


def test_stars_thresholds():
    """The star function uses strict thresholds at 1%, 5% and 10% (common practice)."""
    assert [stars(p) for p in (0.0099, 0.01, 0.049, 0.05, 0.099, 0.10, np.nan)] == \
        ["***", "**", "**", "*", "*", "", ""]


# --------------------------------------------------------------------------- what changed
def test_changes_against_a_real_store(bundle, tmp_path):
    """New origins and the store batches added since the earlier run are listed with their sources and dates."""
    store = make_store(tmp_path / "store", n_batches=4)
    ch = changes(bundle.evaluation, bundle.earlier, store=store)
    assert set(ch) == {"new_origins", "new_releases", "moved_scores", "ranking_changes"}
    cur = pd.DatetimeIndex(pd.unique(bundle.evaluation.forecasts["origin"]))
    old = pd.DatetimeIndex(pd.unique(bundle.earlier.forecasts["origin"]))
    assert list(ch["new_origins"]["origin"]) == sorted(set(cur) - set(old))
    rel = ch["new_releases"]
    assert list(rel["seq"]) == [3, 4]  # earlier run saw 2 batches, current run 4
    assert list(rel["source"]) == ["veldmark_gdp_batch3.csv", "veldmark_gdp_batch4.csv"]
    log = store.read_log()
    for r in rel.itertuples(index=False):
        dates = log.loc[log["batch"] == r.seq, "release"]
        assert r.first_release == dates.min() and r.last_release == dates.max()


def test_changes_moved_scores_and_rankings_are_exact(bundle):
    """Every CRPS ratio moving by more than the threshold is listed, none other; rankings that differ are listed."""
    cur, old = bundle.evaluation, bundle.earlier
    ch = changes(cur, old, threshold=0.03)
    key = ["model", "variable", "horizon"]
    a = old.relative[old.relative["subperiod"] == "full"].set_index(key)["crps"]
    b = cur.relative[cur.relative["subperiod"] == "full"].set_index(key)["crps"]
    diff = (b - a).dropna()
    want = set(diff[diff.abs() > 0.03].index)
    got = {(r.model, r.variable, r.horizon) for r in ch["moved_scores"].itertuples()}
    assert got == want and len(want) > 0
    for r in ch["ranking_changes"].itertuples():
        for ev, col in ((old, r.ranking_earlier), (cur, r.ranking_current)):
            t = ev.table[(ev.table["subperiod"] == "full") & (ev.table["variable"] == r.variable)
                         & (ev.table["horizon"] == r.horizon)]
            assert col == " < ".join(t.sort_values("crps")["model"])
        assert r.ranking_earlier != r.ranking_current


def test_changes_rejects_bad_arguments(bundle):
    """A negative threshold or an unknown score is refused with the valid options listed, sorted."""
    with pytest.raises(ValueError, match="threshold must be >= 0"):
        changes(bundle.evaluation, bundle.earlier, threshold=-1)
    with pytest.raises(ValueError, match=r"score 'nope'.*expected one of \['ae_mean', 'ae_median', 'crps'"):
        changes(bundle.evaluation, bundle.earlier, score="nope")


def test_failures_and_missing_truths_are_listed(page, bundle):
    """The failed task shows its escaped error with the traceback in a details element; missing truths are listed."""
    sec = re.search(r'<section id="failures">(.*?)</section>', page, flags=re.S).group(1)
    fail = bundle.evaluation.manifest.failures[0]
    assert html.escape(fail["error"]) in sec
    assert "<details>" in sec and html.escape(fail["traceback"].splitlines()[-1]) in sec
    for _var, g in bundle.evaluation.missing.groupby("variable"):
        assert ", ".join(g["target_period"]) in sec
