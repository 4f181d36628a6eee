# Demo data (generated only when a dataset points at it and it is missing) and preparation.
# One job per run prepares the matrix and chooses the fuzzifier m from it: every scan job takes
# the matrix with that m (prepared/scan_input.npz) as its input file (no checkpoint). The m
# check clusters shuffled data and gets 2 threads; changing only the fuzzifier settings
# repeats the preparation, which costs seconds, while the scans rerun in any case.


# A second's work: it runs on the controlling machine, never as a cluster job.
rule demo_data:
    output:
        **PLAN.demo_files,
    params:
        seed=SETTINGS["demo"]["seed"],
        n_genes=SETTINGS["demo"]["n_genes"],
        n_replicates=SETTINGS["demo"]["n_replicates"],
        mutant=SETTINGS["demo"]["mutant"],
    log:
        "logs/demo_data.log",
    localrule: True
    threads: PLAN.threads("demo_data")
    resources:
        mem_mb=resource("demo_data", "mem_mb"),
        runtime=resource("demo_data", "runtime"),
    conda:
        "../envs/gloam.yaml"
    script:
        "../scripts/rule_demo_data.py"


rule prepare:
    wildcard_constraints:
        run=PLAN.owner_pattern("prepare"),
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
        seed=SETTINGS["seed"],
    log:
        "logs/{run}/prepare.log",
    benchmark:
        "benchmarks/{run}/prepare.tsv"
    threads: PLAN.threads("prepare")
    resources:
        mem_mb=resource("prepare", "mem_mb"),
        runtime=resource("prepare", "runtime"),
    conda:
        "../envs/gloam.yaml"
    script:
        "../scripts/rule_prepare.py"
