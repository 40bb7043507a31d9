# Stage 2: one Bayesian multivariate animal model per population (the expensive step).
#
# A fit runs one chain per thread. PyTensor and numba compile code into cache folders, kept in
# the job's temporary directory (resources.tmpdir, node-local on most clusters, so a compile
# cache is never shared over a network file system) and shared by the fits that run there.
# A fit's memory request covers the marginal engine's eigendecomposition for its population's
# records (fit_mem_mb in common.smk), since the fit picks its engine by the memory it has.


rule fit:
    input:
        pedigree=rules.pedigree.output.pedigree,
        phenotypes=CFG["data"]["phenotypes"],
        config=ancient(EFFECTIVE_CONFIG),
        settings=settings_file("fit"),
    output:
        posterior=f"{RESULTS}/fits/{{population}}/posterior.nc",
        parameters=f"{RESULTS}/fits/{{population}}/parameters.csv",
        diagnostics=f"{RESULTS}/fits/{{population}}/diagnostics.json",
        pedigree_used=f"{RESULTS}/fits/{{population}}/pedigree_used.csv",
    params:
        out=lambda wildcards, output: folder_of(output.posterior),
        pedigree_dir=lambda wildcards, input: folder_of(input.pedigree),
        kept=f"{LOGS}/fit/{{population}}.failed",
    log:
        f"{LOGS}/fit/{{population}}.log",
    benchmark:
        f"{LOGS}/fit/{{population}}.benchmark.tsv"
    conda:
        "../../envs/ped2g.yaml"
    threads: CFG["sampling"]["chains"]
    resources:
        mem_mb=fit_mem_mb,
        runtime=fit_runtime,
    shell:
        "rm -rf {params.kept:q}; "
        + COMPILE_CACHE
        + stage_shell(
            "fit --config {input.config:q} --population {wildcards.population:q} "
            "--pedigree {params.pedigree_dir:q} --out {params.out:q}",
            # A fit that misses the checks (checks.on_failure: stop) writes its diagnostics
            # and parameter table, but Snakemake deletes the outputs of a failed job: keep a
            # copy beside the log so the user can see what missed.
            on_failure=(
                "if [ -f {output.diagnostics:q} ]; then mkdir -p {params.kept:q} && "
                "cp {output.diagnostics:q} {output.parameters:q} {params.kept:q}/ && "
                "echo 'ped2g workflow: the failed fit diagnostics are kept in {params.kept}' >&2; fi;"
            ),
        )
