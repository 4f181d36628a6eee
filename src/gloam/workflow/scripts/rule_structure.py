# ruff: noqa: E402 -- gloam is imported once the package root is on the path
"""Snakemake rule ``structure``: the structure tests of a run, beside its scans."""

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

from gloam.stages import rule_environment, run_structure

try:
    with rule_environment(job.log[0], job.threads, inputs=job.input, outputs=job.output):
        run_structure(
            job.input.scan_input, job.params.settings, job.params.seed, job.output.structure
        )
finally:
    # Done, or failed with its message: an interrupt during the exit that follows would print
    # a traceback from the handler above, so from here on it is ignored.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
