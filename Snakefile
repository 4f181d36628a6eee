# gloam from a clone: `snakemake --cores 2` runs the demo (see README.md). The workflow itself
# lives in the package (src/gloam/workflow/, also reachable as workflow/), so that an install
# carries it; this file puts the clone's config/config.yaml (when present) under whatever
# --configfile and --config give, and uses the workflow as a module, as any host workflow can.

import sys

from gloam.errors import GloamError
from gloam.planning import add_config_file

try:
    add_config_file(config, "config/config.yaml")
except GloamError as error:
    sys.exit(f"gloam: error: {error}")


module gloam:
    snakefile:
        "src/gloam/workflow/Snakefile"
    config:
        config


use rule * from gloam
