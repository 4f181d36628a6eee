"""Snakemake rule ``consensus``: consensus of the aligned starts for the chosen c."""

from gloam.errors import exit_on_user_error
from gloam.stages import rule_environment, run_consensus

job = snakemake  # noqa: F821 -- injected by Snakemake's script directive

with rule_environment(job.log[0], job.threads):
    exit_on_user_error(
        lambda: run_consensus(
            job.input.prepared,
            list(job.input.scans),
            job.input.selection,
            job.output.consensus,
        )
    )
