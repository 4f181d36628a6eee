# The structure tests need only the scan input, so they run in a job of their own beside the
# scans (rule structure); the selection then judges every scanned c, chooses c and writes the
# consensus for that c: one job per run that reads the scan files once.


rule structure:
    input:
        scan_input=run_path("{run}", "prepared/scan_input.npz"),
    output:
        structure=run_path("{run}", "structure.json"),
    params:
        settings=get_selection_settings,
        seed=SETTINGS["seed"],
    log:
        "logs/{run}/structure.log",
    benchmark:
        "benchmarks/{run}/structure.tsv"
    priority: STRUCTURE_PRIORITY
    threads: PLAN.threads("structure")
    resources:
        mem_mb=resource("structure", "mem_mb"),
        runtime=resource("structure", "runtime"),
    conda:
        "../envs/gloam.yaml"
    script:
        "../scripts/rule_structure.py"


rule select:
    input:
        scan_input=run_path("{run}", "prepared/scan_input.npz"),
        fuzzifier=run_path("{run}", "fuzzifier.json"),
        structure=run_path("{run}", "structure.json"),
        scans=get_scan_files,
    output:
        validity=report(
            run_path("{run}", "validity.tsv"),
            caption="../report/validity_table.rst",
            category="{run}",
            subcategory="3 number of clusters",
        ),
        selection=report(
            run_path("{run}", "selection.json"),
            caption="../report/selection.rst",
            category="{run}",
            subcategory="3 number of clusters",
        ),
        consensus=run_path("{run}", "consensus.npz"),
    params:
        settings=get_selection_settings,
        seed=SETTINGS["seed"],
    log:
        "logs/{run}/select.log",
    benchmark:
        "benchmarks/{run}/select.tsv"
    threads: PLAN.threads("select")
    resources:
        mem_mb=resource("select", "mem_mb"),
        runtime=resource("select", "runtime"),
    conda:
        "../envs/gloam.yaml"
    script:
        "../scripts/rule_select.py"
