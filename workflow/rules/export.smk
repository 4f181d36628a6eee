# Exports. Only the gene-set rule reads the core thresholds, so changing them reruns it and the
# figures but never the clustering. Tiny jobs share one group so a cluster gets few of them.


rule export_tables:
    input:
        prepared=run_path("{run}", "prepared/prepared.h5ad"),
        consensus=run_path("{run}", "consensus.npz"),
    output:
        memberships=report(
            run_path("{run}", "memberships.tsv"),
            caption="../report/memberships.rst",
            category="{run}",
            subcategory="4 clusters",
        ),
        centroids=report(
            run_path("{run}", "centroids.tsv"),
            caption="../report/centroids.rst",
            category="{run}",
            subcategory="4 clusters",
        ),
    log:
        "logs/{run}/export_tables.log",
    group:
        "finish"
    threads: get_threads("exports", 1)
    resources:
        mem_mb=mem_mb_for("exports", 400, 3),
        runtime=runtime_for("exports", 2, 0.02),
    conda:
        "../envs/gloam.yaml"
    script:
        "../../scripts/rule_export_tables.py"


rule export_genesets:
    input:
        memberships=run_path("{run}", "memberships.tsv"),
    output:
        genesets=report(
            directory(run_path("{run}", "genesets")),
            patterns=["{name}.gmt"],
            caption="../report/genesets.rst",
            category="{run}",
            subcategory="5 gene sets",
        ),
    params:
        thresholds=config["genesets"]["thresholds"],
    log:
        "logs/{run}/export_genesets.log",
    group:
        "finish"
    threads: get_threads("exports", 1)
    resources:
        mem_mb=mem_mb_for("exports", 400, 3),
        runtime=runtime_for("exports", 2, 0.02),
    conda:
        "../envs/gloam.yaml"
    script:
        "../../scripts/rule_export_genesets.py"


rule export_h5ad:
    input:
        prepared=run_path("{run}", "prepared/prepared.h5ad"),
        consensus=run_path("{run}", "consensus.npz"),
        fuzzifier=run_path("{run}", "fuzzifier.json"),
        selection=run_path("{run}", "selection.json"),
    output:
        h5ad=run_path("{run}", "gloam.h5ad"),
    params:
        settings=get_run_settings,
    log:
        "logs/{run}/export_h5ad.log",
    group:
        "finish"
    threads: get_threads("exports", 1)
    resources:
        mem_mb=mem_mb_for("exports", 400, 4),
        runtime=runtime_for("exports", 2, 0.02),
    conda:
        "../envs/gloam.yaml"
    script:
        "../../scripts/rule_export_h5ad.py"
