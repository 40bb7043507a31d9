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


# Stage 3 (default): the refitting null. First a few pilot refits per population under the mean
# of the fits' G measure how far the fit pulls G toward the prior (compare.null_model.
# pilot_replicates; 0 skips them); then each job simulates and refits a chunk of replicates of
# one population's design under the corrected shared G, so a workstation runs chunks on every
# core and a cluster spreads them. Like a fit, a job shares the run's compile cache and asks for
# the memory of its population's eigendecomposition.

rule null_pilot:
    input:
        fits=all_fit_inputs(),
        pedigree=rules.pedigree.output.pedigree,
        phenotypes=CFG["data"]["phenotypes"],
        config=ancient(EFFECTIVE_CONFIG),
        settings=settings_file("null_pilot"),
    output:
        f"{RESULTS}/null/pilot/{{population}}.nc",
    params:
        fits=lambda wildcards, input: fit_folders(input.fits),
        pedigree_dir=lambda wildcards, input: folder_of(input.pedigree),
    log:
        f"{LOGS}/null/pilot_{{population}}.log",
    conda:
        "../../envs/ped2g.yaml"
    threads: CFG["compare"]["null_model"]["refit"]["chains"]
    resources:
        mem_mb=fit_mem_mb,
        runtime=fit_runtime,
    shell:
        COMPILE_CACHE
        + stage_shell(
            "null-refit --pilot --config {input.config:q} --fits {params.fits:q} "
            "--population {wildcards.population:q} --pedigree {params.pedigree_dir:q} --out {output:q}"
        )


rule null_refit:
    input:
        fits=all_fit_inputs(),
        pedigree=rules.pedigree.output.pedigree,
        phenotypes=CFG["data"]["phenotypes"],
        config=ancient(EFFECTIVE_CONFIG),
        settings=settings_file("null_refit"),
        pilots=pilot_inputs(),
    output:
        f"{RESULTS}/null/refits/{{population}}/replicates_{{chunk}}.nc",
    params:
        fits=lambda wildcards, input: fit_folders(input.fits),
        pilots=lambda wildcards, input: pilots_option(input.pilots),
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
        COMPILE_CACHE
        + stage_shell(
            "null-refit --config {input.config:q} --fits {params.fits:q} "
            "--population {wildcards.population:q} --pedigree {params.pedigree_dir:q} "
            "--first {params.first} --count {params.n} {params.pilots} --out {output:q}"
        )
