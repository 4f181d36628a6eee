# One table across every run (dataset x settings variant). It reads a few small files per run,
# so it runs on the controlling machine, never as a cluster job.


rule summary:
    input:
        unpack(get_summary_inputs),
    output:
        summary=report(
            PLAN.summary_path(),
            caption="../report/summary.rst",
            category="Summary",
        ),
        sensitivity=PLAN.sensitivity_path(),
        matches=PLAN.matches_path(),
    params:
        runs=PLAN.summary_runs(),
        thresholds=SETTINGS["genesets"]["thresholds"],
    log:
        "logs/summary.log",
    localrule: True
    threads: PLAN.threads("summary")
    resources:
        mem_mb=resource("summary", "mem_mb"),
        runtime=resource("summary", "runtime"),
    conda:
        "../envs/gloam.yaml"
    script:
        "../scripts/rule_summary.py"
