# Validity over c, the chosen c, and the consensus of the aligned starts for that c: one job
# per run that reads the scan files once.


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
        consensus=run_path("{run}", "consensus.npz"),
    params:
        settings=get_selection_settings,
    log:
        "logs/{run}/select.log",
    benchmark:
        "benchmarks/{run}/select.tsv"
    threads: get_threads("select", 1)
    resources:
        mem_mb=select_mem_mb,
        runtime=runtime_for("select", 5, 0.05),
    conda:
        "../envs/gloam.yaml"
    script:
        "../../scripts/rule_select.py"
