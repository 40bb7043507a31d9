# Stage 1: clean the raw pedigree once for the whole study (every population's fit prunes it).


def pedigree_options():
    """Command-line options of `ped2g pedigree` from the config's data section."""
    data = CFG["data"]
    columns = data["columns"]
    words = ["--id", columns["id"], "--sire", columns["sire"], "--dam", columns["dam"]]
    codes = [c for c in data["missing_parent"] if c != ""]  # a blank cell always means unknown
    for code in codes:
        if "," in code:
            fail(f"{SOURCE}: key 'data.missing_parent': the code {code!r} contains a comma; "
                 "codes for an unknown parent cannot contain commas")
    words += ["--missing", ",".join(codes)]
    if data["hermaphrodite"]:
        words.append("--hermaphrodite")
    return " ".join(shlex.quote(w) for w in words)


rule pedigree:
    input:
        raw=CFG["data"]["pedigree"],
        settings=settings_file("pedigree"),
    output:
        pedigree=f"{RESULTS}/pedigree/pedigree.csv",
        ainverse=f"{RESULTS}/pedigree/ainverse.mtx",
        changes=f"{RESULTS}/pedigree/changes.csv",
        summary=f"{RESULTS}/pedigree/summary.json",
    params:
        out=f"{RESULTS}/pedigree",
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
