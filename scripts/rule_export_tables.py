"""Snakemake rule ``export_tables``: memberships.tsv and centroids.tsv."""

from gloam.errors import exit_on_user_error
from gloam.stages import export_tables, rule_environment

job = snakemake  # noqa: F821 -- injected by Snakemake's script directive

with rule_environment(job.log[0], job.threads):
    exit_on_user_error(
        lambda: export_tables(
            job.input.prepared,
            job.input.consensus,
            job.output.memberships,
            job.output.centroids,
        )
    )
