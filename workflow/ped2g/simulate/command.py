"""``ped2g simulate``: write an invented study's raw pedigree, phenotypes and truth file."""

from __future__ import annotations

import argparse
import time
from pathlib import Path
from typing import Any

from ..errors import UserError
from . import DEMO_SEED

HELP = "simulate an invented multi-population study (raw pedigree, phenotypes, truth)"

DESCRIPTION = f"""\
Simulate an invented study with known answers: for each population a pedigree with overlapping
generations, breeding values drawn down it from a known G matrix, and phenotypic records with a
sex effect and residuals from a known R. The tables are written the way field data arrive (some
parents unknown, a few parents without a row of their own, a few exact duplicate rows, ids with
stray white space, missing trait values), so they exercise every stage of ped2g.

Writes OUT/pedigree.csv (id, sire, dam), OUT/phenotypes.csv (id, population, sex, year, one
column per trait) and OUT/truth.yaml (every true parameter: G, R, P, heritabilities, means, sex
effects, how each population's G differs, and the simulation's assumptions). The same seed and
settings give byte-identical files. With no options it makes the demo study in resources_demo/
(seed {DEMO_SEED}). Sizes can be changed with the options below or, for every setting
(populations, traits, designs, heritabilities, ...), with a YAML file given to --settings."""

# (option, settings field, type, help)
_SIZE_OPTIONS: list[tuple[str, str, type, str]] = [
    ("--animals", "animals", int, "animals per population in the true pedigree"),
    ("--founders", "founders", int, "founders per population"),
    ("--years", "years", int, "breeding seasons after the founding one"),
    ("--phenotyped", "phenotyped", int, "animals per population with records"),
    ("--unknown-parents", "unknown_parent_fraction", float,
     "probability that each parent of a non-founder is written as unknown"),
    ("--missing-values", "missing_value_fraction", float,
     "probability that each trait value is missing"),
]


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--out", required=True, default=argparse.SUPPRESS,
                        help="folder to write the three files into")
    parser.add_argument("--seed", type=int, default=DEMO_SEED,
                        help="the one seed every random stream is derived from")
    parser.add_argument("--settings", metavar="YAML", default=argparse.SUPPRESS,
                        help="YAML file of study settings (names as in ped2g.simulate.study."
                             "StudySettings); the options below override it")
    for option, _field, kind, text in _SIZE_OPTIONS:
        parser.add_argument(option, type=kind, default=argparse.SUPPRESS,
                            help=f"{text} (default: as in the demo)")


def _read_settings(path: str) -> dict[str, Any]:
    import yaml

    from ..config import DuplicateKeyError, StrictLoader

    p = Path(path)
    if not p.is_file():
        raise UserError(f"settings file not found: {p}")
    try:
        values = yaml.load(p.read_text(encoding="utf-8"), Loader=StrictLoader)  # noqa: S506
    except DuplicateKeyError as err:
        raise UserError(f"settings file {p}: {err}; keep one of them") from None
    except (yaml.YAMLError, UnicodeDecodeError) as err:
        mark = getattr(err, "problem_mark", None)
        where = f" (line {mark.line + 1})" if mark is not None else ""
        raise UserError(f"settings file {p} is not valid YAML{where}; fix it and run again") from None
    if values is None:
        return {}
    if not isinstance(values, dict):
        raise UserError(f"settings file {p} must hold a mapping of setting: value")
    return values


def recorded_command(args: argparse.Namespace) -> str:
    """The command line that remakes the files (without the output folder)."""
    parts = ["ped2g simulate", f"--seed {args.seed}"]
    if getattr(args, "settings", None):
        parts.append(f"--settings {Path(args.settings).name}")
    for option, _field, _kind, _text in _SIZE_OPTIONS:
        value = getattr(args, field_attr(option), None)
        if value is not None:
            parts.append(f"{option} {value}")
    return " ".join(parts)


def field_attr(option: str) -> str:
    return option.lstrip("-").replace("-", "_")


def write_study(study, out_dir: Path, decimals: int) -> None:
    """Write ``pedigree.csv``, ``phenotypes.csv`` and ``truth.yaml`` of a study into a folder."""
    import yaml

    study.pedigree.to_csv(out_dir / "pedigree.csv", index=False, lineterminator="\n")
    study.phenotypes.to_csv(out_dir / "phenotypes.csv", index=False, na_rep="",
                            float_format=f"%.{decimals}f", lineterminator="\n")
    header = ("# True parameters of an invented study simulated by ped2g (not estimates).\n"
              "# Matrices are lists of rows in the order of 'traits'.\n")
    with open(out_dir / "truth.yaml", "w", encoding="utf-8", newline="\n") as handle:
        handle.write(header)
        yaml.safe_dump(study.truth, handle, sort_keys=False, width=100, allow_unicode=True,
                       default_flow_style=None)


def run(args: argparse.Namespace) -> int:
    from ..io import get_logger, output_dir
    from .study import StudySettings, simulate_study

    log = get_logger("simulate")
    settings_file = getattr(args, "settings", None)
    values = _read_settings(settings_file) if settings_file else {}
    source = f"settings file {settings_file}" if settings_file else "study settings"
    for option, field, _kind, _text in _SIZE_OPTIONS:
        value = getattr(args, field_attr(option), None)
        if value is not None:
            values[field] = value
    if args.seed < 0:
        raise UserError(f"--seed must be a non-negative integer, got {args.seed}")
    settings = StudySettings.from_mapping(values, source=source)
    start = time.perf_counter()
    study = simulate_study(settings, seed=args.seed)
    study.truth["made_with"]["command"] = recorded_command(args)
    log.info("simulated %d populations, %d pedigree rows, %d records in %.2f s",
             len(settings.populations), len(study.pedigree), len(study.phenotypes),
             time.perf_counter() - start)
    with output_dir(args.out) as tmp:
        write_study(study, tmp, settings.decimals)
    for name in ("pedigree.csv", "phenotypes.csv", "truth.yaml"):
        log.info("wrote %s", Path(args.out) / name)
    return 0
