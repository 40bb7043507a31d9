# Stage 1: clean the raw pedigree once for the whole study (every population's fit prunes it).


rule pedigree:
    input:
        raw=CFG["data"]["pedigree"],
        settings=settings_file("pedigree"),
    output:
        pedigree=f"{RESULTS}/pedigree/pedigree.csv",
        relationship_inverse=f"{RESULTS}/pedigree/relationship_inverse.mtx",
        changes=f"{RESULTS}/pedigree/changes.csv",
        summary=f"{RESULTS}/pedigree/summary.json",
    params:
        out=lambda wildcards, output: folder_of(output.pedigree),
        options=pedigree_options(),
    log:
        f"{LOGS}/pedigree/pedigree.log",
    conda:
        "../../envs/ped2g.yaml"
    threads: 1
    resources:
        mem_mb=2000,
        runtime=30,
    shell:
        stage_shell("pedigree {input.raw:q} --out {params.out:q} {params.options}")
