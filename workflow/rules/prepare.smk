# Demo data (generated only when a dataset points at it and it is missing) and preparation.
# One job per run prepares the matrix and chooses the fuzzifier m from it: every scan job takes
# the matrix with that m (prepared/scan_input.npz) as its input file (no checkpoint). The m
# check clusters shuffled data and gets 2 threads; changing only the fuzzifier settings
# repeats the preparation, which costs seconds, while the scans rerun in any case.


rule demo_data:
    output:
        **DEMO_FILES,
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
        fuzzifier=run_path("{run}", "fuzzifier.json"),
        scan_input=run_path("{run}", "prepared/scan_input.npz"),
        fuzzifier_curve=report(
            run_path("{run}", "fuzzifier_curve.tsv"),
            caption="../report/fuzzifier_curve.rst",
            category="{run}",
            subcategory="2 fuzzifier",
        ),
    params:
        settings=get_preparation_params,
        fuzzifier=get_fuzzifier_settings,
        seed=config["seed"],
    log:
        "logs/{run}/prepare.log",
    benchmark:
        "benchmarks/{run}/prepare.tsv"
    threads: get_threads("prepare", 2)
    resources:
        mem_mb=mem_mb_for("prepare", 1000, 12),
        runtime=runtime_for("prepare", 10, 0.1),
    conda:
        "../envs/gloam.yaml"
    script:
        "../../scripts/rule_prepare.py"
