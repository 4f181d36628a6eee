# Validity over c, the chosen c, and the consensus of the aligned starts for that c.


rule select:
    input:
        prepared=run_path("{run}", "prepared/prepared.h5ad"),
        scans=get_scan_files,
    output:
        validity=report(
            run_path("{run}", "validity.tsv"),
            caption="../report/validity_table.rst",
            category="{run}",
            subcategory="3 number of clusters",
        ),
        selection=run_path("{run}", "selection.json"),
    params:
        settings=lambda wildcards: get_run(wildcards)["selection"],
    log:
        "logs/{run}/select.log",
    benchmark:
        "benchmarks/{run}/select.tsv"
    threads: get_threads("select", 1)
    resources:
        mem_mb=mem_mb_for("select", 500, 2),
        runtime=runtime_for("select", 5, 0.05),
    conda:
        "../envs/gloam.yaml"
    script:
        "../../scripts/rule_select.py"


rule consensus:
    input:
        prepared=run_path("{run}", "prepared/prepared.h5ad"),
        scans=get_scan_files,
        selection=run_path("{run}", "selection.json"),
    output:
        consensus=run_path("{run}", "consensus.npz"),
    log:
        "logs/{run}/consensus.log",
    benchmark:
        "benchmarks/{run}/consensus.tsv"
    threads: get_threads("consensus", 1)
    resources:
        mem_mb=mem_mb_for("consensus", 500, 2),
        runtime=runtime_for("consensus", 5, 0.05),
    conda:
        "../envs/gloam.yaml"
    script:
        "../../scripts/rule_consensus.py"
