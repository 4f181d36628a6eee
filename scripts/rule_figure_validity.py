"""Snakemake rule ``figure_validity``: validity indices against c (PNG and PDF)."""

from gloam.errors import exit_on_user_error
from gloam.stages import figure_validity, rule_environment

job = snakemake  # noqa: F821 -- injected by Snakemake's script directive

with rule_environment(job.log[0], job.threads):
    exit_on_user_error(
        lambda: figure_validity(
            job.input.validity,
            job.input.selection,
            job.output.png,
            job.output.pdf,
        )
    )
