# Exports and figures: two jobs per run. `export` does not read the core thresholds, so
# changing them reruns only `core_genes` (and the summary), never the clustering or `export`.
# Both share one group, so a cluster gets one job per run for them.


rule export:
    input:
        prepared=run_path("{run}", "prepared/prepared.h5ad"),
        consensus=run_path("{run}", "consensus.npz"),
        fuzzifier=run_path("{run}", "fuzzifier.json"),
        fuzzifier_curve=run_path("{run}", "fuzzifier_curve.tsv"),
        selection=run_path("{run}", "selection.json"),
        validity=run_path("{run}", "validity.tsv"),
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
        clusters=report(
            run_path("{run}", "clusters.tsv"),
            caption="../report/clusters.rst",
            category="{run}",
            subcategory="4 clusters",
        ),
        robustness=run_path("{run}", "robustness.tsv"),
        h5ad=run_path("{run}", "gloam.h5ad"),
        **figure_outputs("export"),
    params:
        settings=get_run_settings,
    log:
        "logs/{run}/export.log",
    benchmark:
        "benchmarks/{run}/export.tsv"
    group:
        "finish"
    threads: PLAN.threads("export")
    resources:
        mem_mb=resource("export", "mem_mb"),
        runtime=resource("export", "runtime"),
    conda:
        "../envs/gloam.yaml"
    script:
        "../scripts/rule_export.py"


rule core_genes:
    input:
        prepared=run_path("{run}", "prepared/prepared.h5ad"),
        consensus=run_path("{run}", "consensus.npz"),
        # Not read: it orders core_genes after export, so the group "finish" is one connected
        # pair and a cluster gets one submission per run for both.
        memberships=run_path("{run}", "memberships.tsv"),
    output:
        genesets=report(
            directory(run_path("{run}", "genesets")),
            patterns=["{name}.gmt"],
            caption="../report/genesets.rst",
            category="{run}",
            subcategory="5 gene sets",
        ),
        **figure_outputs("core_genes"),
    params:
        thresholds=SETTINGS["genesets"]["thresholds"],
        time_unit=get_time_unit,
    log:
        "logs/{run}/core_genes.log",
    benchmark:
        "benchmarks/{run}/core_genes.tsv"
    group:
        "finish"
    threads: PLAN.threads("core_genes")
    resources:
        mem_mb=resource("core_genes", "mem_mb"),
        runtime=resource("core_genes", "runtime"),
    conda:
        "../envs/gloam.yaml"
    script:
        "../scripts/rule_core_genes.py"
