# Stage 4: every comparison of G matrices on every posterior draw, observed and null; with the
# refitting null (compare.null_model.kind: refit), every row's calibrated p-value.


rule compare:
    input:
        fits=all_fit_inputs(),
        null=null_outputs(),
        config=ancient(EFFECTIVE_CONFIG),
        settings=settings_file("compare"),
    output:
        draws=f"{RESULTS}/compare/draws.nc",
    params:
        fits=lambda wildcards, input: fit_folders(input.fits),
        out=lambda wildcards, output: folder_of(output.draws),
        null=lambda wildcards, input: null_options(input.null),
    log:
        f"{LOGS}/compare/compare.log",
    conda:
        "../../envs/ped2g.yaml"
    threads: 1
    resources:
        mem_mb=2000,
        runtime=60,
    shell:
        stage_shell(
            "compare --config {input.config:q} --fits {params.fits:q} "
            "{params.null} --out {params.out:q}"
        )
