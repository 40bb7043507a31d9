# Stage 4: every comparison of G matrices on every posterior draw, observed and null.


rule compare:
    input:
        fits=all_fit_inputs(),
        null=rules.null.output.null,
        config=ancient(EFFECTIVE_CONFIG),
        settings=settings_file("compare"),
    output:
        draws=f"{RESULTS}/compare/draws.nc",
    params:
        fits=lambda wildcards, input: fit_folders(input.fits),
        out=lambda wildcards, output: folder_of(output.draws),
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
            "--null {input.null:q} --out {params.out:q}"
        )
