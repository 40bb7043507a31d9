"""Number formatting and HTML tables of the report."""

import math
import re

import matplotlib.colors
import numpy as np
import pandas as pd

from ped2g.report.html import fmt, interval_text, key_values, table


def test_fmt_rounds_to_significant_figures():
    # Expected strings follow from the definition of rounding to 3 significant figures.
    assert fmt(3.14159) == "3.14"
    assert fmt(0.0012345) == "0.00123"
    assert fmt(1234.4) == "1234"  # 4 integer digits are kept, never hidden behind an exponent
    assert fmt(9.9996) == "10.0"  # rounds up across a power of ten without a spurious digit
    assert fmt(-0.5) == "-0.500"
    assert fmt(1.0117, 4) == "1.012"


def test_fmt_uses_exponent_only_for_extreme_magnitudes():
    assert fmt(2.5e-7) == "2.50e-07"
    assert fmt(3.2e8) == "3.20e+08"


def test_fmt_special_values():
    assert fmt(None) == ""
    assert fmt(float("nan")) == ""
    assert fmt(math.inf) == "inf"
    assert fmt(0.0) == "0"
    assert fmt(7) == "7"
    assert fmt(np.int64(12)) == "12"
    assert fmt(True) == "yes"
    assert fmt("north") == "north"


def test_table_marks_exactly_the_missed_cells():
    frame = pd.DataFrame({"parameter": ["a", "b"], "r_hat": [1.0, 1.2]})
    misses = pd.DataFrame({"parameter": [False, False], "r_hat": [False, True]})
    out = str(table(frame, misses=misses))
    assert out.count('class="miss"') == 1
    assert '<td class="miss">1.20</td>' in out
    assert out.count('class="miss-row"') == 1


def test_table_escapes_text_and_limits_rows():
    frame = pd.DataFrame({"id": ["<script>", "x", "y"]})
    out = str(table(frame, max_rows=2))
    assert "<script>" not in out and "&lt;script&gt;" in out
    assert "1 more rows are in the CSV table" in out
    assert out.count("<tr>") == 3  # header + 2 rows


def test_key_values_shows_nested_values_in_words():
    out = str(key_values({"estimator": "mendelian", "sizes": [3, 4], "c": {"north": 0.5520833333},
                          "codes": ["0", "NA", ""], "warnings": [], "dims": None, "ok": True,
                          "tiny": 6.93e-07}))
    cells = re.findall(r"<td>(.*?)</td>", out)
    assert cells == ["mendelian", "3, 4", "north: 0.552", "0, NA, blank", "none", "none", "yes",
                     "0.000000693"]
    assert not re.search(r"[{}\[\]']", "".join(cells))  # no Python dict or list syntax


def test_table_never_prints_an_exponent_and_whole_numbers_stay_whole():
    # 6.93e-07 beside 0.5 in one column: the column keeps at most 4 decimals (3 significant figures
    # of its largest value plus one, html.column_decimals), so the tiny
    # value rounds to 0; component numbers stored as float (empty cells) print as 1, 2; text
    # cells, such as an id written with a leading zero, are kept exactly as written.
    frame = pd.DataFrame({"axis": [1.0, 2.0, np.nan], "value": [6.93e-07, 0.5, 0.25],
                          "mixed": ["0042", 6.93e-07, 2.5e8], "p": [1e-5, 2e-6, 3e-5]})
    out = str(table(frame))
    cells = re.findall(r"<td>(.*?)</td>", out)
    assert cells[0::4] == ["1", "2", ""]
    assert cells[1::4] == ["0", "0.500", "0.250"]
    assert cells[2::4] == ["0042", "0", "250000000"]
    assert cells[3::4] == ["0.0000100", "0.00000200", "0.0000300"]
    assert not re.search(r"\de[-+]\d", out)


def test_figure_names_are_file_safe_and_unique(tmp_path):
    import matplotlib.pyplot as plt

    from ped2g.report.figures import FigureStore, slug

    assert slug("Île d'Oléron 2") == "le_d_ol_ron_2"
    store = FigureStore(tmp_path)
    a = store.add("rank_pop 1", plt.figure(), "a", "a")
    b = store.add("rank_pop-1", plt.figure(), "b", "b")
    assert (a.name, b.name) == ("rank_pop_1", "rank_pop_1_2")
    assert sorted(p.name for p in tmp_path.iterdir()) == [
        "rank_pop_1.pdf", "rank_pop_1.png", "rank_pop_1_2.pdf", "rank_pop_1_2.png"]


def test_table_leaves_out_columns_with_no_value():
    frame = pd.DataFrame({"population": ["a", "b"], "in_words": ["", " "], "axis": [np.nan, None],
                          "p": [0.5, np.nan]})
    out = str(table(frame))
    heads = re.findall(r"<th>(.*?)</th>", out)
    assert heads == ["population", "p"]
    assert re.findall(r"<td>(.*?)</td>", out) == ["a", "0.500", "b", ""]


def test_interval_text_rounds_to_what_the_interval_supports():
    # width 1.24 -> 2 significant figures of the width need 1 decimal; -0.0 is written 0.0
    assert interval_text(6.93e-07, -0.662, 0.581) == "0.0 [-0.7, 0.6]"
    assert interval_text(-0.004, -0.0662, 0.0581) == "0.00 [-0.07, 0.06]"
    # width 0.118 -> 2 decimals; width 4.5 -> 1 decimal; width 35 -> none
    assert interval_text(0.612, 0.557, 0.675) == "0.61 [0.56, 0.68]"
    assert interval_text(10.7, 8.40, 12.9) == "10.7 [8.4, 12.9]"
    assert interval_text(120.4, 101.2, 136.0) == "120 [101, 136]"
    # a value held fixed (zero width) keeps its digits
    assert interval_text(2.5, 2.5, 2.5) == "2.50 [2.50, 2.50]"
    assert interval_text(float("nan"), 0, 1) == ""


def test_forest_plot_draws_the_refitting_null_band_on_the_statistic_scale():
    # compare.calibrated.TESTS: ("distance", "riemannian") is tested as "greater" (its posterior
    # mean, on the statistic's own axis); ("skewers", "magnitude_ratio") as |ln ratio|, another
    # scale, so it gets no band. One grey rectangle per banded row, spanning exactly
    # [null_refit_lower, null_refit_upper].
    from matplotlib.patches import Rectangle

    from ped2g.report.difference_figures import NULL_BAND
    from ped2g.report.figures import comparison_figure

    distance = pd.DataFrame({"method": "distance", "statistic": "riemannian",
                             "population": ["a", "a", "b"], "population2": ["b", "c", "c"],
                             "estimate": [0.3, 0.5, 0.4], "lower": [0.1, 0.3, 0.2], "upper": [0.6, 0.8, 0.7],
                             "null_refit_lower": [0.2, 0.25, np.nan], "null_refit_upper": [0.9, 0.95, np.nan]})
    ratio = distance.assign(method="skewers", statistic="magnitude_ratio")

    def bands(fig):
        grey = matplotlib.colors.to_rgba(NULL_BAND)[:3]
        return [[(p.get_x(), p.get_x() + p.get_width()) for p in ax.patches
                 if isinstance(p, Rectangle) and p.get_facecolor()[:3] == grey] for ax in fig.axes]

    fig = comparison_figure({"riemannian": distance, "magnitude_ratio": ratio}, "t", "s")
    got = bands(fig)
    assert len(got[0]) == 2 and got[1] == []
    assert np.allclose(sorted(got[0]), [(0.2, 0.9), (0.25, 0.95)])
    assert "shared G (refitting null): 95% of replicates" in [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    # without the columns (no refitting null) there is no band
    fig = comparison_figure({"riemannian": distance.drop(columns=["null_refit_lower", "null_refit_upper"])}, "t", "s")
    assert bands(fig) == [[]]
