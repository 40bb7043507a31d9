"""The whole report: sections in order, embedded figures, files beside it, refusals."""

from __future__ import annotations

import base64
import io
import json
import re
from html.parser import HTMLParser

import pandas as pd
import pytest
from PIL import Image

from ped2g.cli import main
from ped2g.config import load_config
from ped2g.errors import UserError
from ped2g.report.assemble import SECTION_ORDER, build_report
from report_study import POPULATIONS, make_study

# Every test here builds a report on results of the real null and compare stages.
pytestmark = pytest.mark.slow

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), section 5.2


class _Page(HTMLParser):
    """Collects section ids in document order, <img> sources and highlighted cells."""

    def __init__(self) -> None:
        super().__init__()
        self.sections: list[str] = []
        self.images: list[str] = []
        self.miss_cells = 0
        self._in_section: str | None = None
        self.text_by_section: dict[str, list[str]] = {}

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "section":
            self.sections.append(a.get("id"))
            self._in_section = a.get("id")
        if tag == "img":
            self.images.append(a.get("src", ""))
        if tag == "td" and a.get("class") == "miss":
            self.miss_cells += 1

    def handle_data(self, data):
        if self._in_section:
            self.text_by_section.setdefault(self._in_section, []).append(data)

    def text(self, section: str) -> str:
        return " ".join(self.text_by_section.get(section, []))


def _parse(path) -> _Page:
    page = _Page()
    page.feed(path.read_text(encoding="utf-8"))
    return page


def test_sections_are_all_there_in_the_required_order(built_report):
    paths, _ = built_report
    page = _parse(paths["out"] / "report.html")
    assert page.sections == [sid for sid, _ in SECTION_ORDER]
    assert [sid for sid, _ in SECTION_ORDER] == ["findings", "run", "data", "diagnostics", "estimates",
                                                  "comparisons", "methods", "provenance", "cautions"]


def test_every_image_is_an_embedded_png_and_matches_the_files(built_report):
    paths, result = built_report
    page = _parse(paths["out"] / "report.html")
    assert len(page.images) == len(result.figures) >= 8
    for src in page.images:
        assert src.startswith("data:image/png;base64,")
        raw = base64.b64decode(src.split(",", 1)[1], validate=True)
        assert raw[:8] == PNG_SIGNATURE
        with Image.open(io.BytesIO(raw)) as im:
            im.verify()
    for name in result.figures:
        png = paths["out"] / "figures" / f"{name}.png"
        pdf = paths["out"] / "figures" / f"{name}.pdf"
        assert png.read_bytes()[:8] == PNG_SIGNATURE
        assert pdf.read_bytes()[:5] == b"%PDF-"  # PDF 1.7 (ISO 32000-1), section 7.5.2
        assert base64.b64encode(png.read_bytes()).decode() in "".join(page.images)


def test_tables_are_written_as_csv(built_report):
    paths, result = built_report
    folder = paths["out"] / "tables"
    for name in ("run_settings", "pedigree_by_population", "phenotype_counts", "pedigree_changes",
                 "diagnostics_summary", "diagnostics_parameters", "estimates", "checksums_inputs",
                 "checksums_results", "package_versions", "compare_skewers", "compare_distance"):
        assert name in result.tables
        frame = pd.read_csv(folder / f"{name}.csv")
        assert len(frame) > 0
    est = pd.read_csv(folder / "estimates.csv")
    assert set(est["population"]) == set(POPULATIONS)
    assert (est["hpd_lower"] <= est["median"]).all() and (est["median"] <= est["hpd_upper"]).all()


def test_diagnostics_highlight_the_stuck_chain_fit(built_report):
    # The study's 'south' fit has one chain scaled by 1.6 and 3 divergences: it must be flagged,
    # and the other two (i.i.d. draws) must pass.
    paths, result = built_report
    assert result.failed_fits == ["south"]
    summary = pd.read_csv(paths["out"] / "tables" / "diagnostics_summary.csv").set_index("population")
    assert summary.loc["south", "max_r_hat"] > 1.05 and summary.loc["south", "divergences"] == 3
    page = _parse(paths["out"] / "report.html")
    assert page.miss_cells >= 4
    assert "south" in page.text("cautions")
    # only G, R and h2 are checked, as the fit stage checks them (parameters.csv has more rows)
    detail = pd.read_csv(paths["out"] / "tables" / "diagnostics_parameters.csv")
    assert set(detail["parameter"].str.split("[").str[0]) == {"G", "R", "h2"}


def test_stage_notes_and_assumptions_are_carried_over(built_report):
    paths, _ = built_report
    page = _parse(paths["out"] / "report.html")
    assert "were added as founders" in page.text("data")
    cautions = page.text("cautions")
    assert "fit: Additive genetic effects only (invented assumption text)." in cautions
    assert cautions.count("invented assumption text") == 1  # three fits, stated once
    assert "compare: " in cautions and "null: " in cautions


def test_units_and_trait_names_reach_the_report(built_report):
    paths, _ = built_report
    html = (paths["out"] / "report.html").read_text(encoding="utf-8")
    assert "wing (mm)" in html and "mass (g)" in html


def test_methods_text_and_provenance(built_report):
    paths, _ = built_report
    from importlib.metadata import version

    methods = (paths["out"] / "methods.txt").read_text(encoding="utf-8")
    assert f"NumPy {version('numpy')}" in methods
    assert "Krzanowski WJ (1979)" in methods and "randomisation null" in methods
    prov = json.loads((paths["out"] / "provenance.json").read_text())
    sums = {row["file"]: row["sha256"] for row in prov["inputs"]}
    import hashlib

    phen = paths["root"] / "data" / "phenotypes.csv"
    assert sums[str(phen)] == hashlib.sha256(phen.read_bytes()).hexdigest()  # hashlib as reference
    assert prov["seeds"][0] == {"stage": "config", "record": "sampling.seed", "value": 7}
    assert any(r["record"] == "run_seconds" for r in prov["run_times"])


def test_missing_null_and_comparisons_give_notes_not_errors(tmp_path):
    paths = make_study(tmp_path, compare=None)
    config = load_config(paths["config"])
    result = build_report(config, paths["results"], paths["out"], config_path=paths["config"])
    page = _parse(paths["out"] / "report.html")
    assert page.sections == [sid for sid, _ in SECTION_ORDER]
    text = page.text("comparisons")
    assert "No null was found" in text
    assert "No comparison tables were found" in text
    assert "no reference for how much difference sampling alone" in page.text("cautions")
    assert not any(name.startswith("compare_") for name in result.figures)


def test_sparse_comparison_tables_are_reported(tmp_path):
    # Comparison tables with only some cells of the contract's columns filled (no description,
    # no overlap values).
    paths = make_study(tmp_path, compare="synthetic")
    config = load_config(paths["config"])
    build_report(config, paths["results"], paths["out"], config_path=paths["config"])
    # the report's table keeps the comparison CSV's own column names (one set of names)
    skewers = pd.read_csv(paths["out"] / "tables" / "compare_skewers.csv")
    written = pd.read_csv(paths["results"] / "compare" / "skewers.csv")
    assert list(skewers.columns) == [c for c in written.columns if written[c].notna().any()]
    loading = pd.read_csv(paths["out"] / "tables" / "compare_tensor.csv")
    assert {"axis", "axis2"} <= set(loading.columns)  # as compare/tensor.csv names them


def test_missing_fit_is_one_clear_line_and_leaves_no_report(tmp_path, capsys):
    paths = make_study(tmp_path, compare=None)
    (paths["results"] / "fits" / "east" / "posterior.nc").unlink()
    status = main(["report", "--config", str(paths["config"]), "--results", str(paths["results"]),
                   "--out", str(paths["out"])])
    err = capsys.readouterr().err.strip().splitlines()
    assert status == 2
    assert len(err) == 1 and "'east'" in err[0] and "ped2g fit" in err[0]
    assert not (paths["out"] / "report.html").exists()
    assert not list(tmp_path.glob(".report.tmp-*"))


def test_broken_comparison_table_fails_before_anything_looks_finished(tmp_path):
    paths = make_study(tmp_path, compare="synthetic")
    pd.DataFrame({"method": ["gmax"], "statistic": ["angle"], "population": ["north"]}).to_csv(
        paths["results"] / "compare" / "gmax.csv", index=False)
    config = load_config(paths["config"])
    with pytest.raises(UserError, match=r"gmax\.csv has no estimate column"):
        build_report(config, paths["results"], paths["out"], config_path=paths["config"])
    assert not paths["out"].exists()


def test_results_folder_without_fits_is_refused(tmp_path):
    config = load_config(make_study(tmp_path / "s", compare=None)["config"])
    (tmp_path / "empty").mkdir()
    with pytest.raises(UserError, match="has no fits/ folder"):
        build_report(config, tmp_path / "empty", tmp_path / "out")


def test_every_figure_name_is_explained_in_the_snakemake_caption(built_report):
    # workflow/report/figures.rst names each figure file pattern in double back-quotes;
    # <x> stands for a name part and * for any ending.
    import re
    from pathlib import Path

    caption = (Path(__file__).resolve().parents[2] / "workflow" / "report" / "figures.rst").read_text()
    patterns = []
    for name in re.findall(r"``([^`]+)``", caption):
        regex = re.sub(r"<[^>]+>", "[a-z0-9_]+", re.escape(name)).replace(r"\*", ".*")
        patterns.append(re.compile(regex + r"\Z"))
    _, result = built_report
    for figure in result.figures:
        assert any(p.match(figure) for p in patterns), f"{figure} is not explained in figures.rst"


def test_a_single_population_without_comparisons(tmp_path):
    import shutil

    import yaml

    paths = make_study(tmp_path, compare=None, bad=None)
    for pop in ("south", "east"):
        shutil.rmtree(paths["results"] / "fits" / pop)
    shutil.rmtree(paths["results"] / "pedigree")  # optional: the Data section says it is missing
    raw = yaml.safe_load(paths["config"].read_text())
    raw["populations"] = ["north"]
    paths["config"].write_text(yaml.safe_dump(raw))
    result = build_report(load_config(paths["config"]), paths["results"], paths["out"],
                          config_path=paths["config"])
    page = _parse(paths["out"] / "report.html")
    assert page.sections == [sid for sid, _ in SECTION_ORDER]
    assert result.failed_fits == []
    assert "genetic_correlations" in result.figures and "rank_north" in result.figures
    assert "1 population (north)" in (paths["out"] / "report.html").read_text(encoding="utf-8")
    assert "No pedigree/changes.csv was found" in page.text("data")


class _Tables(HTMLParser):
    """Every <table> of the page: its section, header cells and rows of cells (text)."""

    def __init__(self) -> None:
        super().__init__()
        self.tables: list[dict] = []
        self._section = None
        self._cell: list[str] | None = None
        self._row: list[str] | None = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "section":
            self._section = a.get("id")
        elif tag == "table":
            self.tables.append({"section": self._section, "kv": a.get("class") == "kv", "head": [], "rows": []})
        elif tag == "tr" and self.tables:
            self._row = []
        elif tag in ("td", "th") and self._row is not None:
            self._cell = []

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None and self._row is not None:
            self._row.append("".join(self._cell).strip())
            self._cell = None
        elif tag == "tr" and self._row is not None:
            t = self.tables[-1]
            if not t["head"] and not t["kv"]:
                t["head"] = self._row
            else:
                t["rows"].append(self._row)
            self._row = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)


def _tables(path) -> list[dict]:
    parser = _Tables()
    parser.feed(path.read_text(encoding="utf-8"))
    return parser.tables


def test_settings_tables_are_plain_key_values(built_report):
    # Every key/value table (what was run, stage records, the config as used): no Python dict or
    # list syntax, and the config's keys as dotted paths with the values given in the config.
    paths, _ = built_report
    kv = [t for t in _tables(paths["out"] / "report.html") if t["kv"]]
    assert kv
    for t in kv:
        for key, value in t["rows"]:
            assert not set("{}[]") & set(key + value), (key, value)
            assert "'" not in value or t["section"] != "provenance", (key, value)
    config = dict(next(t for t in kv if t["section"] == "provenance"
                       and any(k == "sampling.chains" for k, _ in t["rows"]))["rows"])
    assert config["sampling.chains"] == "4"  # config.yaml of the study: sampling.chains 4
    assert config["compare.null_model.refit.chains"] == "1"  # the schema's default
    assert config["traits"] == "wing, mass, tarsus"
    assert config["compare.subspace_dims"].startswith("default (")


def test_generations_are_counted_one_way_on_the_page(built_report):
    # The study's pedigree stage recorded max_generation 3 (indices from 0) and each fit used
    # Mrode's Table 2.1 pedigree, 4 generations by hand (1,2 -> 3,4 -> 5 -> 6): both tables say 4.
    paths, _ = built_report
    found = _tables(paths["out"] / "report.html")
    per_population = next(t for t in found if "generations" in t["head"])
    col = per_population["head"].index("generations")
    assert {row[col] for row in per_population["rows"]} == {"4"}
    stage = dict(next(t for t in found if t["kv"] and t["section"] == "data")["rows"])
    assert [v for k, v in stage.items() if k.startswith("generations")] == ["4"]
    assert not any("generation" in k and "max" in k for k in stage)


def test_report_tables_have_no_exponents_and_no_empty_columns(built_report):
    paths, _ = built_report
    for t in _tables(paths["out"] / "report.html"):
        cells = [c for row in t["rows"] for c in row]
        assert not [c for c in cells if re.fullmatch(r"-?\d+(\.\d+)?e[-+]?\d+", c)], t["head"]
        if t["kv"] or not t["rows"]:
            continue
        for j, name in enumerate(t["head"]):
            if name:  # the row-label column of a matrix has no name
                assert any(len(r) > j and r[j] != "" for r in t["rows"]), f"empty column {name}"
