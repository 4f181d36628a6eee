"""Snakemake rule ``figure_profiles``: per-cluster temporal profiles (PNG and PDF)."""

from gloam.errors import exit_on_user_error
from gloam.stages import figure_profiles, rule_environment

job = snakemake  # noqa: F821 -- injected by Snakemake's script directive

with rule_environment(job.log[0], job.threads):
    exit_on_user_error(
        lambda: figure_profiles(
            job.input.prepared,
            job.input.memberships,
            job.input.centroids,
            job.params.thresholds,
            job.params.time_unit,
            job.output.png,
            job.output.pdf,
        )
    )
