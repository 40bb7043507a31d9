# Stage 5: one report from everything above.


rule report:
    input:
        pedigree=rules.pedigree.output,
        fits=all_fit_inputs(),
        null=rules.null.output,
        compare=rules.compare.output,
        config=ancient(EFFECTIVE_CONFIG),
        settings=settings_file("report"),
    output:
        html=f"{RESULTS}/report/report.html",
    params:
        results=RESULTS,
        out=f"{RESULTS}/report",
    log:
        f"{LOGS}/report/report.log",
    conda:
        "../../envs/ped2g.yaml"
    threads: 1
    resources:
        mem_mb=2000,
        runtime=30,
    shell:
        stage_shell(
            "report --config {input.config:q} --results {params.results:q} --out {params.out:q}"
        )
