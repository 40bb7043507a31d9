# Helpers shared by the rule files. Everything here runs when Snakemake reads the workflow,
# before any job: a mistake in the config or the input tables ends the run here with one line.
#
# How the pieces fit:
#
# * The config is validated and default-filled by ped2g.config.validate (the schema in
#   workflow/ped2g/schemas/config.schema.yaml), then the input tables are checked (files exist,
#   named columns exist) and the populations are read from the phenotype table.
# * The effective config (every default filled in, populations resolved to an explicit list) is
#   written to results/config/effective.yaml; every stage command reads that one file, so
#   Snakemake's --config overrides reach the stages.
# * Each stage also gets results/config/<stage>.yaml, the part of the config that stage depends
#   on. It is an input of the stage's rule and is rewritten only when its content changes, so
#   Snakemake's ordinary modification-time rule reruns exactly the stages whose settings
#   changed (a new number of skewers reruns the comparisons and the report, not the fits).
#   effective.yaml itself is marked ancient() so that it never triggers a rerun on its own.

import os
import re
import shlex
import sys
from pathlib import Path

import yaml
from snakemake.settings.types import DeploymentMethod
from snakemake.utils import update_config

ROOT = Path(workflow.main_snakefile).resolve().parent
PACKAGE_DIR = ROOT / "workflow"
if str(PACKAGE_DIR) not in sys.path:
    sys.path.insert(0, str(PACKAGE_DIR))

from ped2g.errors import UserError  # noqa: E402
from ped2g.io import read_table  # noqa: E402
import ped2g.config  # noqa: E402

RESULTS = "results"
LOGS = "logs"
CONFIG_DIR = f"{RESULTS}/config"
EFFECTIVE_CONFIG = f"{CONFIG_DIR}/effective.yaml"


def fail(message):
    """End the workflow with one line on standard error and exit status 2 (a user mistake)."""
    print(f"ped2g workflow: error: {' '.join(str(message).split())}", file=sys.stderr)
    sys.exit(2)


# --------------------------------------------------------------------------------------------
# The config
# --------------------------------------------------------------------------------------------


def coerce(value, node):
    """Give --config override values the types the schema asks for.

    Snakemake reads a nested --config value such as ``compare={skewers: 60}`` with every scalar
    as a string. Where the schema wants a number, a boolean or null, a string that reads as one
    in YAML is converted; everything else is left as it is (and validation names it if wrong).
    """
    if isinstance(value, dict):
        props = node.get("properties", {})
        extra = node.get("additionalProperties")
        return {k: coerce(v, props.get(k, extra if isinstance(extra, dict) else {}))
                for k, v in value.items()}
    if isinstance(value, list):
        return [coerce(v, node.get("items", {})) for v in value]
    if not isinstance(value, str):
        return value
    branches = node.get("oneOf", [node])
    wanted = {b.get("type") for b in branches}
    try:
        parsed = yaml.safe_load(value)
    except yaml.YAMLError:
        return value
    kinds = {"integer": int, "number": (int, float), "boolean": bool, "null": type(None)}
    for kind, types in kinds.items():
        if kind in wanted and isinstance(parsed, types) and not (
                kind != "boolean" and isinstance(parsed, bool)):
            return parsed
    return value


def user_config():
    """The config the user meant, and a name for it in messages.

    Snakemake merges a --configfile into the demo config named by `configfile:` in the
    Snakefile. A study's config must not inherit the demo's keys (its fixed effects, its
    traits), so when --configfile is given the demo config is dropped and only the given
    file(s) and --config overrides count.

    Each file is read again with ped2g's own strict reader (ped2g.config.read_config_file), not
    taken from Snakemake's merged config: Snakemake keeps the last of two equal keys without a
    word, and evaluates a file with a top-level `__use_yte__` key as a template; the strict
    reader refuses both in one line. (Snakemake has by then already read the files; the README's
    security note says what that means.)
    """
    settings = workflow.config_settings
    files = list(settings.configfiles) or [Path(p) for p in workflow.configfiles[:1]]
    merged = {}
    for path in files:
        try:
            loaded = ped2g.config.read_config_file(os.path.relpath(path))
        except UserError as err:
            fail(err)
        update_config(merged, loaded)
    if settings.config:
        update_config(merged, coerce(dict(settings.config), ped2g.config.schema()))
    names = ", ".join(os.path.relpath(p) for p in files) or "(none)"
    overrides = " with --config overrides" if settings.config else ""
    return merged, f"config {names}{overrides}"


def check_tables(cfg, source):
    """Check that the input tables exist and hold every column the config names.

    Returns the phenotype table (every cell a string).
    """
    data = cfg["data"]
    columns = data["columns"]
    for key in ("pedigree", "phenotypes"):
        path = Path(data[key])
        if not path.is_file():
            what = "is a folder" if path.is_dir() else "does not exist"
            raise UserError(
                f"{source}: key 'data.{key}': file {data[key]} {what} (paths are relative to "
                f"the folder snakemake runs in: {os.getcwd()})")
    pedigree = read_table(data["pedigree"], what="pedigree table (key 'data.pedigree')")
    for role in ("id", "sire", "dam"):
        if columns[role] not in pedigree.columns:
            raise UserError(
                f"pedigree table {data['pedigree']} has no column '{columns[role]}' named by key "
                f"'data.columns.{role}' (columns are: {', '.join(pedigree.columns)})")
    phenotypes = read_table(data["phenotypes"], what="phenotype table (key 'data.phenotypes')")
    have = ", ".join(phenotypes.columns)
    for role in ("id", "population"):
        if columns[role] not in phenotypes.columns:
            raise UserError(
                f"phenotype table {data['phenotypes']} has no column '{columns[role]}' named by "
                f"key 'data.columns.{role}' (columns are: {have})")
    for trait in cfg["traits"]:
        if trait not in phenotypes.columns:
            raise UserError(
                f"{source}: key 'traits': '{trait}' is not a column of the phenotype table "
                f"{data['phenotypes']} (columns are: {have})")
    for column in cfg["fixed"]:
        if column not in phenotypes.columns:
            raise UserError(
                f"{source}: key 'fixed': '{column}' is not a column of the phenotype table "
                f"{data['phenotypes']} (columns are: {have})")
    for i, effect in enumerate(cfg["random"]):
        if effect["column"] not in phenotypes.columns:
            raise UserError(
                f"{source}: key 'random[{i}].column': '{effect['column']}' is not a column of "
                f"the phenotype table {data['phenotypes']} (columns are: {have})")
    return phenotypes


def resolve_populations(cfg, phenotypes, source):
    """The populations to analyse, in a fixed order.

    All populations in the phenotype table (sorted by name) when the `populations` key is
    empty, else the listed ones in the listed order, each checked against the table.
    """
    column = cfg["data"]["columns"]["population"]
    values = phenotypes[column].str.strip()
    found = sorted(set(values[values != ""]))
    wanted = list(cfg["populations"]) or found
    for name in wanted:
        if name not in found:
            raise UserError(
                f"{source}: key 'populations': '{name}' does not occur in column '{column}' of "
                f"{cfg['data']['phenotypes']} (populations there: {', '.join(found)})")
        if "/" in name or "\\" in name or name.startswith(".") or not name.isprintable():
            raise UserError(
                f"population name {name!r} in column '{column}' of {cfg['data']['phenotypes']} "
                "cannot name a folder (no '/', '\\', leading '.' or control characters); "
                "rename it in the table")
    if len(wanted) < 2:
        raise UserError(
            f"{source}: comparing G matrices needs at least two populations, found "
            f"{len(wanted)} ({', '.join(wanted) or 'none'}) in column '{column}' of "
            f"{cfg['data']['phenotypes']}; check key 'populations' and key 'data.columns.population'")
    return wanted


def write_if_changed(path, content):
    """Write text to path only when it differs, so an unchanged file keeps its time stamp."""
    path = Path(path)
    if path.is_file() and path.read_text(encoding="utf-8") == content:
        return
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    tmp.write_text(content, encoding="utf-8")
    os.replace(tmp, path)


def canonical(data, node=None):
    """``data`` with its keys in schema order (other keys sorted), recursively.

    The settings files must not change when only the order of keys in the user's file does,
    or an edit that changes nothing would rerun stages.
    """
    node = ped2g.config.schema() if node is None else node
    if not isinstance(data, dict):
        return data
    known = list(node.get("properties", {}))
    keys = [k for k in known if k in data] + sorted(k for k in data if k not in known)
    return {k: canonical(data[k], node.get("properties", {}).get(k, {})) for k in keys}


def dump_yaml(data):
    return yaml.safe_dump(canonical(data), sort_keys=False, default_flow_style=False,
                          allow_unicode=True)


# The config keys each stage depends on (dotted paths; a section name takes the whole section).
# A change to one of these reruns the stage and everything downstream of it.
STAGE_KEYS = {
    "pedigree": [
        "data.pedigree",
        "data.columns.id",
        "data.columns.sire",
        "data.columns.dam",
        "data.missing_parent",
        "data.hermaphrodite",
    ],
    "fit": ["data", "traits", "fixed", "random", "model", "sampling", "checks"],
    "null": ["traits", "sampling.seed", "compare.null_model", "compare.max_draws"],
    "null_pilot": ["data", "traits", "fixed", "random", "model", "sampling.seed",
                   "sampling.target_accept", "compare.null_model.pilot_replicates", "compare.null_model.refit"],
    "null_refit": ["data", "traits", "fixed", "random", "model", "sampling.seed",
                   "sampling.target_accept", "compare.null_model.replicates",
                   "compare.null_model.pilot_replicates", "compare.null_model.refit"],
    "compare": ["traits", "sampling.seed", "compare", "checks.max_rhat"],
    "report": None,  # the whole config: the report shows all of it
}


def stage_settings(cfg, stage):
    """The part of the effective config that `stage` depends on, as a nested dict."""
    keys = STAGE_KEYS[stage]
    if keys is None:
        return cfg
    out = {}
    for dotted in keys:
        node, target = cfg, out
        parts = dotted.split(".")
        for part in parts[:-1]:
            node = node[part]
            target = target.setdefault(part, {})
        target[parts[-1]] = node[parts[-1]]
    return out


def settings_file(stage):
    """Path of the per-stage settings file (an input of the stage's rule)."""
    return f"{CONFIG_DIR}/{stage}.yaml"


def prepare():
    """Validate the config and the tables, write results/config/*.yaml; return (config, name)."""
    raw, source = user_config()
    try:
        cfg = ped2g.config.validate(raw, source=source)
        phenotypes = check_tables(cfg, source)
        populations = resolve_populations(cfg, phenotypes, source)
    except UserError as err:
        fail(err)
    cfg["populations"] = populations
    column = cfg["data"]["columns"]["population"]
    RECORDS.update(phenotypes[column].str.strip().value_counts().reindex(populations).fillna(0).astype(int))
    header = (
        "# Written by the workflow from the config: every default filled in and the populations\n"
        "# listed. The stage commands read this file. Do not edit it; edit your config instead.\n"
    )
    write_if_changed(EFFECTIVE_CONFIG, header + dump_yaml(cfg))
    for stage in STAGE_KEYS:
        note = f"# The settings the {stage} stage depends on (a change reruns it). Do not edit.\n"
        write_if_changed(settings_file(stage), note + dump_yaml(stage_settings(cfg, stage)))
    return cfg, source


RECORDS = {}  # phenotype rows per population (filled by prepare; sizes the fit jobs' memory)
CFG, SOURCE = prepare()
POPULATIONS = CFG["populations"]

wildcard_constraints:
    population="|".join(re.escape(p) for p in POPULATIONS),


# --------------------------------------------------------------------------------------------
# Running the stage commands
# --------------------------------------------------------------------------------------------


def _python():
    """The Python that runs the stage commands.

    With --software-deployment-method conda the job runs in the environment of envs/ped2g.yaml,
    where `python` is that environment's; otherwise the Python running Snakemake (which has
    ped2g's dependencies, as the quick start installs them together).
    """
    if DeploymentMethod.CONDA in workflow.deployment_settings.deployment_method:
        return "python"
    return sys.executable


# The package is run from this checkout (PYTHONPATH), so the code that ran is the code here
# even when ped2g is not installed.
# (Braces are doubled because Snakemake formats shell text.)
PED2G = (f"PYTHONPATH={shlex.quote(str(PACKAGE_DIR))}" + "${{PYTHONPATH:+:$PYTHONPATH}}"
         + f" {shlex.quote(_python())} -m ped2g.cli")


def stage_shell(command, on_failure=""):
    """Shell text running `ped2g <command>` with all its output in {log}.

    On failure the last lines of the log (the stage's one-line error) are also shown on the
    terminal, the shell text ``on_failure`` runs, and the stage's exit status is kept, so
    Snakemake reports the failed job.
    """
    return (
        f"{PED2G} {command} > {{log:q}} 2>&1 "
        "|| {{ status=$?; echo 'ped2g workflow: the last lines of {log}:' >&2; "
        "tail -n 5 {log:q} >&2; " + on_failure + " exit $status; }}"
    )


def fit_dir(population):
    return f"{RESULTS}/fits/{population}"


def fit_outputs(population):
    folder = fit_dir(population)
    return [f"{folder}/{name}" for name in
            ("posterior.nc", "parameters.csv", "diagnostics.json", "pedigree_used.csv")]


def all_fit_inputs():
    return [path for p in POPULATIONS for path in fit_outputs(p)]


# --------------------------------------------------------------------------------------------
# The null: refitted replicates (the default) or breeding values simulated down the pedigrees
# --------------------------------------------------------------------------------------------

NULL_KIND = CFG["compare"]["null_model"]["kind"]


def refit_replicates():
    """Replicates of the refitting null: the config's number, or the fewest the reading rule needs."""
    from ped2g.compare.calibrated import planned_replicates

    try:
        return planned_replicates(len(POPULATIONS), len(CFG["traits"]), float(CFG["compare"]["alpha"]),
                                  CFG["compare"]["null_model"]["replicates"])
    except UserError as err:
        fail(f"{SOURCE}: {err}")


def refit_chunks():
    """(first replicate, count) of every job of one population."""
    total = refit_replicates()
    size = int(CFG["compare"]["null_model"]["replicates_per_job"])
    return [(first, min(size, total - first)) for first in range(0, total, size)]


def refit_file(population, chunk):
    return f"{RESULTS}/null/refits/{population}/replicates_{chunk}.nc"


# One compile cache for the fits and refits of a run (node-local tmpdir): the populations' models
# share their structure, so every job after the first loads the compiled code instead of compiling
# again (demo: 39.5 s for the first fit, 17.5 s for the next). PyTensor locks its cache directory,
# so parallel jobs can share it.
COMPILE_CACHE = (
    "cache={resources.tmpdir:q}/ped2g-compile-cache; mkdir -p \"$cache\"; "
    "export PYTENSOR_FLAGS=\"${{PYTENSOR_FLAGS:+$PYTENSOR_FLAGS,}}base_compiledir=$cache/pytensor\"; "
    "export NUMBA_CACHE_DIR=\"$cache/numba\"; "
)


def pilot_file(population):
    return f"{RESULTS}/null/pilot/{population}.nc"


def pilot_inputs():
    """Every population's pilot refits (none when compare.null_model.pilot_replicates is 0)."""
    if int(CFG["compare"]["null_model"]["pilot_replicates"]) == 0:
        return []
    return [pilot_file(p) for p in POPULATIONS]


def pilots_option(paths):
    return f"--pilots {' '.join(shlex.quote(str(p)) for p in paths)}" if paths else ""


def refit_outputs():
    return [refit_file(p, c) for p in POPULATIONS for c in range(len(refit_chunks()))]


def null_outputs():
    """What the compare stage reads as its null."""
    if NULL_KIND == "refit":
        return refit_outputs()
    return [f"{RESULTS}/null/null_G.nc", f"{RESULTS}/null/summary.json"]


def null_options(null_files):
    """The compare stage's options naming its null."""
    if NULL_KIND == "refit":
        return "--refits " + " ".join(shlex.quote(str(f)) for f in null_files)
    return "--null " + shlex.quote(str(null_files[0]))


def report_outputs():
    return [f"{RESULTS}/report/report.html"]


def pedigree_options():
    """Command-line options of `ped2g pedigree` from the config's data section."""
    data = CFG["data"]
    columns = data["columns"]
    words = ["--id", columns["id"], "--sire", columns["sire"], "--dam", columns["dam"]]
    codes = [c for c in data["missing_parent"] if c != ""]  # a blank cell always means unknown
    for code in codes:
        if "," in code:
            fail(f"{SOURCE}: key 'data.missing_parent': the code {code!r} contains a comma; "
                 "codes for an unknown parent cannot contain commas")
    words += ["--missing", ",".join(codes)]
    if data["hermaphrodite"]:
        words.append("--hermaphrodite")
    return " ".join(shlex.quote(w) for w in words)


#: A fit asks for at least this much memory (MB); the latent engine stays well within it.
FIT_BASE_MEM_MB = 4000
#: ...and for what the marginal engine's eigendecomposition needs, up to this much (MB). Above
#: it (about 40,000 records) the fit job keeps the base request and the fit uses the latent engine.
FIT_MARGINAL_MEM_MB = 64000


def fit_mem_mb(wildcards, attempt):
    """Memory of a fit in MB, doubled on each retry (see profiles/slurm/config.yaml).

    Enough for the marginal engine on this population's records (ped2g.fit.marginal.memory_needed,
    over the share of a job's memory that engine plans to fill), since the fit picks its engine
    by the memory its job has.
    """
    from ped2g.fit import marginal

    need = marginal.memory_needed(RECORDS.get(wildcards.population, 0)) / marginal.MEMORY_SHARE / 1e6
    base = max(FIT_BASE_MEM_MB, int(need) + 1) if need <= FIT_MARGINAL_MEM_MB else FIT_BASE_MEM_MB
    return base * 2 ** (attempt - 1)


def fit_runtime(wildcards, attempt):
    """Wall time of a fit in minutes: 4 hours, doubled on each retry."""
    return 240 * 2 ** (attempt - 1)


def folder_of(path):
    """The folder a stage writes into, from one of its declared files."""
    return os.path.dirname(str(path))


def fit_folders(fit_files):
    """The fit folders, one per population in order, from the fits' declared files."""
    return list(dict.fromkeys(folder_of(f) for f in fit_files))
