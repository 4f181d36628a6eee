"""Snakemake rule ``figure_centroid_correlation``: centroid correlation heatmap (PNG and PDF)."""

from gloam.errors import exit_on_user_error
from gloam.stages import figure_centroid_correlation, rule_environment

job = snakemake  # noqa: F821 -- injected by Snakemake's script directive

with rule_environment(job.log[0], job.threads):
    exit_on_user_error(
        lambda: figure_centroid_correlation(
            job.input.centroids,
            job.output.png,
            job.output.pdf,
        )
    )
