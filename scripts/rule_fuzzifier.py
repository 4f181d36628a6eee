"""Snakemake rule ``fuzzifier``: choose the fuzzifier m and record the randomised-data curve."""

from gloam.errors import exit_on_user_error
from gloam.stages import rule_environment, run_fuzzifier

job = snakemake  # noqa: F821 -- injected by Snakemake's script directive

with rule_environment(job.log[0], job.threads):
    exit_on_user_error(
        lambda: run_fuzzifier(
            job.input.prepared,
            job.params.settings,
            job.params.seed,
            job.output.choice,
            job.output.curve,
        )
    )
