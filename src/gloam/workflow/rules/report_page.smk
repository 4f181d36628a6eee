# The report pages a biologist reads first: one self-contained HTML page per run (decision,
# figures, tables, gene lookup, methods, links) and an index over every run.


rule report_page:
    input:
        run_files=get_run_files,
    output:
        page=run_path("{run}", "report.html"),
    params:
        run_dir=lambda wildcards: run_path(wildcards.run, ""),
        settings=get_report_settings,
    log:
        "logs/{run}/report_page.log",
    benchmark:
        "benchmarks/{run}/report_page.tsv"
    threads: PLAN.threads("report_page")
    resources:
        mem_mb=resource("report_page", "mem_mb"),
        runtime=resource("report_page", "runtime"),
    conda:
        "../envs/gloam.yaml"
    script:
        "../scripts/rule_report_page.py"


rule report_index:
    input:
        summary=PLAN.summary_path(),
        pages=list(PLAN.report_pages().values()),
    output:
        index=PLAN.index_path(),
    params:
        pages=PLAN.report_pages(),
    log:
        "logs/report_index.log",
    localrule: True
    threads: PLAN.threads("report_index")
    resources:
        mem_mb=resource("report_index", "mem_mb"),
        runtime=resource("report_index", "runtime"),
    conda:
        "../envs/gloam.yaml"
    script:
        "../scripts/rule_report_index.py"
