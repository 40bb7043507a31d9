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
