"""``ped2g report``: one self-contained HTML report, with the figures and tables beside it."""

from __future__ import annotations

import argparse
import sys

HELP = "write the HTML report, figures (PNG, PDF), tables (CSV) and methods text"
DESCRIPTION = """\
Reads the outputs of the earlier stages (pedigree/, fits/<population>/, null/, compare/ under
--results) and writes to --out: report.html (one file, figures embedded, to send to co-authors),
report.pdf (the same page printed by headless Chromium, when installed), figures/*.png and
*.pdf, tables/*.csv, methods.txt (a methods paragraph with versions and
references) and provenance.json (config, checksums, versions, seeds, run times). The fits are
required; a missing null or comparison gives a section that says so."""


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--config", required=True, help="the run's YAML config file")
    parser.add_argument("--results", required=True,
                        help="folder holding pedigree/, fits/, null/ and compare/ (or its parent)")
    parser.add_argument("--out", required=True, help="report folder to write")
    parser.add_argument("--truth", default=None,
                        help="truth.yaml of a simulated study, for truth markers (default: a truth.yaml "
                             "written by 'ped2g simulate' beside the phenotype table, if there is one)")
    parser.add_argument("--no-pdf", action="store_true",
                        help="write no report.pdf (by default it is printed with headless Chromium)")


def run(args: argparse.Namespace) -> int:
    from ..config import load_config
    from ..io import get_logger
    from .assemble import build_report

    log = get_logger("report")
    config = load_config(args.config)
    result = build_report(config, args.results, args.out, config_path=args.config,
                          argv=["ped2g", *sys.argv[1:]] if sys.argv and sys.argv[0] else None,
                          truth=args.truth, pdf=not args.no_pdf)
    log.info("wrote %s/report.html with %d figures and %d tables in %.1f s", result.out,
             len(result.figures), len(result.tables), result.seconds)
    if result.pdf is not None:
        log.info("wrote %s", result.pdf)
    elif not args.no_pdf:
        log.warning("no PDF was made: %s; the HTML report is complete", result.pdf_note)
    if result.failed_fits:
        log.warning("fits that missed a convergence check: %s", ", ".join(result.failed_fits))
    return 0
