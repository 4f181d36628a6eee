# The fuzzifier m: a file that every scan job takes as input (no checkpoint).


rule fuzzifier:
    input:
        prepared=run_path("{run}", "prepared/prepared.h5ad"),
    output:
        choice=run_path("{run}", "fuzzifier.json"),
        curve=report(
            run_path("{run}", "fuzzifier_curve.tsv"),
            caption="../report/fuzzifier_curve.rst",
            category="{run}",
            subcategory="2 fuzzifier",
        ),
    params:
        settings=lambda wildcards: get_run(wildcards)["fuzzifier"],
        seed=config["seed"],
    log:
        "logs/{run}/fuzzifier.log",
    benchmark:
        "benchmarks/{run}/fuzzifier.tsv"
    threads: get_threads("fuzzifier", 2)
    resources:
        mem_mb=mem_mb_for("fuzzifier", 500, 20),
        runtime=runtime_for("fuzzifier", 5, 0.5),
    conda:
        "../envs/gloam.yaml"
    script:
        "../../scripts/rule_fuzzifier.py"
