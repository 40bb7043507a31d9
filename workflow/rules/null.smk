# Stage 3: the randomisation null, from every population's fit at once.


rule null:
    input:
        fits=all_fit_inputs(),
        config=ancient(EFFECTIVE_CONFIG),
        settings=settings_file("null"),
    output:
        null=f"{RESULTS}/null/null_G.nc",
        summary=f"{RESULTS}/null/summary.json",
    params:
        fits=lambda wildcards, input: fit_folders(input.fits),
        out=lambda wildcards, output: folder_of(output.null),
    log:
        f"{LOGS}/null/null.log",
    conda:
        "../../envs/ped2g.yaml"
    threads: 1
    resources:
        mem_mb=2000,
        runtime=60,
    shell:
        stage_shell("null --config {input.config:q} --fits {params.fits:q} --out {params.out:q}")


# Stage 3 (default): the refitting null. Each job simulates and refits a chunk of replicates of
# one population's design under the shared G (compare.null_model), so a workstation runs
# chunks on every core and a cluster spreads them. Like a fit, a job shares the run's compile
# cache and asks for the memory of its population's eigendecomposition.


rule null_refit:
    input:
        fits=all_fit_inputs(),
        pedigree=rules.pedigree.output.pedigree,
        phenotypes=CFG["data"]["phenotypes"],
        config=ancient(EFFECTIVE_CONFIG),
        settings=settings_file("null_refit"),
    output:
        f"{RESULTS}/null/refits/{{population}}/replicates_{{chunk}}.nc",
    params:
        fits=lambda wildcards, input: fit_folders(input.fits),
        pedigree_dir=lambda wildcards, input: folder_of(input.pedigree),
        first=lambda wildcards: refit_chunks()[int(wildcards.chunk)][0],
        n=lambda wildcards: refit_chunks()[int(wildcards.chunk)][1],
    wildcard_constraints:
        chunk=r"\d+",
    log:
        f"{LOGS}/null/refit_{{population}}_{{chunk}}.log",
    conda:
        "../../envs/ped2g.yaml"
    threads: CFG["compare"]["null_model"]["refit"]["chains"]
    resources:
        mem_mb=fit_mem_mb,
        runtime=fit_runtime,
    shell:
        "cache={resources.tmpdir:q}/ped2g-compile-cache; mkdir -p \"$cache\"; "
        "export PYTENSOR_FLAGS=\"${{PYTENSOR_FLAGS:+$PYTENSOR_FLAGS,}}base_compiledir=$cache/pytensor\"; "
        "export NUMBA_CACHE_DIR=\"$cache/numba\"; "
        + stage_shell(
            "null-refit --config {input.config:q} --fits {params.fits:q} "
            "--population {wildcards.population:q} --pedigree {params.pedigree_dir:q} "
            "--first {params.first} --count {params.n} --out {output:q}"
        )
