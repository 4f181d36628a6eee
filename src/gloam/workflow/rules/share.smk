# Settings variants that differ only downstream share upstream jobs: the first run with the
# same preparation (and fuzzifier) settings prepares, the first with the same scan settings
# scans, the first with the same comparison settings compares (gloam.planning.Plan.owner).
# Every other run gets those files as hard links in its own folder, so each run folder stays
# complete. The constraints give each run folder one producing rule.


rule share_prepared:
    input:
        unpack(shared_inputs("prepare")),
    output:
        **PLAN.shared_outputs("prepare"),
    wildcard_constraints:
        run=PLAN.run_pattern(PLAN.sharing_runs("prepare")),
    log:
        "logs/{run}/share_prepared.log",
    localrule: True
    conda:
        "../envs/gloam.yaml"
    script:
        "../scripts/rule_share.py"


rule share_comparison:
    input:
        unpack(shared_inputs("compare")),
    output:
        comparison=directory(run_path("{run}", "comparison")),
    wildcard_constraints:
        run=PLAN.run_pattern(PLAN.sharing_runs("compare")),
    log:
        "logs/{run}/share_comparison.log",
    localrule: True
    conda:
        "../envs/gloam.yaml"
    script:
        "../scripts/rule_share.py"
