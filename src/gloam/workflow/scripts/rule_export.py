# ruff: noqa: E402 -- gloam is imported once the package root is on the path
"""Snakemake rule ``export``: tables, gloam.h5ad and the threshold-free figures of a run."""

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

from gloam.artifacts import figure_paths
from gloam.stages import export_results, rule_environment

out = job.output

try:
    with rule_environment(job.log[0], job.threads, inputs=job.input, outputs=job.output):
        export_results(
            job.input.prepared,
            job.input.consensus,
            job.input.fuzzifier,
            job.input.fuzzifier_curve,
            job.input.selection,
            job.input.validity,
            job.params.settings,
            memberships=out.memberships,
            centroids=out.centroids,
            clusters=out.clusters,
            robustness=out.robustness,
            h5ad=out.h5ad,
            figures=figure_paths("export", out),
        )
finally:
    # Done, or failed with its message: an interrupt during the exit that follows would print
    # a traceback from the handler above, so from here on it is ignored.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
