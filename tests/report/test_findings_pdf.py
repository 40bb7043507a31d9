"""Findings, directional pairwise matrices, the page at 1,366 px and the PDF.

Checks against sources outside the report code: the compare stage's CSVs (which rows are
supported), compare/draws.nc (the pairwise statistics cell by cell), the browser's own layout
(headless Chromium measures every element) and the PDF's extracted text (poppler's pdftotext)
against the rows of the page's HTML tables (parsed with the standard library's HTMLParser).
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from PIL import Image

from report_study import make_study

pytestmark = pytest.mark.slow

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
PDFTOTEXT, PDFTOPPM = shutil.which("pdftotext"), shutil.which("pdftoppm")
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync"]
WIDTH = 1366
# The pair whose pairwise statistics the invented refitting null makes stand out.
APART = ("north", "east")


def _make_refit_study(root):
    """The three-population study with the calibrated columns of a refitting null added.

    The replicate estimates are built so that only the pairwise statistics of APART lie outside
    what the replicates give (each test's direction from ped2g.compare.calibrated.TESTS);
    every other row's replicates equal its observed value. The calibrated columns themselves
    are computed by the compare stage's own function.
    """
    from ped2g.compare.calibrated import READING_RULE, TESTS, calibrated_columns

    paths = make_study(root)
    folder = paths["results"] / "compare"
    methods = [p.stem for p in sorted(folder.glob("*.csv"))
               if p.name not in ("references.csv", "loadings.csv", "draw_checks.csv")]
    frames = {m: pd.read_csv(folder / f"{m}.csv") for m in methods}
    stacked = pd.concat([frames[m] for m in methods], ignore_index=True)
    R = 99
    reps = np.tile(stacked["mean"].to_numpy(dtype=float), (R, 1))
    pair = stacked["population"].isin(APART) & stacked["population2"].isin(APART)
    for i in np.flatnonzero(pair.to_numpy()):
        kind = TESTS.get((stacked.at[i, "method"], stacked.at[i, "statistic"]))
        mean = float(stacked.at[i, "mean"])
        if kind == "greater":
            reps[:, i] = mean * 0.5 - 1.0
        elif kind == "less":
            reps[:, i] = mean + 1.0
        elif kind == "log-ratio":
            reps[:, i] = 1.0
    out = calibrated_columns(stacked, reps, 0.05, 0.95)
    for m in methods:
        out[out["method"] == m].to_csv(folder / f"{m}.csv", index=False)
    summary = json.loads((folder / "summary.json").read_text())
    summary["refit_null"] = {"replicates": R, "chains": 1, "warmup": 50, "draws": 50, "refits": 3 * R,
                             "reading_rule": READING_RULE.format(alpha=0.05),
                             "mcse_over_null_sd_median": 0.1}
    summary["alpha"] = 0.05
    (folder / "summary.json").write_text(json.dumps(summary))
    return paths, out


@pytest.fixture(scope="module")
def refit_report(tmp_path_factory):
    from ped2g.config import load_config
    from ped2g.report.assemble import build_report

    paths, table = _make_refit_study(tmp_path_factory.mktemp("refit_study"))
    config = load_config(paths["config"])
    result = build_report(config, paths["results"], paths["out"], config_path=paths["config"])
    return paths, result, table


def _page_text(path) -> str:
    return " ".join(re.sub(r"<[^>]+>", " ", path.read_text(encoding="utf-8")).split())


# ---------------------------------------------------------------------------------------------
# Findings
# ---------------------------------------------------------------------------------------------
def test_combination_in_words():
    from ped2g.report.words import combination_in_words

    traits = ["snout_vent", "head_width", "hind_limb", "body_mass"]
    assert combination_in_words([0.05, 0.7, 0.1, -0.7], traits) == "mostly head_width against body_mass"
    assert combination_in_words([0.05, -0.7, -0.1, 0.7], traits) == "mostly head_width against body_mass"
    assert combination_in_words([0.95, 0.1, 0.1, 0.1], traits) == "almost only snout_vent"
    assert combination_in_words([0.6, 0.1, 0.6, 0.0], traits) == "mostly snout_vent and hind_limb together"
    assert combination_in_words([0.5, 0.5, 0.5, 0.5], traits) == "all traits together"


def test_findings_name_the_populations_the_csvs_say_differ(refit_report):
    paths, result, table = refit_report
    tested = table[table["p_adjusted"].notna()]
    yes = tested[tested["supported"].astype(bool)]
    assert len(yes) >= 1, "the invented null should make some differences supported"
    differ = set(yes["population"].dropna()) | set(yes["population2"].dropna())
    assert differ == set(APART)
    page = _page_text(paths["out"] / "report.html")
    m = re.search(r"(\d+) of (\d+) tested statistics differ by more than estimation noise", page)
    assert m and (int(m.group(1)), int(m.group(2))) == (len(yes), len(tested))
    named = re.search(r"Populations that differ: ([^.(]+)", page).group(1)
    assert {p.strip() for p in named.split(",")} == differ
    # the pair that does not differ is named among the unsupported
    assert "separates north and south; south and east" in page
    from ped2g.compare.calibrated import READING_RULE

    assert READING_RULE.format(alpha=0.05).replace("'", "&#39;") in page or \
        READING_RULE.format(alpha=0.05) in page
    # findings come first on the page
    assert page.index("1. Findings at a glance") < page.index("2. What was run")
    findings = pd.read_csv(paths["out"] / "tables" / "findings.csv")
    assert len(findings) == len(tested) and findings["supported"].head(len(yes)).all()


def test_report_tables_keep_the_compare_csv_column_names(refit_report):
    paths, _, _ = refit_report
    for method in ("skewers", "gmax", "distance"):
        written = pd.read_csv(paths["results"] / "compare" / f"{method}.csv")
        report = pd.read_csv(paths["out"] / "tables" / f"compare_{method}.csv")
        assert set(report.columns) <= set(written.columns)
        assert not report.isna().all().any(), "an entirely empty column"


# ---------------------------------------------------------------------------------------------
# The magnitude ratio both directions (compare/draws.nc)
# ---------------------------------------------------------------------------------------------
def test_pairwise_matrices_agree_with_draws_cell_by_cell(refit_report):
    from ped2g.report.difference_figures import pairwise_matrix, pairwise_matrix_figure

    paths, result, _ = refit_report
    with xr.open_dataset(paths["results"] / "compare" / "draws.nc", engine="h5netcdf") as ds:
        draws = ds.load()
    ratio = draws["skewers_magnitude_ratio"].transpose("draw", "population", "population2")
    table = pd.read_csv(paths["out"] / "tables" / "skewers_magnitude_ratio_matrix.csv").set_index("population")
    pops = list(table.index)
    figure_cells = {}
    fig = pairwise_matrix_figure({"skewers_magnitude_ratio": pairwise_matrix(draws, "skewers_magnitude_ratio",
                                                                            pops)})
    for text in fig.axes[0].texts:
        x, y = text.get_position()
        figure_cells[(pops[int(round(y))], pops[int(round(x))])] = float(text.get_text())
    checked = 0
    for a in pops:
        for b in pops:
            if a == b:
                continue
            expect = float(np.median(ratio.sel(population=a, population2=b).values))
            assert table.loc[a, b] == pytest.approx(expect, rel=1e-12)
            assert figure_cells[(a, b)] == pytest.approx(expect, rel=5e-3)  # printed to 3 figures
            checked += 1
            # the two directions differ (the ratio is not symmetric)
            assert not np.isclose(table.loc[a, b], table.loc[b, a])
    assert checked == len(pops) * (len(pops) - 1)


# ---------------------------------------------------------------------------------------------
# The page in headless Chromium at 1,366 px
# ---------------------------------------------------------------------------------------------
PROBE = """
<script>
window.addEventListener("load", function () {
  document.querySelectorAll("details").forEach(function (d) { d.open = true; });
  var width = document.documentElement.clientWidth, wide = [], clipped = [];
  document.querySelectorAll("body *").forEach(function (el) {
    var r = el.getBoundingClientRect();
    if (r.width > 0 && r.right > width + 1) { wide.push(el.tagName + "." + el.className); }
  });
  document.querySelectorAll(".table-wrap, pre").forEach(function (el) {
    if (el.scrollWidth > el.clientWidth + 1) { clipped.push(el.textContent.slice(0, 60)); }
  });
  var imgs = Array.prototype.slice.call(document.images);
  var ok = imgs.filter(function (im) { return im.complete && im.naturalWidth > 0; }).length;
  var out = document.createElement("pre");
  out.id = "probe";
  out.textContent = JSON.stringify({width: width, scroll: document.documentElement.scrollWidth,
                                    wide: wide.slice(0, 20), clipped: clipped.slice(0, 20),
                                    images: imgs.length, loaded: ok});
  document.body.appendChild(out);
});
</script>
"""


@pytest.mark.skipif(CHROMIUM is None, reason="chromium is not installed (CI installs Debian's chromium)")
def test_page_fits_1366_pixels_and_every_image_decodes(refit_report, tmp_path):
    paths, result, _ = refit_report
    page = (paths["out"] / "report.html").read_text(encoding="utf-8")
    probe = tmp_path / "probe.html"
    probe.write_text(page.replace("</body>", PROBE + "</body>"), encoding="utf-8")
    run = subprocess.run([CHROMIUM, *FLAGS, f"--user-data-dir={tmp_path / 'profile'}",
                          f"--window-size={WIDTH},900", "--dump-dom", "--virtual-time-budget=15000",
                          probe.resolve().as_uri()], capture_output=True, text=True, timeout=180)
    match = re.search(r'<pre id="probe">(.*?)</pre>', run.stdout, re.S)
    assert match, run.stderr[-800:]
    found = json.loads(match.group(1).replace("&quot;", '"').replace("&amp;", "&"))
    assert found["width"] <= WIDTH and found["width"] > 1200
    assert found["scroll"] <= found["width"], found
    assert found["wide"] == [], found["wide"]
    assert found["clipped"] == [], found["clipped"]
    assert found["images"] == len(result.figures) and found["loaded"] == found["images"]


# ---------------------------------------------------------------------------------------------
# The PDF
# ---------------------------------------------------------------------------------------------
class _Rows(HTMLParser):
    """The text of every table body row and every section title of the page."""

    def __init__(self):
        super().__init__()
        self.rows, self.titles, self._row, self._cell, self._in_h2 = [], [], None, None, False
        self._body = False

    def handle_starttag(self, tag, attrs):
        if tag == "tbody":
            self._body = True
        elif tag == "tr" and self._body:
            self._row = []
        elif tag in ("td", "th") and self._row is not None:
            self._cell = []
        elif tag == "h2":
            self._in_h2, self._title = True, []

    def handle_endtag(self, tag):
        if tag == "tbody":
            self._body = False
        elif tag in ("td", "th") and self._cell is not None and self._row is not None:
            self._row.append("".join(self._cell))
            self._cell = None
        elif tag == "tr" and self._row is not None:
            self.rows.append(self._row)
            self._row = None
        elif tag == "h2":
            self._in_h2 = False
            self.titles.append("".join(self._title))

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)
        if self._in_h2:
            self._title.append(data)


def _squash(text: str) -> str:
    return re.sub(r"\s+", "", text)


@pytest.mark.skipif(CHROMIUM is None or PDFTOTEXT is None or PDFTOPPM is None,
                    reason="needs chromium and poppler-utils (pdftotext, pdftoppm)")
def test_pdf_has_every_section_and_table_row(refit_report, tmp_path):
    paths, result, _ = refit_report
    pdf = paths["out"] / "report.pdf"
    assert result.pdf is not None and pdf.read_bytes()[:5] == b"%PDF-", result.pdf_note
    text = subprocess.run([PDFTOTEXT, "-raw", str(pdf), "-"], capture_output=True, text=True,
                          check=True).stdout
    flat = _squash(text)
    parsed = _Rows()
    parsed.feed((paths["out"] / "report.html").read_text(encoding="utf-8"))
    assert len(parsed.titles) == 9
    for title in parsed.titles:
        assert _squash(title) in flat, title
    assert len(parsed.rows) > 100
    missing = [row for row in parsed.rows if _squash("".join(row)) not in flat]
    assert missing == [], missing[:5]
    subprocess.run([PDFTOPPM, "-r", "30", "-png", str(pdf), str(tmp_path / "page")], check=True)
    pages = sorted(tmp_path.glob("page-*.png"))
    assert len(pages) >= 5
    for png in pages:
        with Image.open(png) as im:
            im.load()
            assert im.size[0] > im.size[1]  # A4 landscape


def test_no_pdf_without_chromium_and_the_html_still_written(tmp_path, monkeypatch):
    from ped2g.config import load_config
    from ped2g.report.assemble import build_report

    monkeypatch.setenv("PED2G_CHROMIUM", str(tmp_path / "no-such-browser"))
    paths = make_study(tmp_path / "study", compare=None)
    result = build_report(load_config(paths["config"]), paths["results"], paths["out"],
                          config_path=paths["config"])
    assert (paths["out"] / "report.html").is_file()
    assert result.pdf is None and not (paths["out"] / "report.pdf").exists()
    assert "no Chromium found" in result.pdf_note


def test_rows_below_alpha_only_before_holm_are_named_as_leads_not_findings():
    # Three pairwise distances (one family of 3): raw p 0.02 -> Holm 3 x 0.02 = 0.06 > 0.05
    # (Holm 1979's step-down, exact arithmetic), so the row is a lead, not a supported finding;
    # a row with p 0.01 -> Holm 0.03 is supported.
    from ped2g.report.findings import findings

    table = pd.DataFrame({
        "method": "distance", "statistic": "riemannian", "population": ["a", "a", "b"],
        "population2": ["b", "c", "c"], "axis": "", "axis2": "", "mean": [2.0, 1.0, 1.1],
        "test_value": [2.0, 1.0, 1.1], "null_refit_median": 1.0, "null_refit_lower": 0.5,
        "null_refit_upper": 1.8, "p_value": [0.02, 0.5, 0.6], "family_size": 3,
        "p_adjusted": [0.06, 1.0, 1.0], "supported": [False, False, False]})
    found = findings({"distance": table}, None, ["x", "y"], ["a", "b", "c"], alpha=0.05)
    assert found.supported == [] and found.differing == []
    assert len(found.leads) == 1 and "a and b" in found.leads[0] and "not supported" in found.leads[0]
    table.loc[0, ["p_value", "p_adjusted", "supported"]] = [0.01, 0.03, True]
    found = findings({"distance": table}, None, ["x", "y"], ["a", "b", "c"], alpha=0.05)
    assert len(found.supported) == 1 and found.leads == [] and found.differing == ["a", "b"]
