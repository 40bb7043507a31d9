"""``ped2g pedigree``: clean a raw pedigree and write it with inbreeding and A-inverse."""

from __future__ import annotations

import argparse

HELP = "clean a raw pedigree table; write it parents-first with inbreeding, A-inverse and a summary"

DESCRIPTION = """\
Read a raw pedigree table (CSV, TSV or Excel; one row per animal with its id, sire and dam) and
write to --out:
  pedigree.csv               id, sire, dam, generation, inbreeding; parents before offspring;
                             unknown parent left empty
  relationship_inverse.mtx   the inverse of the additive relationship matrix, A-inverse (Matrix
                             Market, symmetric, rows and columns in the order of pedigree.csv)
  changes.csv                every change made to the table: row (line in the file; for an
                             added founder, the first line that names it), id, problem, action
  summary.json               counts of animals, founders, families, generations, inbreeding and
                             changes

Repairs made and logged: white space around ids is stripped; exact duplicate rows are dropped;
parents that have no row of their own are added as founders. Refused, with a one-line message
naming the line and the id: the same id with different parents, an animal that is its own
parent or ancestor, and (unless --hermaphrodite) selfing or an id used both as sire and dam.

Assumptions and cautions: founders and unknown parents are taken as unrelated, non-inbred
members of one base population, so inbreeding and relationships are relative to that base and
are underestimated where the pedigree is shallow or has many unknown parents. Pedigree errors
(wrong parents) are not detectable here and carry into every later estimate."""

DEFAULT_MISSING_CLI = "0,NA,."


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("raw", metavar="RAW",
                        help="the raw pedigree table (.csv, .tsv, .txt or .xlsx)")
    parser.add_argument("--out", required=True, metavar="DIR",
                        help="folder to write pedigree.csv, relationship_inverse.mtx, changes.csv "
                             "and summary.json into (created if needed; other files left alone)")
    parser.add_argument("--id", default="id", metavar="COL", dest="id_col",
                        help="name of the column holding each animal's id")
    parser.add_argument("--sire", default="sire", metavar="COL", dest="sire_col",
                        help="name of the column holding the sire (father) id")
    parser.add_argument("--dam", default="dam", metavar="COL", dest="dam_col",
                        help="name of the column holding the dam (mother) id")
    parser.add_argument("--missing", default=DEFAULT_MISSING_CLI, metavar="CODES",
                        help="comma-separated codes that mean 'parent unknown' in the sire and "
                             "dam columns; a blank cell always means unknown; give --missing '' "
                             "to treat only blank cells as unknown")
    parser.add_argument("--hermaphrodite", action="store_true",
                        help="allow an id to be the sire of some offspring and the dam of "
                             "others, and allow selfing (sire = dam), as in many plants")


def run(args: argparse.Namespace) -> int:
    import time
    from pathlib import Path

    import scipy.io

    from .. import __version__
    from ..io import file_sha256, get_logger, output_dir, write_json
    from .clean import read_raw_pedigree
    from .relationships import relationship_inverse
    from .summary import summarise

    log = get_logger("pedigree")
    start = time.perf_counter()
    raw = Path(args.raw)
    missing = tuple(c.strip() for c in args.missing.split(",")) + ("",)
    ped, changes = read_raw_pedigree(raw, id_col=args.id_col, sire_col=args.sire_col,
                                     dam_col=args.dam_col, missing=missing,
                                     hermaphrodite=args.hermaphrodite)
    problems = changes["problem"]
    rows_read = (ped.n - int(problems.str.endswith("has no row of its own").sum())
                 + int((problems == "duplicate row").sum()))
    log.info("read %s: %d rows, %d animals after cleaning, %d changes (%.1f s)", raw, rows_read,
             ped.n, len(changes), time.perf_counter() - start)
    t = time.perf_counter()
    a_inverse = relationship_inverse(ped)
    log.info("built A-inverse: %d x %d, %d non-zeros (%.1f s)", ped.n, ped.n, a_inverse.nnz,
             time.perf_counter() - t)
    summary = summarise(ped, changes)
    summary = {
        "input": {"path": str(raw), "sha256": file_sha256(raw), "rows": rows_read,
                  "columns": {"id": args.id_col, "sire": args.sire_col, "dam": args.dam_col},
                  "missing_parent_codes": sorted(set(missing)),
                  "hermaphrodite": bool(args.hermaphrodite)},
        "ped2g_version": __version__,
        **summary,
        "assumptions": [
            "Founders and unknown parents are unrelated, non-inbred members of one base "
            "population; inbreeding and relationships are relative to that base.",
            "Inbreeding and relationships are underestimated where the pedigree is shallow or "
            "has many unknown parents.",
            "Wrong parentage cannot be detected from the pedigree alone and carries into every "
            "later estimate.",
        ],
    }
    t = time.perf_counter()
    with output_dir(args.out) as tmp:
        ped.write_csv(tmp / "pedigree.csv")
        scipy.io.mmwrite(tmp / "relationship_inverse.mtx", a_inverse, symmetry="symmetric",
                         comment=f"A-inverse of pedigree.csv (ped2g {__version__}); rows and "
                                 "columns in pedigree.csv order")
        changes.to_csv(tmp / "changes.csv", index=False)
        write_json(tmp / "summary.json", summary)
    log.info("wrote pedigree.csv, relationship_inverse.mtx, changes.csv, summary.json to %s "
             "(%.1f s)", args.out, time.perf_counter() - t)
    log.info("%d founders, %d generations, mean inbreeding %.4f, max %.4f",
             summary["founders"], summary["max_generation"] + 1, summary["mean_inbreeding"],
             summary["max_inbreeding"])
    return 0
