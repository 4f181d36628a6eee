"""Snakemake rule ``figure_fuzzifier``: the fuzzifier curve (PNG and PDF)."""

from gloam.errors import exit_on_user_error
from gloam.stages import figure_fuzzifier, rule_environment

job = snakemake  # noqa: F821 -- injected by Snakemake's script directive

with rule_environment(job.log[0], job.threads):
    exit_on_user_error(
        lambda: figure_fuzzifier(
            job.input.choice,
            job.input.curve,
            job.output.png,
            job.output.pdf,
        )
    )
