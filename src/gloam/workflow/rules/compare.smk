# Conditions compared: shared responses, transitions and changed genes. One job per run. The
# scan jobs cluster the changing gene-condition profiles at their c as well (the preparation
# puts them into scan_input.npz) and the structure job tests them, so this job reads those
# files, judges c and writes. A run with one condition (or no replicates) gets
# comparison/selection.json alone, saying why nothing was compared.


rule compare:
    wildcard_constraints:
        run=PLAN.owner_pattern("compare"),
    input:
        prepared=run_path("{run}", "prepared/prepared.h5ad"),
        gene_report=run_path("{run}", "prepared/gene_report.tsv"),
        scans=get_scan_files,
        structure=run_path("{run}", "structure.json"),
    output:
        comparison=report(
            directory(run_path("{run}", "comparison")),
            patterns=["transitions.png"],
            caption="../report/transitions.rst",
            category="{run}",
            subcategory="6 conditions compared",
        ),
    params:
        settings=get_comparison_settings,
        seed=SETTINGS["seed"],
    log:
        "logs/{run}/compare.log",
    benchmark:
        "benchmarks/{run}/compare.tsv"
    threads: PLAN.threads("compare")
    resources:
        mem_mb=resource("compare", "mem_mb"),
        runtime=resource("compare", "runtime"),
    conda:
        "../envs/gloam.yaml"
    script:
        "../scripts/rule_compare.py"
