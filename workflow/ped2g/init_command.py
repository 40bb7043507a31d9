"""``ped2g init``: write a starter config for a study's own pedigree and phenotype tables.

The command reads both tables, guesses which columns hold the animal id, the sire, the dam and
the population and which phenotype columns are numeric traits, and writes a commented YAML
config that passes the schema. It says on standard error what it guessed and why, so the user
can check each guess before the first run. Every guess can be overridden by an option.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import re
import sys
from dataclasses import dataclass, field
from pathlib import Path

HELP = "write a starter config for your own pedigree and phenotype tables"

DESCRIPTION = """\
Reads the pedigree and phenotype tables, guesses the id, sire, dam and population columns and
the numeric trait columns, and writes a commented starter config that the workflow accepts.
What was guessed, and why, is printed; check it, edit the config (traits, fixed and random
effects, sampling), then run 'snakemake -n --configfile CONFIG' to see the jobs. Options name
any column the guesses get wrong."""

# Column names (lower case, with spaces, dots and dashes as underscores) that usually hold each
# role, most likely first. Matching is exact on these names, then by prefix or suffix.
ROLE_NAMES: dict[str, tuple[str, ...]] = {
    "id": ("id", "animal", "animal_id", "individual", "ind", "indiv", "bird", "fish", "plant",
           "tree", "tag", "ring", "band", "name", "code", "ident", "identifier"),
    "sire": ("sire", "father", "dad", "pat", "paternal", "sire_id", "father_id", "male_parent",
             "pollen_parent", "pollen_donor"),
    "dam": ("dam", "mother", "mum", "mom", "mat", "maternal", "dam_id", "mother_id",
            "female_parent", "seed_parent"),
    "population": ("population", "pop", "site", "location", "locality", "island", "line",
                   "colony", "deme", "region", "group", "stock", "breed", "strain", "area"),
}

# Phenotype columns that are numeric but are usually not traits: they are offered as
# possible fixed effects instead.
NOT_TRAITS = re.compile(
    r"^(sex|gender|year|yr|cohort|birth_?year|hatch_?year|age|date|day|month|season|"
    r"brood|clutch|nest|block|batch|rep|replicate|observer|x|y|lat|latitude|lon|long|"
    r"longitude|row|col|column|plot|pen|cage|tank|litter)(_.*)?$")

# Of those, the ones usually entered as a slope rather than a level per value.
NUMERIC_COVARIATES = re.compile(r"^(age|x|y|lat|latitude|lon|long|longitude|date|day)(_.*)?$")

# Codes that often mean "unknown parent" in sire and dam columns.
MISSING_CODES = ("0", "NA", "na", "N/A", ".", "-", "-9", "-1", "NULL", "null", "None", "none",
                 "unknown", "Unknown", "?", "missing", "")

NUMERIC_SHARE = 0.9  # a trait column: at least this share of non-blank cells are numbers


@dataclass
class Guesses:
    """What init decided, and a line of explanation for each decision."""

    columns: dict[str, str] = field(default_factory=dict)
    traits: list[str] = field(default_factory=list)
    missing: list[str] = field(default_factory=list)
    hermaphrodite: bool = False
    populations: list[str] = field(default_factory=list)
    possible_fixed: dict[str, str] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--pedigree", required=True, metavar="FILE",
                        help="raw pedigree table (CSV, TSV or Excel), one row per animal")
    parser.add_argument("--phenotypes", required=True, metavar="FILE",
                        help="phenotype table (CSV, TSV or Excel), one row per record")
    parser.add_argument("--out", required=True, metavar="CONFIG",
                        help="where to write the starter config (YAML)")
    parser.add_argument("--id", metavar="COL", help="animal id column (in both tables)")
    parser.add_argument("--sire", metavar="COL", help="sire column of the pedigree table")
    parser.add_argument("--dam", metavar="COL", help="dam column of the pedigree table")
    parser.add_argument("--population-column", metavar="COL",
                        help="population column of the phenotype table")
    parser.add_argument("--traits", nargs="+", metavar="COL",
                        help="trait columns to analyse (default: every numeric column that is "
                             "not an id, a parent, the population or a likely covariate)")
    parser.add_argument("--force", action="store_true", help="overwrite CONFIG if it exists")


def _normal(name: str) -> str:
    return re.sub(r"[\s.\-]+", "_", name.strip().lower())


def guess_role(columns: list[str], role: str, taken: set[str] = frozenset()) -> tuple[str | None, str]:
    """Pick the column most likely to hold ``role``; return it and how it was found.

    Exact matches on :data:`ROLE_NAMES` (in their order of likelihood) win; then a column
    whose name starts or ends with one of those names (``sire_ring``, ``mother_id``).
    """
    free = [c for c in columns if c not in taken]
    normal = {c: _normal(c) for c in free}
    for name in ROLE_NAMES[role]:
        for column in free:
            if normal[column] == name:
                return column, f"named '{column}'"
    for name in ROLE_NAMES[role]:
        if len(name) < 3:
            continue
        for column in free:
            parts = normal[column].split("_")
            if parts[0] == name or parts[-1] == name:
                return column, f"named '{column}' (contains '{name}')"
    return None, "no column with a usual name"


def _as_number(cell: str) -> float | None:
    try:
        value = float(cell)
    except ValueError:
        return None
    return value if math.isfinite(value) else None


def numeric_share(values) -> tuple[float, int]:
    """Share of non-blank, non-missing-code cells that read as finite numbers, and their count."""
    cells = [v.strip() for v in values if v.strip() not in ("", "NA", "na", "NaN", "nan", ".")]
    if not cells:
        return 0.0, 0
    numbers = sum(_as_number(c) is not None for c in cells)
    return numbers / len(cells), len(cells)


def guess(pedigree, phenotypes, *, id_col=None, sire=None, dam=None, population=None,
          traits=None, pedigree_path="pedigree table", phenotypes_path="phenotype table") -> Guesses:
    """Guess the config's columns and traits from the two tables (cells as strings).

    Raises
    ------
    UserError
        If a named column is missing, or a role cannot be guessed (saying which option to give).
    """
    from .errors import UserError

    g = Guesses()
    ped_cols, phen_cols = list(pedigree.columns), list(phenotypes.columns)

    def given(column, table_cols, option, table):
        if column not in table_cols:
            raise UserError(f"{option} {column!r} is not a column of the {table} (columns are: "
                            f"{', '.join(table_cols)})")
        return column

    # id: must be a column of both tables
    if id_col is not None:
        given(id_col, ped_cols, "--id", f"pedigree table {pedigree_path}")
        given(id_col, phen_cols, "--id", f"phenotype table {phenotypes_path}")
        g.columns["id"], why = id_col, "given with --id"
    else:
        shared = [c for c in ped_cols if c in phen_cols]
        column, why = guess_role(shared, "id")
        if column is None and shared:
            column, why = shared[0], f"'{shared[0]}' is the first column both tables share"
        if column is None:
            raise UserError(f"no column name is shared by the pedigree table {pedigree_path} and "
                            f"the phenotype table {phenotypes_path}; the animal id column must have "
                            "the same name in both (rename it in one table) - then give it with --id")
        g.columns["id"] = column
    g.notes.append(f"id column: '{g.columns['id']}' ({why})")

    for role, value, option in (("sire", sire, "--sire"), ("dam", dam, "--dam")):
        if value is not None:
            g.columns[role] = given(value, ped_cols, option, f"pedigree table {pedigree_path}")
            why = f"given with {option}"
        else:
            column, why = guess_role(ped_cols, role, taken={g.columns["id"], *g.columns.values()})
            if column is None:
                raise UserError(f"could not tell which column of the pedigree table {pedigree_path} "
                                f"holds the {role} (columns are: {', '.join(ped_cols)}); give it "
                                f"with {option} COL")
            g.columns[role] = column
        g.notes.append(f"{role} column: '{g.columns[role]}' ({why})")

    if population is not None:
        g.columns["population"] = given(population, phen_cols, "--population-column",
                                        f"phenotype table {phenotypes_path}")
        why = "given with --population-column"
    else:
        column, why = guess_role(phen_cols, "population", taken={g.columns["id"]})
        if column is None:
            raise UserError(f"could not tell which column of the phenotype table {phenotypes_path} "
                            f"names the population of each record (columns are: "
                            f"{', '.join(phen_cols)}); give it with --population-column COL")
        g.columns["population"] = column
    pops = phenotypes[g.columns["population"]].str.strip()
    g.populations = sorted(set(pops[pops != ""]))
    shown = ", ".join(g.populations[:8]) + (", ..." if len(g.populations) > 8 else "")
    g.notes.append(f"population column: '{g.columns['population']}' ({why}); "
                   f"{len(g.populations)} populations: {shown}")
    if len(g.populations) < 2:
        g.notes.append("caution: fewer than two populations, so there is nothing to compare; "
                       "check the population column")

    # codes for unknown parents: values in the sire/dam columns that are not animals
    ids = set(pedigree[g.columns["id"]].str.strip())
    parent_cells = list(pedigree[g.columns["sire"]].str.strip()) + list(pedigree[g.columns["dam"]].str.strip())
    not_ids = {v for v in parent_cells if v not in ids}
    g.missing = ["0", "NA", ".", ""]  # the schema's default codes
    extra = sorted(v for v in not_ids if v in MISSING_CODES and v not in g.missing)
    g.missing += extra
    listed = ", ".join(repr(c) for c in g.missing)
    g.notes.append(f"unknown-parent codes: {listed}" + (f" (found {', '.join(map(repr, extra))} "
                   "in the parent columns)" if extra else ""))
    others = sorted(v for v in not_ids if v not in g.missing)
    if others:
        g.notes.append(f"{len(others)} parent ids are not animals of the pedigree (e.g. "
                       f"{others[0]!r}); the pedigree stage adds them as founders - if they are "
                       "codes for 'unknown', add them to data.missing_parent")

    sires = set(pedigree[g.columns["sire"]].str.strip()) - set(g.missing)
    dams = set(pedigree[g.columns["dam"]].str.strip()) - set(g.missing)
    both = sires & dams
    if both:
        g.hermaphrodite = True
        g.notes.append(f"{len(both)} animals are both a sire and a dam (e.g. {sorted(both)[0]!r}): "
                       "data.hermaphrodite set to true (plants, hermaphrodites); set it to false "
                       "if that is a data error")

    used = set(g.columns.values())
    if traits:
        for t in traits:
            given(t, phen_cols, "--traits", f"phenotype table {phenotypes_path}")
        g.traits = list(traits)
        g.notes.append(f"traits: {', '.join(g.traits)} (given with --traits)")
    else:
        for column in phen_cols:
            if column in used:
                continue
            share, count = numeric_share(phenotypes[column])
            normal = _normal(column)
            if share >= NUMERIC_SHARE and count >= 2:
                values = {c.strip() for c in phenotypes[column]}
                if NOT_TRAITS.match(normal):
                    # a slope for measurements (age, coordinates), a level per value otherwise
                    # (years, cohorts, blocks: common practice)
                    g.possible_fixed[column] = ("numeric" if NUMERIC_COVARIATES.match(normal)
                                                else "categorical")
                elif all(float(v).is_integer() for v in values if _as_number(v) is not None) and \
                        len(values) == len(phenotypes):
                    g.notes.append(f"column '{column}' skipped: whole numbers all different, "
                                   "probably an identifier")
                else:
                    g.traits.append(column)
            elif count and len(set(phenotypes[column])) <= 20:
                g.possible_fixed[column] = "categorical"  # a text column with few values
        if not g.traits:
            raise UserError(f"found no numeric trait column in the phenotype table {phenotypes_path} "
                            f"(columns are: {', '.join(phen_cols)}); name them with --traits COL ...")
        g.notes.append(f"traits: {', '.join(g.traits)} (numeric columns)")
        if len(g.traits) > 10:
            g.notes.append(f"caution: {len(g.traits)} traits is a lot for one animal model; "
                           "keep 2 to about 10 in 'traits'")
    for t in g.traits:
        share, count = numeric_share(phenotypes[t])
        if share < 1:
            g.notes.append(f"caution: trait '{t}' has {round((1 - share) * count)} cells that are "
                           "not numbers; clean them or they count as missing")
    if g.possible_fixed:
        g.notes.append("possible fixed effects (not added; add them under 'fixed' if they belong "
                       "in the model): " + ", ".join(f"{c} ({k})" for c, k in g.possible_fixed.items()))
    return g


def _yaml_str(value: str) -> str:
    import yaml

    return yaml.safe_dump(value, default_style=None).strip().removesuffix("\n...").strip()


def render(g: Guesses, pedigree_path: str, phenotypes_path: str, out: str = "CONFIG") -> str:
    """The starter config as commented YAML text."""
    q = _yaml_str
    fixed_lines = "".join(f"#   {q(c)}: {k}\n" for c, k in g.possible_fixed.items())
    traits = ", ".join(q(t) for t in g.traits)
    missing = ", ".join(json.dumps(c) for c in g.missing)
    return f"""\
# Starter config written by 'ped2g init'. Check every guess below, then:
#   snakemake -n --configfile {out}        (lists the jobs; nothing runs)
#   snakemake --cores 4 --configfile {out}
# Every key is explained in config/README.md; keys left out take their defaults.
data:
  pedigree: {q(pedigree_path)}
  phenotypes: {q(phenotypes_path)}
  columns:
    id: {q(g.columns['id'])}
    sire: {q(g.columns['sire'])}
    dam: {q(g.columns['dam'])}
    population: {q(g.columns['population'])}
  missing_parent: [{missing}]
  hermaphrodite: {'true' if g.hermaphrodite else 'false'}

# Populations to analyse; [] means all {len(g.populations)} in the phenotype table.
populations: []

# Traits analysed jointly (2 to about 10).
traits: [{traits}]

# Fixed effects: column: categorical | numeric (an intercept per trait is always in).
fixed: {{}}
{fixed_lines}
# Extra random effects, e.g. [{{name: maternal, column: {q(g.columns['dam'])}}}] (the dam
# column must then also be in the phenotype table).
random: []

sampling:
  chains: 4
  warmup: 1000
  draws: 1000
  seed: 1

checks:
  on_failure: stop   # 'flag' marks fits that miss the checks in the report instead of stopping
"""


def run(args: argparse.Namespace) -> int:
    import yaml

    from .config import validate
    from .errors import UserError
    from .io import read_table

    out = Path(args.out)
    if out.exists() and not args.force:
        raise UserError(f"{out} exists; choose another --out or give --force to overwrite it")
    if out.exists() and out.is_dir():
        raise UserError(f"--out {out} is a folder; give the path of a YAML file")
    pedigree = read_table(args.pedigree, what="pedigree table")
    phenotypes = read_table(args.phenotypes, what="phenotype table")
    g = guess(pedigree, phenotypes, id_col=args.id, sire=args.sire, dam=args.dam,
              population=args.population_column, traits=args.traits,
              pedigree_path=args.pedigree, phenotypes_path=args.phenotypes)
    text = render(g, args.pedigree, args.phenotypes, str(out))
    validate(yaml.safe_load(text), source="starter config")  # never write a config that fails
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.with_name(f".{out.name}.tmp-{os.getpid()}")
    tmp.write_text(text, encoding="utf-8")
    os.replace(tmp, out)
    for note in g.notes:
        print(f"ped2g init: {note}", file=sys.stderr)
    print(f"ped2g init: wrote {out}; check the guesses above, then run "
          f"'snakemake -n --configfile {out}'", file=sys.stderr)
    return 0
