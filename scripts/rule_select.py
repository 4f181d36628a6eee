"""Snakemake rule ``select``: structure test, the criteria for every c, the c used, and its
consensus."""

from gloam.errors import exit_on_user_error
from gloam.stages import rule_environment, run_select

job = snakemake  # noqa: F821 -- injected by Snakemake's script directive

with rule_environment(job.log[0], job.threads):
    exit_on_user_error(
        lambda: run_select(
            job.input.scan_input,
            job.input.fuzzifier,
            list(job.input.scans),
            job.params.settings,
            job.params.seed,
            out_validity=job.output.validity,
            out_selection=job.output.selection,
            out_consensus=job.output.consensus,
        )
    )
