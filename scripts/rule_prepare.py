"""Snakemake rule ``prepare``: validate, normalise, filter and standardise one run's matrix,
then choose the fuzzifier m for it, record the randomised-data curve, and write the scan
jobs' input (the matrix with its m)."""

from gloam.errors import exit_on_user_error
from gloam.stages import (
    rule_environment,
    run_prepare,
    write_fuzzifier_choice,
    write_scan_input,
)

job = snakemake  # noqa: F821 -- injected by Snakemake's script directive


def prepare_and_choose_m() -> None:
    # m is chosen from the z-scores just prepared, not from the file read back.
    zscores = run_prepare(
        job.input.matrix,
        job.input.samples,
        job.params.settings,
        h5ad=job.output.h5ad,
        zscores=job.output.zscores,
        gene_report=job.output.gene_report,
        summary=job.output.summary,
    )
    m = write_fuzzifier_choice(
        zscores,
        job.params.fuzzifier,
        job.params.seed,
        job.output.fuzzifier,
        job.output.fuzzifier_curve,
    )
    write_scan_input(zscores, m, job.output.scan_input)


with rule_environment(job.log[0], job.threads):
    exit_on_user_error(prepare_and_choose_m)
