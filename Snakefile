# ped2g: from a raw pedigree and phenotype table to posterior comparisons of G matrices.
#
#   snakemake --cores 2                              # the demo study (config/config.yaml)
#   snakemake --cores 8 --configfile my_study.yaml   # your own study (see config/README.md)
#
# This file only wires the stages; each stage is a `ped2g <stage>` command that runs on its own.
# How the workflow is put together is explained in workflow/rules/common.smk.

from snakemake.utils import min_version

min_version("9.27")


configfile: "config/config.yaml"


report: "workflow/report/workflow.rst"


# Validates the config against workflow/ped2g/schemas/config.schema.yaml, checks that the input
# tables and their columns exist, reads the populations from the phenotype table and writes
# the effective config and per-stage settings under results/config/. Any mistake ends here,
# before a job runs, with one line naming the key or file.
include: "workflow/rules/common.smk"
include: "workflow/rules/pedigree.smk"
include: "workflow/rules/fit.smk"
include: "workflow/rules/null.smk"
include: "workflow/rules/compare.smk"
include: "workflow/rules/report.smk"


localrules:
    all,
    pedigree,
    null,
    compare,
    report,


rule all:
    input:
        report_outputs(),
