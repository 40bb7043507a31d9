"""Small HTML helpers for the report: number formatting and tables with highlighted cells."""

from __future__ import annotations

import html
import math
from typing import Any

import numpy as np
import pandas as pd
from markupsafe import Markup


def fmt(value: Any, digits: int = 3) -> str:
    """Format a number for reading: ``digits`` significant figures, plain notation when sensible.

    Integers stay integers; NaN and None print as an empty string.
    """
    if value is None:
        return ""
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int) or (hasattr(value, "dtype") and getattr(value.dtype, "kind", "") in "iu"):
        return str(int(value))
    try:
        x = float(value)
    except (TypeError, ValueError):
        return str(value)
    if math.isnan(x):
        return ""
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    if x == 0:
        return "0"
    if 1e6 > abs(x) >= 10 ** (digits - 1):
        return f"{x:.0f}"  # large numbers keep all their integer digits
    x = float(f"{x:.{digits}g}")  # round to significant figures first (9.9996 -> 10.0)
    magnitude = math.floor(math.log10(abs(x)))
    if magnitude >= 6 or magnitude < -4:
        return f"{x:.{digits - 1}e}"
    decimals = max(digits - 1 - magnitude, 0)
    return f"{x:.{decimals}f}"


def plain(value: Any, digits: int = 3, max_decimals: int | None = None) -> str:
    """Like :func:`fmt`, but never in scientific notation: at most ``max_decimals`` decimals
    (a value that rounds to zero prints as 0), numbers of a million or more as integers."""
    if isinstance(value, bool) or value is None:
        return fmt(value, digits)
    try:
        x = float(value)
    except (TypeError, ValueError):
        return str(value)
    if not math.isfinite(x) or x == 0 or isinstance(value, int):
        return fmt(value, digits)
    magnitude = math.floor(math.log10(abs(float(f"{x:.{digits}g}"))))
    decimals = max(digits - 1 - magnitude, 0)
    if max_decimals is not None:
        decimals = min(decimals, max_decimals)
    text = f"{x:.{decimals}f}"
    return "0" if float(text) == 0 else text


def interval_text(estimate: Any, lower: Any, upper: Any, width_digits: int = 2) -> str:
    """``estimate [lower, upper]`` rounded to what the interval supports: the decimals that give
    the interval's width ``width_digits`` significant figures, the same for all three numbers
    (a covariance of 6.93e-07 with interval [-0.66, 0.58] prints as 0.00 [-0.66, 0.58]). An
    interval of zero width (a value held fixed) prints each number as :func:`plain` does."""
    try:
        x, lo, hi = float(estimate), float(lower), float(upper)
    except (TypeError, ValueError):
        return ""
    if not all(map(math.isfinite, (x, lo, hi))):
        return f"{plain(x)} [{plain(lo)}, {plain(hi)}]" if math.isfinite(x) else ""
    width = hi - lo
    if width <= 0:
        return f"{plain(x)} [{plain(lo)}, {plain(hi)}]"
    decimals = max(width_digits - 1 - math.floor(math.log10(width)), 0)

    def one(v: float) -> str:
        text = f"{v:.{decimals}f}"
        return text[1:] if text.startswith("-") and float(text) == 0 else text

    return f"{one(x)} [{one(lo)}, {one(hi)}]"


#: Values are never cut to fewer decimals than this (0.0042 stays 0.0042 beside 12.8).
MIN_DECIMALS = 4


def column_decimals(values: pd.Series, digits: int = 3) -> int | None:
    """Decimals that give the column's largest |value| ``digits + 1`` significant figures: the
    cap for every value of the column, so that tiny values print as 0 beside large ones."""
    x = pd.to_numeric(values, errors="coerce").to_numpy(dtype=float) if values.dtype != bool else None
    if x is None:
        return None
    x = np.abs(x[np.isfinite(x)])
    if not len(x) or x.max() == 0:
        return None
    return max(digits - math.floor(math.log10(x.max())), MIN_DECIMALS)


def _header(name: str) -> str:
    """A column name with break opportunities after underscores (narrow columns, names unchanged)."""
    return html.escape(str(name)).replace("_", "_<wbr>")


def table(frame: pd.DataFrame, misses: pd.DataFrame | None = None, max_rows: int | None = None,
          index: bool = False, caption: str | None = None,
          digits: dict[str, int] | None = None, collapse_after: int | None = None,
          summary: str | None = None) -> Markup:
    """Render ``frame`` as an HTML table; cells where ``misses`` is True get class ``miss``.

    Rows beyond ``max_rows`` are left out with a note (the CSV holds them all). ``digits`` gives
    the significant figures of named columns (default 3), e.g. 4 for R-hat so that 1.012 does
    not print as 1.01 beside a 1.01 threshold. A table longer than ``collapse_after`` rows is
    folded into a ``<details>`` element that the reader opens with one click. Columns with no
    value in any row are left out.
    """
    digits = digits or {}
    frame = frame[[c for c in frame.columns if not _empty(frame[c])]]  # an empty column says nothing
    shown = frame if max_rows is None else frame.iloc[:max_rows]
    parts = ['<div class="table-wrap"><table>']
    if caption:
        parts.append(f"<caption>{html.escape(caption)}</caption>")
    head = ([_header(frame.index.name or "")] if index else []) + [_header(c) for c in frame.columns]
    caps = {c: _column_cap(frame[c], digits.get(c, 3)) for c in frame.columns}
    whole = {c: _whole_numbers(frame[c]) for c in frame.columns}
    parts.append("<thead><tr>" + "".join(f"<th>{h}</th>" for h in head) + "</tr></thead><tbody>")
    for pos, (label, row) in enumerate(shown.iterrows()):
        row_miss = misses is not None and bool(misses.iloc[pos].any())
        cells = [f'<th scope="row">{html.escape(str(label))}</th>'] if index else []
        for col in frame.columns:
            miss = misses is not None and col in misses.columns and bool(misses.iloc[pos][col])
            cls = ' class="miss"' if miss else ""
            text = _cell(row[col], digits.get(col, 3), caps[col], whole[col])
            cells.append(f"<td{cls}>{html.escape(text)}</td>")
        tr_cls = ' class="miss-row"' if row_miss else ""
        parts.append(f"<tr{tr_cls}>" + "".join(cells) + "</tr>")
    parts.append("</tbody></table></div>")
    if max_rows is not None and len(frame) > max_rows:
        parts.append(f'<p class="note">{len(frame) - max_rows} more rows are in the CSV table.</p>')
    if collapse_after is not None and len(shown) > collapse_after:
        label = html.escape(summary or f"Show the table ({len(shown)} rows)")
        parts = [f"<details><summary>{label}</summary>", *parts, "</details>"]
    return Markup("".join(parts))


def _empty(column: pd.Series) -> bool:
    """Whether no cell of the column holds anything (None, NaN or blank text only)."""
    return bool(column.isna().all()) or bool(column.astype(str).str.strip().isin(["", "nan", "None"]).all())


def _is_number(value: Any) -> bool:
    if isinstance(value, (bool, np.bool_)) or value is None:
        return False
    return isinstance(value, (int, float, np.integer, np.floating))


def _numbers(values: pd.Series) -> np.ndarray:
    """The finite numeric cells of a column (text cells that read as numbers included)."""
    if values.dtype == bool:
        return np.zeros(0)
    x = pd.to_numeric(values, errors="coerce").to_numpy(dtype=float)
    return x[np.isfinite(x)]


def _column_cap(values: pd.Series, digits: int) -> int | None:
    """The decimals cap of a column holding numbers (see :func:`column_decimals`); None for a
    column of text only."""
    if values.dtype.kind not in "fO" or not len(_numbers(values)):
        return None
    return column_decimals(values, digits)


def _whole_numbers(values: pd.Series) -> bool:
    """Whether every number in the column is a whole number (a count or a component number
    stored as float because of empty cells): printed without decimals."""
    x = _numbers(values)
    return values.dtype.kind in "fO" and len(x) > 0 and bool(np.all(x == np.round(x))) and \
        bool(np.all(np.abs(x) < 1e15))


def _cell(value: Any, digits: int, cap: int | None, whole: bool) -> str:
    """One table cell: numbers never in scientific notation (``cap`` decimals at most)."""
    if isinstance(value, str):
        return value  # text as written (an id such as 0042 is not a number)
    if not _is_number(value):
        return fmt(value, digits)
    if not math.isfinite(float(value)):
        return fmt(value, digits)
    if whole:
        return str(int(round(float(value))))
    return plain(value, digits, cap)


def plain_value(value: Any, exact: bool = False) -> str:
    """A setting's value in words: numbers to 3 significant figures without exponent (``exact``:
    as written, 0.9 as 0.9), yes/no, lists joined with commas (a blank item as "blank"), None and
    empty lists as "none", nested mappings as ``key: value`` pairs separated by semicolons."""
    if exact and _is_number(value) and math.isfinite(float(value)):
        return np.format_float_positional(float(value), trim="-")
    if isinstance(value, (dict, list, tuple)) and exact:
        value = _exact(value)
    if value is None:
        return "none"
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, dict):
        return "; ".join(f"{k}: {plain_value(v)}" for k, v in value.items()) or "none"
    if isinstance(value, (list, tuple)):
        if not value:
            return "none"
        if all(isinstance(v, (list, tuple)) for v in value):  # a matrix: rows separated by semicolons
            return "; ".join(", ".join(plain_value(x) for x in row) for row in value)
        sep = "; " if any(isinstance(v, dict) for v in value) else ", "
        return sep.join("blank" if v == "" else plain_value(v) for v in value)
    if _is_number(value):
        x = float(value)
        if math.isfinite(x) and x == round(x) and abs(x) < 1e15 and isinstance(value, (int, np.integer)):
            return str(int(value))
        return plain(value)
    return str(value)


class _Written(str):
    """A number already written out (by :func:`plain_value` with ``exact``)."""


def _exact(value: Any) -> Any:
    if isinstance(value, dict):
        return {k: _exact(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_exact(v) for v in value]
    return _Written(plain_value(value, exact=True)) if _is_number(value) else value


def key_values(pairs: dict[str, Any] | list[tuple[str, Any]]) -> Markup:
    """A two-column table of keys and values, each value in words (:func:`plain_value`)."""
    items = pairs.items() if isinstance(pairs, dict) else pairs
    rows = []
    for key, value in items:
        rows.append(f"<tr><th scope=\"row\">{html.escape(str(key))}</th>"
                    f"<td>{html.escape(plain_value(value))}</td></tr>")
    return Markup('<div class="table-wrap"><table class="kv"><tbody>' + "".join(rows) +
                  "</tbody></table></div>")
