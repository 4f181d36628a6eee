# ruff: noqa: E402 -- gloam is imported once the package root is on the path
"""Snakemake rule ``prepare``: validate, normalise, select and standardise one run's matrix,
then choose the fuzzifier m for it, record the randomised-data curve, and write the scan
jobs' input (the matrix with its m and the replicates for resampling)."""

import signal
import sys
from pathlib import Path

job = snakemake  # noqa: F821 -- injected by Snakemake's script directive
# Ctrl-C reaches the jobs too: stop with status 130 (128 + SIGINT) and no traceback; Snakemake
# reports the interruption, and unfinished outputs never carry their final names. Later
# SIGINTs are ignored: a second one (Snakemake forwards it, the terminal sends it to the group)
# would otherwise land in the exit's own clean-up and print a traceback there.
signal.signal(
    signal.SIGINT, lambda *_: (signal.signal(signal.SIGINT, signal.SIG_IGN), sys.exit(130))
)
# The gloam this script belongs to (<package root>/gloam/workflow/scripts), the controller's,
# comes first: never another gloam that the job's environment may hold.
sys.path.insert(0, str(Path(job.scriptdir).resolve().parents[2]))

from gloam.stages import (
    comparison_input,
    rule_environment,
    run_prepare,
    write_fuzzifier_choice,
    write_scan_input,
)

try:
    with rule_environment(job.log[0], job.threads, inputs=job.input, outputs=job.output):
        # m is chosen from the z-scores just prepared, not from the file read back.
        prepared = run_prepare(
            job.input.matrix,
            job.input.samples,
            job.params.settings,
            h5ad=job.output.h5ad,
            zscores=job.output.zscores,
            gene_report=job.output.gene_report,
            summary=job.output.summary,
        )
        m = write_fuzzifier_choice(
            prepared.zscores,
            job.params.fuzzifier,
            job.params.seed,
            job.output.fuzzifier,
            job.output.fuzzifier_curve,
        )
        write_scan_input(
            prepared.zscores,
            m,
            job.output.scan_input,
            columns=prepared.columns,
            replicates=prepared.replicates,
            samples=prepared.samples,
            selection_method=prepared.selection_method,
            # The comparison's changing gene-condition profiles: the scan jobs cluster them
            # at their c too, so the comparison's scan runs side by side.
            comparison=comparison_input(
                prepared, job.params.settings["fdr"], job.params.settings["min_log2_range"]
            ),
        )
finally:
    # Done, or failed with its message: an interrupt during the exit that follows would print
    # a traceback from the handler above, so from here on it is ignored.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
