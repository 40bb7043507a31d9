"""Reading user tables and writing stage outputs safely.

* :func:`read_table` reads a CSV, TSV or Excel table as text, with one clear :class:`UserError`
  for every way a user file can be unreadable (missing, empty, binary, not UTF-8, ragged rows).
  Cells are kept as strings so identifiers keep leading zeros and case; the index of the
  returned frame is the line number in the file (header = line 1), so messages can name the row.
* :func:`output_dir` is where a stage writes: a temporary folder beside the target that is moved
  into place only when the stage succeeds, so a failed run leaves nothing that looks finished and
  never removes files it did not write.
"""

from __future__ import annotations

import contextlib
import csv
import hashlib
import io
import json
import logging
import os
import re
import shutil
import sys
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pandas as pd

from .errors import UserError

EXCEL_SUFFIXES = {".xlsx", ".xlsm", ".xls"}
_SNIFF_BYTES = 1 << 16


def _check_file(path: Path, what: str) -> None:
    if not path.exists():
        raise UserError(f"{what} not found: {path}")
    if path.is_dir():
        raise UserError(f"{what} {path} is a folder; give the path of a table file")
    if path.stat().st_size == 0:
        raise UserError(f"{what} {path} is empty; it needs a header line and at least one row")


def read_stage_csv(path: str | os.PathLike, what: str) -> pd.DataFrame:
    """A CSV table that a stage wrote (empty frame for an empty file).

    Raises
    ------
    UserError
        The file does not parse as CSV text.
    """
    try:
        return pd.read_csv(path, keep_default_na=True)
    except pd.errors.EmptyDataError:
        return pd.DataFrame()
    except (pd.errors.ParserError, UnicodeDecodeError) as err:
        raise UserError(f"{what} {path} is not a readable CSV table ({type(err).__name__}); "
                        "rerun the stage that wrote it") from None


def read_table(path: str | os.PathLike, what: str = "table") -> pd.DataFrame:
    """Read a CSV, TSV or Excel table with every cell as a string.

    Parameters
    ----------
    path
        The file. Excel is chosen by suffix (``.xlsx``, ``.xlsm``, ``.xls``); text files are
        comma-, tab- or semicolon-separated, detected from the header line.
    what
        How messages name the file, e.g. ``"pedigree table"``.

    Returns
    -------
    pandas.DataFrame
        Columns named as in the header (surrounding white space stripped), every cell a
        ``str`` (empty string for a blank cell), index = line number in the file (header = 1).

    Raises
    ------
    UserError
        If the file is missing, empty, binary, not UTF-8, has no data rows, has duplicate or
        blank column names, or has a row with a different number of fields from the header.
    """
    path = Path(path)
    _check_file(path, what)
    if path.suffix.lower() in EXCEL_SUFFIXES:
        return _read_excel(path, what)
    raw = path.read_bytes()
    if b"\x00" in raw[:_SNIFF_BYTES]:
        raise UserError(f"{what} {path} looks like a binary file, not a CSV or TSV text table")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as err:
        line = raw[: err.start].count(b"\n") + 1
        raise UserError(
            f"{what} {path} is not UTF-8 text (byte 0x{raw[err.start]:02x} on line {line}); "
            "save it as UTF-8 and run again"
        ) from None
    lines = text.splitlines()
    header_line = next((ln for ln in lines if ln.strip()), "")
    if not header_line:
        raise UserError(f"{what} {path} is empty; it needs a header line and at least one row")
    delimiter = max(["\t", ",", ";"], key=header_line.count)
    if header_line.count(delimiter) == 0:
        delimiter = "\t" if path.suffix.lower() in {".tsv", ".tab"} else ","
    fast = _read_plain_text(text, delimiter)
    if fast is not None:
        _check_header(list(fast.columns), path, what)
        return fast
    return _read_text_rowwise(text, delimiter, path, what)


_BLANK_LINE = re.compile(r"(^|\n)[ \t\r]*(\n|$)")


def _read_plain_text(text: str, delimiter: str) -> pd.DataFrame | None:
    """Parse with pandas' C parser when the text has no quotes and no blank lines.

    Then line numbers are simply 2, 3, ... and every row's field count can be checked after
    parsing; anything unusual (quotes, blank lines, ragged rows) returns None so the row-wise
    reader can name the exact line.
    """
    if '"' in text or _BLANK_LINE.search(text.rstrip("\r\n")):
        return None
    counts = pd.Series(text.rstrip("\r\n").split("\n")).str.count(re.escape(delimiter)).to_numpy()
    if len(counts) < 2 or (counts != counts[0]).any():
        return None  # ragged rows or no data: let the row-wise reader name the line
    try:
        frame = pd.read_csv(io.StringIO(text), sep=delimiter, dtype=str, keep_default_na=False,
                            na_filter=True, na_values=[], skip_blank_lines=False,
                            engine="c", quoting=csv.QUOTE_NONE)
    except (pd.errors.ParserError, ValueError):
        return None
    if frame.empty or frame.isna().to_numpy().any():
        return None
    if any(str(c).startswith("Unnamed: ") or "." in str(c) and str(c).rsplit(".", 1)[0] in frame.columns
           for c in frame.columns):
        return None  # blank or repeated column names: let the slow path explain
    frame.columns = [str(c).strip() for c in frame.columns]
    frame.index = pd.RangeIndex(2, len(frame) + 2, name="line")
    return frame


def _read_text_rowwise(text: str, delimiter: str, path: Path, what: str) -> pd.DataFrame:
    reader = csv.reader(io.StringIO(text), delimiter=delimiter)
    rows: list[list[str]] = []
    line_numbers: list[int] = []
    header: list[str] | None = None
    for row in reader:
        lineno = reader.line_num
        if not row or all(not c.strip() for c in row):
            continue
        if header is None:
            header = [c.strip() for c in row]
            continue
        if len(row) != len(header):
            raise UserError(
                f"{what} {path} line {lineno} has {len(row)} fields but the header has "
                f"{len(header)}; check the separators and quotes on that line"
            )
        rows.append(row)
        line_numbers.append(lineno)
    assert header is not None
    _check_header(header, path, what)
    if not rows:
        raise UserError(f"{what} {path} has a header but no data rows")
    frame = pd.DataFrame(rows, columns=header, index=pd.Index(line_numbers, name="line"))
    return frame


def _check_header(header: list[str], path: Path, what: str) -> None:
    blanks = [i + 1 for i, name in enumerate(header) if not name]
    if blanks:
        raise UserError(f"{what} {path} has a blank column name in column {blanks[0]}")
    seen: set[str] = set()
    for name in header:
        if name in seen:
            raise UserError(f"{what} {path} has the column name '{name}' twice")
        seen.add(name)


def _read_excel(path: Path, what: str) -> pd.DataFrame:
    try:
        frame = pd.read_excel(path, dtype=str, keep_default_na=False, header=0)
    except Exception as err:  # openpyxl raises many kinds for a damaged file
        raise UserError(f"{what} {path} could not be read as Excel ({type(err).__name__})") from None
    frame.columns = [str(c).strip() for c in frame.columns]
    _check_header(list(frame.columns), path, what)
    frame = frame.fillna("").astype(str)
    frame.index = pd.Index(range(2, len(frame) + 2), name="line")
    frame = frame[~(frame.apply(lambda r: all(not c.strip() for c in r), axis=1))]
    if frame.empty:
        raise UserError(f"{what} {path} has a header but no data rows")
    return frame


def require_columns(frame: pd.DataFrame, columns: dict[str, str], path: str | os.PathLike,
                    what: str = "table") -> None:
    """Raise a :class:`UserError` naming the first role whose column is missing.

    ``columns`` maps a role (``"id"``) to the column name the user gave (``"animal"``).
    """
    for role, name in columns.items():
        if name not in frame.columns:
            have = ", ".join(map(str, frame.columns))
            raise UserError(
                f"{what} {path} has no {role} column '{name}' (columns are: {have}); "
                f"name the right one with the {role} column option"
            )


def file_sha256(path: str | os.PathLike) -> str:
    """SHA-256 checksum of a file, for provenance records."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def write_json(path: str | os.PathLike, data: Any) -> None:
    """Write ``data`` as indented JSON (numpy scalars and arrays converted)."""

    def default(obj: Any) -> Any:
        if hasattr(obj, "tolist"):
            return obj.tolist()
        if isinstance(obj, Path):
            return str(obj)
        raise TypeError(f"not JSON serialisable: {type(obj).__name__}")

    with open(path, "w", encoding="utf-8") as handle:
        json.dump(data, handle, indent=2, default=default)
        handle.write("\n")


@contextlib.contextmanager
def output_dir(out: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary folder to write a stage's outputs into; move them to ``out`` on success.

    The temporary folder sits beside ``out`` (same file system, so the moves are renames). On
    success each file or sub-folder written replaces the one of the same name in ``out``; other
    files already in ``out`` are left alone. On failure the temporary folder is removed and
    ``out`` is untouched.
    """
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise UserError(f"output {out} exists and is not a folder; choose another --out")
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.parent / f".{out.name}.tmp-{os.getpid()}-{time.monotonic_ns()}"
    tmp.mkdir()
    try:
        yield tmp
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    out.mkdir(exist_ok=True)
    for entry in sorted(tmp.iterdir()):
        target = out / entry.name
        if target.is_dir() and not target.is_symlink():
            shutil.rmtree(target)
        os.replace(entry, target)
    tmp.rmdir()


def get_logger(stage: str) -> logging.Logger:
    """The logger of a stage: time-stamped lines on standard error."""
    logger = logging.getLogger(f"ped2g.{stage}")
    if not logging.getLogger("ped2g").handlers:
        handler = logging.StreamHandler(sys.stderr)
        handler.setFormatter(logging.Formatter("%(asctime)s %(name)s: %(message)s",
                                               datefmt="%H:%M:%S"))
        root = logging.getLogger("ped2g")
        root.addHandler(handler)
        root.setLevel(logging.INFO)
        root.propagate = False
    return logger


def load_netcdf(path: Path, what: str, command: str):
    """A stage's netCDF file at ``path``, loaded into memory and closed (an ``xarray.Dataset``).

    Raises
    ------
    UserError
        ``path`` is not a file, or not a netCDF file (``what`` names the file, ``command`` the
        stage that writes it).
    """
    import xarray as xr

    if not path.is_file():
        raise UserError(f"{what} file not found: {path}; run '{command}' first")
    try:
        with xr.open_dataset(path, engine="h5netcdf") as handle:
            return handle.load()
    except Exception:
        raise UserError(f"{what} file {path} is not a netCDF file written by '{command}'") from None
