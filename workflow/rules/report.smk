# Stage 5: one report from everything above. Its files are also registered for Snakemake's own
# report (`snakemake --report report.zip`), with the captions in workflow/report/.


rule report:
    input:
        pedigree=rules.pedigree.output,
        fits=all_fit_inputs(),
        null=null_outputs(),
        compare=rules.compare.output,
        config=ancient(EFFECTIVE_CONFIG),
        settings=settings_file("report"),
    output:
        html=report(
            f"{RESULTS}/report/report.html",
            caption="../report/report_html.rst",
            category="Report",
        ),
        methods=report(
            f"{RESULTS}/report/methods.txt",
            caption="../report/methods.rst",
            category="Report",
        ),
        provenance=report(
            f"{RESULTS}/report/provenance.json",
            caption="../report/provenance.rst",
            category="Report",
        ),
        figures=report(
            directory(f"{RESULTS}/report/figures"),
            patterns=["{name}.png"],
            caption="../report/figures.rst",
            category="Figures",
        ),
        tables=report(
            directory(f"{RESULTS}/report/tables"),
            patterns=["{name}.csv"],
            caption="../report/tables.rst",
            category="Tables",
        ),
    params:
        results=lambda wildcards, input: folder_of(folder_of(input.compare[0])),
        out=lambda wildcards, output: folder_of(output.html),
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
