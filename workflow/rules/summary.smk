# One table across every run (dataset x settings variant).


rule summary:
    input:
        unpack(get_summary_inputs),
    output:
        summary=report(
            f"{RESULTS}/summary.tsv",
            caption="../report/summary.rst",
            category="Summary",
        ),
    params:
        runs=[
            {key: RUNS[run][key] for key in ("run", "dataset", "condition", "variant")}
            for run in RUNS
        ],
        thresholds=config["genesets"]["thresholds"],
    log:
        "logs/summary.log",
    threads: get_threads("summary", 1)
    resources:
        mem_mb=mem_mb_for("summary", 500, 2),
        runtime=runtime_for("summary", 2, 0.02),
    conda:
        "../envs/gloam.yaml"
    script:
        "../../scripts/rule_summary.py"
