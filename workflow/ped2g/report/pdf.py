"""The report as one PDF, printed from the same HTML by headless Chromium.

The PDF is made from ``report.html`` itself, so it holds the same text, tables and figures. Before
printing, a copy of the page is made with every folded table (``<details>``) opened; the page's
print stylesheet (``@media print`` in the template) then lays it out on A4 landscape pages with
tables wrapped to the page width, so every row and every column of every table is printed.

Chromium is looked up on the PATH (``chromium``, ``chromium-browser``, ``google-chrome``) or taken
from the environment variable ``PED2G_CHROMIUM``. Without it no PDF is made: :func:`write_pdf`
returns a reason and the report stage logs it in one line; the HTML report is complete without it.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import tempfile
from dataclasses import dataclass
from pathlib import Path

#: Program names tried in order when ``PED2G_CHROMIUM`` is not set.
CHROMIUM_NAMES = ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable")
#: Flags for printing without a display, sandbox (containers), network or user profile.
CHROMIUM_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                  "--disable-background-networking", "--disable-component-update", "--disable-sync",
                  "--no-pdf-header-footer", "--print-to-pdf-no-header", "--virtual-time-budget=20000"]
PRINT_TIMEOUT_SECONDS = 300


@dataclass
class PdfResult:
    """``path`` of the PDF written, or None with ``reason`` saying why none was made."""

    path: Path | None
    reason: str = ""


def find_chromium() -> str | None:
    """The Chromium program to print with, or None when there is none."""
    given = os.environ.get("PED2G_CHROMIUM")
    if given:
        return shutil.which(given) or (given if Path(given).is_file() else None)
    for name in CHROMIUM_NAMES:
        found = shutil.which(name)
        if found:
            return found
    return None


def printable_copy(page: str) -> str:
    """The page with every ``<details>`` element open, so that folded tables print whole."""
    return re.sub(r"<details(?![^>]*\bopen\b)", "<details open", page)


def write_pdf(html_path: str | os.PathLike, pdf_path: str | os.PathLike) -> PdfResult:
    """Print ``html_path`` to ``pdf_path`` with headless Chromium.

    Returns a :class:`PdfResult`; a missing Chromium or a failed print is not an error (the HTML
    report is the primary output), but the reason is returned for the log.
    """
    chromium = find_chromium()
    if chromium is None:
        return PdfResult(None, "no Chromium found (install Debian's 'chromium' package or set "
                               "PED2G_CHROMIUM to print the report as PDF)")
    html_path, pdf_path = Path(html_path), Path(pdf_path)
    with tempfile.TemporaryDirectory(prefix="ped2g_pdf_") as tmp:
        copy = Path(tmp) / "report_print.html"
        copy.write_text(printable_copy(html_path.read_text(encoding="utf-8")), encoding="utf-8")
        target = Path(tmp) / "report.pdf"
        command = [chromium, *CHROMIUM_FLAGS, f"--user-data-dir={Path(tmp) / 'profile'}",
                   f"--print-to-pdf={target}", copy.resolve().as_uri()]
        try:
            run = subprocess.run(command, capture_output=True, text=True, timeout=PRINT_TIMEOUT_SECONDS)
        except (OSError, subprocess.TimeoutExpired) as err:
            return PdfResult(None, f"Chromium ({chromium}) did not print the report: {type(err).__name__}")
        if not target.is_file() or target.stat().st_size == 0 or not target.read_bytes().startswith(b"%PDF"):
            last = (run.stderr or "").strip().splitlines()[-1:] or ["no message"]
            return PdfResult(None, f"Chromium ({chromium}) wrote no PDF (exit {run.returncode}: {last[0][:200]})")
        pdf_path.parent.mkdir(parents=True, exist_ok=True)
        shutil.copyfile(target, pdf_path)
    return PdfResult(pdf_path)


__all__ = ["PdfResult", "find_chromium", "printable_copy", "write_pdf"]
