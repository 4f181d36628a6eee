# Demo data (generated only when a dataset points at it and it is missing) and preparation.


rule demo_data:
    output:
        counts=f"{DEMO_DIR}/counts.tsv",
        samples=f"{DEMO_DIR}/samples.tsv",
        truth=f"{DEMO_DIR}/truth.tsv",
    params:
        seed=config["demo"]["seed"],
        n_genes=config["demo"]["n_genes"],
        n_replicates=config["demo"]["n_replicates"],
    log:
        "logs/demo_data.log",
    threads: get_threads("demo_data", 1)
    resources:
        mem_mb=lambda wildcards, attempt: attempt * (_override("demo_data", "mem_mb") or 1000),
        runtime=lambda wildcards, attempt: attempt * (_override("demo_data", "runtime") or 10),
    conda:
        "../envs/gloam.yaml"
    script:
        "../../scripts/rule_demo_data.py"


rule prepare:
    input:
        unpack(get_dataset_files),
    output:
        h5ad=run_path("{run}", "prepared/prepared.h5ad"),
        zscores=run_path("{run}", "prepared/zscores.tsv"),
        gene_report=report(
            run_path("{run}", "prepared/gene_report.tsv"),
            caption="../report/gene_report.rst",
            category="{run}",
            subcategory="1 preparation",
        ),
        summary=report(
            run_path("{run}", "prepared/summary.tsv"),
            caption="../report/prepare_summary.rst",
            category="{run}",
            subcategory="1 preparation",
        ),
    params:
        settings=get_preparation_params,
    log:
        "logs/{run}/prepare.log",
    benchmark:
        "benchmarks/{run}/prepare.tsv"
    threads: get_threads("prepare", 1)
    resources:
        mem_mb=mem_mb_for("prepare", 500, 12),
        runtime=runtime_for("prepare", 5, 0.05),
    conda:
        "../envs/gloam.yaml"
    script:
        "../../scripts/rule_prepare.py"
