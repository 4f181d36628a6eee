"""Snakemake rule ``summary``: one table across every run."""

from gloam.errors import exit_on_user_error
from gloam.stages import rule_environment, summarise_runs

job = snakemake  # noqa: F821 -- injected by Snakemake's script directive

with rule_environment(job.log[0], job.threads):
    exit_on_user_error(
        lambda: summarise_runs(
            job.params.runs,
            list(job.input.fuzzifier),
            list(job.input.selection),
            list(job.input.consensus),
            job.params.thresholds,
            job.output.summary,
        )
    )
