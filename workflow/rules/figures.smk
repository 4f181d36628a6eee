# Figures, each as PNG and PDF. Grouped with the exports.


rule figure_profiles:
    input:
        prepared=run_path("{run}", "prepared/prepared.h5ad"),
        memberships=run_path("{run}", "memberships.tsv"),
        centroids=run_path("{run}", "centroids.tsv"),
    output:
        png=report(
            run_path("{run}", "figures/profiles.png"),
            caption="../report/profiles.rst",
            category="{run}",
            subcategory="4 clusters",
        ),
        pdf=run_path("{run}", "figures/profiles.pdf"),
    params:
        thresholds=config["genesets"]["thresholds"],
        time_unit=config["figures"]["time_unit"],
    log:
        "logs/{run}/figure_profiles.log",
    group:
        "finish"
    threads: get_threads("figures", 1)
    resources:
        mem_mb=mem_mb_for("figures", 800, 6),
        runtime=runtime_for("figures", 3, 0.05),
    conda:
        "../envs/gloam.yaml"
    script:
        "../../scripts/rule_figure_profiles.py"


rule figure_validity:
    input:
        validity=run_path("{run}", "validity.tsv"),
        selection=run_path("{run}", "selection.json"),
    output:
        png=report(
            run_path("{run}", "figures/validity.png"),
            caption="../report/validity.rst",
            category="{run}",
            subcategory="3 number of clusters",
        ),
        pdf=run_path("{run}", "figures/validity.pdf"),
    log:
        "logs/{run}/figure_validity.log",
    group:
        "finish"
    threads: get_threads("figures", 1)
    resources:
        mem_mb=mem_mb_for("figures", 500, 1),
        runtime=runtime_for("figures", 2, 0.01),
    conda:
        "../envs/gloam.yaml"
    script:
        "../../scripts/rule_figure_validity.py"


rule figure_fuzzifier:
    input:
        choice=run_path("{run}", "fuzzifier.json"),
        curve=run_path("{run}", "fuzzifier_curve.tsv"),
    output:
        png=report(
            run_path("{run}", "figures/fuzzifier.png"),
            caption="../report/fuzzifier.rst",
            category="{run}",
            subcategory="2 fuzzifier",
        ),
        pdf=run_path("{run}", "figures/fuzzifier.pdf"),
    log:
        "logs/{run}/figure_fuzzifier.log",
    group:
        "finish"
    threads: get_threads("figures", 1)
    resources:
        mem_mb=mem_mb_for("figures", 500, 1),
        runtime=runtime_for("figures", 2, 0.01),
    conda:
        "../envs/gloam.yaml"
    script:
        "../../scripts/rule_figure_fuzzifier.py"


rule figure_centroid_correlation:
    input:
        centroids=run_path("{run}", "centroids.tsv"),
    output:
        png=report(
            run_path("{run}", "figures/centroid_correlation.png"),
            caption="../report/centroid_correlation.rst",
            category="{run}",
            subcategory="4 clusters",
        ),
        pdf=run_path("{run}", "figures/centroid_correlation.pdf"),
    log:
        "logs/{run}/figure_centroid_correlation.log",
    group:
        "finish"
    threads: get_threads("figures", 1)
    resources:
        mem_mb=mem_mb_for("figures", 500, 1),
        runtime=runtime_for("figures", 2, 0.01),
    conda:
        "../envs/gloam.yaml"
    script:
        "../../scripts/rule_figure_centroid_correlation.py"
