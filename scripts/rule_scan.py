"""Snakemake rule ``scan``: every random start of fuzzy c-means for one run and one c."""

from gloam.errors import exit_on_user_error
from gloam.stages import rule_environment, run_scan

job = snakemake  # noqa: F821 -- injected by Snakemake's script directive

with rule_environment(job.log[0], job.threads):
    exit_on_user_error(
        lambda: run_scan(
            job.input.scan_input,
            int(job.wildcards.c),
            job.params.settings,
            job.params.seed,
            job.output.scan,
        )
    )
